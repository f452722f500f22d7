package mesh

import (
	"math"
	"testing"

	"sluice/pkg/volume"
)

// Tolerance of TestClipTurningCap: twice the largest error measured on
// 2026-12-05 (0.14°, R 10, θ 30°).
const tolClipCap = 0.3 // degrees

// TestClipTurningCap: a sphere (radius R) cut by a plane at signed height h
// from its centre; the kept cap's boundary circle has ∮κ_g ds = 2π·h/R
// (Gauss–Bonnet: ∫K over the cap is 2π(1 − h/R)), and the plane clipped to
// the inside of the sphere is a disc with ∮κ_g ds = 2π. Their ratio is the
// cosine of the cap's angle with the plane, −cos θ with θ the contact angle
// through the outside phase (science.md, spherical cap: angle through the
// cap α, cos α = −h/R). Source: analytic geometry. Analytic fields (signed
// distances, not data) test the mesh and the clipping alone; θ 30°, 60°,
// 90°, 120° for R 10, 16, 24 voxels. The same sums also satisfy the
// discrete Gauss–Bonnet identity exactly: Σ turning = 2πχ − Σ deficits of
// the kept vertices, with χ = 1 for a cap. Seen failing with a cut point
// also made for an edge seen from its dropped end (turnings in the
// hundreds, θ NaN) and with cut points at a vertex lying on the plane not
// separated (the cap's turning 40π at R 10, θ 90°).
func TestClipTurningCap(t *testing.T) {
	for _, R := range []float64{10, 16, 24} {
		for _, theta := range []float64{30, 60, 90, 120} {
			alpha := 180 - theta
			n := int(2*R) + 14
			wall := 6.5
			cy, cx := float64(n)/2+0.3, float64(n)/2-0.2
			zc := wall - R*math.Cos(alpha*math.Pi/180)
			box := volume.BoxOf(n, n, n)
			a := field(box, func(z, y, x float64) float64 {
				return R - math.Sqrt((z-zc)*(z-zc)+(y-cy)*(y-cy)+(x-cx)*(x-cx))
			})
			b := field(box, func(z, y, x float64) float64 { return z - wall })
			sphere, plane := March(a, 0, box), March(b, 0, box)
			keepS := make([]float64, len(sphere.Vertices))
			for i, v := range sphere.Vertices {
				keepS[i] = Sample(b, v)
			}
			keepP := make([]float64, len(plane.Vertices))
			for i, v := range plane.Vertices {
				keepP[i] = Sample(a, v)
			}
			var wn, ns float64
			sphere.ClipTurning(keepS, func(p [3]float64, _ int32, turn float64) { wn += turn })
			plane.ClipTurning(keepP, func(p [3]float64, _ int32, turn float64) { ns += turn })
			got := math.Acos(-wn/ns) * 180 / math.Pi
			t.Logf("R %v θ %v°: ∮κ_g cap %.4f (2π cos α %.4f), disc %.4f (2π) → θ %.3f° (%+.3f°)", R, theta, wn, 2*math.Pi*math.Cos(alpha*math.Pi/180), ns, got, got-theta)
			if math.Abs(got-theta) > tolClipCap {
				t.Errorf("R %v θ %v°: %.3f°", R, theta, got)
			}
			// Discrete Gauss–Bonnet on the kept cap, χ = 1 (the sphere
			// lies inside the box for these R, so the cap is a disc).
			d := sphere.AngleDeficits()
			var k float64
			for i := range d {
				if keepS[i] >= clipEps || math.Abs(keepS[i]) < clipEps {
					k += d[i]
				}
			}
			if e := wn + k - 2*math.Pi; math.Abs(e) > 1e-9 {
				t.Errorf("R %v θ %v°: Σ turning + Σ deficits − 2π = %g", R, theta, e)
			}
		}
	}
}
