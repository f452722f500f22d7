package mesh

import (
	"math"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// Tolerances of TestGaussianCurvatureLocal, twice the errors measured on
// 2026-12-05: sphere caps −0.03 %, −1.34 %, −0.76 %, −0.40 % (α 30°, 60°,
// 90°, 120°); torus halves ∓0.0057 of ±4π.
const (
	tolCapK      = 0.027
	tolTorusHalf = 0.012
)

func sum(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x
	}
	return s
}

// TestGaussBonnetClosed: the angle deficits of a closed mesh sum to
// 2π·χ(surface): 4π on spheres (smooth field and binary ball), 0 on tori,
// 8π on a hollow ball (two spheres). Source: Gauss–Bonnet, ∫K dA = 2πχ for
// a closed surface (science.md: ∫_{∂X} K dA = 4πχ(X)); the discrete sum
// equals it to rounding when the mesh is a closed 2-manifold (measured
// |error| < 1e-9). Fails when a triangle's angle is left out or a vertex
// is counted twice.
func TestGaussBonnetClosed(t *testing.T) {
	one := phase.Of(1)
	binary := func(n int, draw func(lab *volume.Labels)) *Mesh {
		lab := volume.NewShape[uint8](n, n, n, 0)
		draw(lab)
		f := Indicator(lab, one, lab.Box.Grow(1))
		return March(f, 0.5, f.Box)
	}
	R := 20.0
	n := int(2*R) + 6
	c := [3]float64{float64(n)/2 + 0.21, float64(n)/2 - 0.33, float64(n)/2 + 0.14}
	sphere := March(field(volume.BoxOf(n, n, n), func(z, y, x float64) float64 {
		return R - math.Sqrt((z-c[0])*(z-c[0])+(y-c[1])*(y-c[1])+(x-c[2])*(x-c[2]))
	}), 0, volume.BoxOf(n, n, n))
	torus := March(field(volume.BoxOf(24, 56, 56), func(z, y, x float64) float64 {
		q := math.Hypot(y-28.3, x-27.8) - 18
		return 6 - math.Hypot(q, z-12.2)
	}), 0, volume.BoxOf(24, 56, 56))
	for _, k := range []struct {
		name string
		m    *Mesh
		want float64
	}{
		{"sphere field R 20", sphere, 4 * math.Pi},
		{"torus field 18/6", torus, 0},
		{"binary ball R 12", binary(30, func(l *volume.Labels) { synth.Ball(l, [3]float64{15.2, 14.7, 15.1}, 12, 1) }), 4 * math.Pi},
		{"binary torus 12/5", binary(40, func(l *volume.Labels) { synth.Torus(l, [3]float64{20.3, 19.8, 20.1}, 12, 5, 1) }), 0},
		{"binary hollow ball", binary(36, func(l *volume.Labels) { synth.Shell(l, [3]float64{18.1, 17.8, 18.3}, 7, 14, 1) }), 8 * math.Pi},
	} {
		got := sum(k.m.AngleDeficits())
		t.Logf("%s: Σ deficit %.12f, want %.12f (mesh χ %d)", k.name, got, k.want, k.m.Euler())
		if math.Abs(got-k.want) > 1e-9 || math.Abs(got-2*math.Pi*float64(k.m.Euler())) > 1e-9 {
			t.Errorf("%s: Σ angle deficit %.9f, want %.9f", k.name, got, k.want)
		}
	}
}

// TestGaussianCurvatureLocal: on parts of smooth surfaces the deficits
// measure the Gaussian curvature itself, not only its closed total. Source:
// analytic geometry — a sphere of radius R has K = 1/R² everywhere; a torus
// (major radius a, minor r) has ∫K dA = +4π over its outer half (distance
// from the axis > a) and −4π over its inner half (K = cos v/(r(a + r cos
// v)), dA = r(a + r cos v) du dv). Sphere caps above the heights R cos α
// (α 30°, 60°, 90°, 120°), mean K = Σ deficit / Σ vertex area against 1/R²:
// measured errors below; torus halves (the cut runs where K = 0).
func TestGaussianCurvatureLocal(t *testing.T) {
	R := 20.0
	n := int(2*R) + 6
	c := [3]float64{float64(n)/2 + 0.21, float64(n)/2 - 0.33, float64(n)/2 + 0.14}
	m := March(field(volume.BoxOf(n, n, n), func(z, y, x float64) float64 {
		return R - math.Sqrt((z-c[0])*(z-c[0])+(y-c[1])*(y-c[1])+(x-c[2])*(x-c[2]))
	}), 0, volume.BoxOf(n, n, n))
	d, a := m.AngleDeficits(), m.VertexAreas()
	if math.Abs(sum(a)-m.Area()) > 1e-9*m.Area() {
		t.Errorf("vertex areas sum to %v, mesh area %v", sum(a), m.Area())
	}
	for _, alpha := range []float64{30, 60, 90, 120} {
		h := R * math.Cos(alpha*math.Pi/180)
		var sd, sa float64
		for i, v := range m.Vertices {
			if v[0]-c[0] > h {
				sd += d[i]
				sa += a[i]
			}
		}
		k := sd / sa
		e := k*R*R - 1
		t.Logf("sphere R %v, cap α %v°: mean K %.6g, 1/R² %.6g (%+.2f%%); ∫K %.4f, 2π(1−cos α) %.4f", R, alpha, k, 1/(R*R), 100*e, sd, 2*math.Pi*(1-math.Cos(alpha*math.Pi/180)))
		if math.Abs(e) > tolCapK {
			t.Errorf("cap α %v°: mean Gaussian curvature %+.2f%% off 1/R²", alpha, 100*e)
		}
	}
	const ma, mr = 18.0, 6.0
	o := [3]float64{12.2, 28.3, 27.8}
	tm := March(field(volume.BoxOf(24, 56, 56), func(z, y, x float64) float64 {
		q := math.Hypot(y-o[1], x-o[2]) - ma
		return mr - math.Hypot(q, z-o[0])
	}), 0, volume.BoxOf(24, 56, 56))
	var outer, inner float64
	td := tm.AngleDeficits()
	for i, v := range tm.Vertices {
		if math.Hypot(v[1]-o[1], v[2]-o[2]) > ma {
			outer += td[i]
		} else {
			inner += td[i]
		}
	}
	t.Logf("torus %v/%v: outer ∫K %.4f, inner %.4f, want ±4π = %.4f", ma, mr, outer, inner, 4*math.Pi)
	if math.Abs(outer-4*math.Pi) > tolTorusHalf || math.Abs(inner+4*math.Pi) > tolTorusHalf {
		t.Errorf("torus halves: ∫K %.4f and %.4f, want ±%.4f", outer, inner, 4*math.Pi)
	}
}
