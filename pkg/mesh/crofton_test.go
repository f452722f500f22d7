package mesh

import (
	"fmt"
	"math"
	"testing"

	"sluice/pkg/morph"
	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// planeAreaInCube returns the area of {p: u·p = t} ∩ [0,L]³ for a unit
// normal u with no zero component: A = dV/dt with
// V(t) = Σ_v (−1)^{k(v)} max(0, t − u·v)³ / (6 u0 u1 u2) over the cube
// vertices v (k = number of coordinates equal to L). Source: inclusion–
// exclusion for the volume of a cube cut by a half-space (derived).
func planeAreaInCube(u [3]float64, t, L float64) float64 {
	a := [3]float64{math.Abs(u[0]), math.Abs(u[1]), math.Abs(u[2])}
	var s float64
	for v := 0; v < 8; v++ {
		k := 0
		var d float64
		for j := 0; j < 3; j++ {
			if v>>j&1 == 1 {
				k++
				d += a[j] * L
			}
		}
		if e := t - d; e > 0 {
			s += math.Pow(-1, float64(k)) * e * e
		}
	}
	return s / (2 * a[0] * a[1] * a[2])
}

// binaryPlaneBias returns the orientation average of (binary mesh area) /
// (true area) for digitised planes: the response of marching cubes at level
// 0.5 on a binary indicator, averaged over normals from a Fibonacci lattice
// on the sphere (cubic symmetry folds them into the first octant).
func binaryPlaneBias(t *testing.T, ndir int) float64 {
	const n = 36
	L := float64(n - 1)
	golden := math.Pi * (3 - math.Sqrt(5))
	var sum float64
	var cnt int
	for i := 0; i < ndir; i++ {
		z := 1 - (2*float64(i)+1)/float64(ndir)
		r := math.Sqrt(1 - z*z)
		ph := golden * float64(i)
		u := [3]float64{math.Abs(z), math.Abs(r * math.Cos(ph)), math.Abs(r * math.Sin(ph))}
		if u[0] < 1e-3 || u[1] < 1e-3 || u[2] < 1e-3 {
			continue
		}
		t0 := (u[0]+u[1]+u[2])*L/2 + 0.37
		f := field(volume.BoxOf(n, n, n), func(z, y, x float64) float64 {
			if u[0]*z+u[1]*y+u[2]*x < t0 {
				return 1
			}
			return 0
		})
		cubes := volume.BoxOf(n-1, n-1, n-1)
		sum += Area(f, 0.5, cubes) / planeAreaInCube(u, t0, L)
		cnt++
	}
	return sum / float64(cnt)
}

// Crofton surface (package morph: 13-direction line-intersection counts)
// against marching-cubes area of the same binary images (polygonal surface),
// two independent estimators.
//
// The binary mesh (vertices at edge midpoints) overestimates digital
// surfaces: on digitised planes its response, averaged over orientations
// here from 200 planes, is measured at about +7 % (the same order as
// reported for binary marching cubes in the literature, e.g. Lindblad 2005,
// Image Vis. Comput. 23:111, from memory). After dividing by that plane
// average — calibrated on planes only, not on the test objects — the two
// estimators must agree within 1 % on balls (R = 8…32), a torus and Boolean
// models (η = 2, 3.5, r = 12), all isotropic on average.
//
// Gaussian smoothing before meshing is no fix (measured during development:
// σ = 1 gives −3 % on a ball of R = 8 and −15 % on the η = 2 Boolean model;
// it fills the narrow gaps and rounds the creases). Measured agreement:
// within 0.5 % on all objects; tolerance 1 %.
func TestCroftonAgreesWithMesh(t *testing.T) {
	bias := binaryPlaneBias(t, 200)
	t.Logf("binary marching cubes, orientation-averaged plane response: %+.2f%%", 100*(bias-1))
	if bias < 1.03 || bias > 1.12 {
		t.Fatalf("plane response %.4f outside the expected +3…+12 %%", bias)
	}
	s := phase.Of(1)
	check := func(name string, lab *volume.Labels) {
		_, inner := morph.TileOrigins(lab.Box, lab.Box)
		h := morph.Cells(lab, s, inner)
		c := morph.FromHistogram(&h).Surface
		m := Area(Indicator(lab, s, lab.Box), 0.5, inner) / bias
		rel := c/m - 1
		t.Logf("%s: Crofton %.1f, mesh/plane response %.1f (Crofton %+.2f%%)", name, c, m, 100*rel)
		if math.Abs(rel) > 0.01 {
			t.Errorf("%s: Crofton %.1f vs calibrated mesh %.1f (%.2f%% > 1%%)", name, c, m, 100*rel)
		}
	}
	for _, R := range []float64{8, 16, 32} {
		n := int(2*R) + 6
		lab := volume.NewShape[uint8](n, n, n, 1)
		synth.Ball(lab, [3]float64{float64(n)/2 + 0.3, float64(n)/2 - 0.2, float64(n)/2 + 0.1}, R, 1)
		check(fmt.Sprintf("ball R=%g", R), lab)
	}
	lab := volume.NewShape[uint8](24, 64, 64, 1)
	synth.Torus(lab, [3]float64{11.6, 31.7, 31.2}, 20, 7, 1)
	check("torus R=20 r=7", lab)
	for _, eta := range []float64{2, 3.5} {
		lab := volume.NewShape[uint8](128, 128, 128, 1)
		synth.Boolean(lab, synth.BooleanIntensity(eta, 12), 12, 1, 77)
		check(fmt.Sprintf("Boolean η=%g r=12", eta), lab)
	}
}
