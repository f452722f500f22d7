package contact

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"gonum.org/v1/gonum/stat"

	"sluice/pkg/levelset"
	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

var codes = phase.Default()

// capScene draws a nonwetting drop whose contact angle through the
// surrounding wetting phase is theta (drop angle 180° − theta, science.md
// spherical cap) on a wall at a half-integer z, so the digital wall surface
// lies on the plane of the analytic cap.
func capScene(r, theta float64) (*volume.Labels, synth.CapScene) {
	drop := 180 - theta
	c := synth.CapScene{Wall: 7.5, R: r, DropAngle: drop}
	top := c.Wall + r*(1-math.Cos(drop*math.Pi/180))
	half := r
	if drop < 90 {
		half = c.BaseRadius()
	}
	n := int(2*half) + 2*9 + 2
	c.Centre = [2]float64{float64(n)/2 + 0.23, float64(n)/2 - 0.41}
	lab := volume.NewShape[uint8](int(top)+9, n, n, 0)
	c.Draw(lab, codes.Solid, codes.Nonwetting, codes.Wetting)
	return lab, c
}

// wedgeScene draws a flat wall and a flat w–n interface meeting it at theta
// through the wetting phase.
func wedgeScene(theta float64, ns, line [3]float64) *volume.Labels {
	lab := volume.NewShape[uint8](44, 44, 44, 0)
	w := synth.WedgeScene{Point: [3]float64{22.2, 21.7, 22.1}, Solid: ns, Line: line, Angle: theta}
	w.Draw(lab, codes.Solid, codes.Nonwetting, codes.Wetting)
	return lab
}

func whole(lab *volume.Labels, opt Options) Partial {
	s, w, n := codes.Sets()
	return Measure(lab, s, w, n, lab.Box, opt)
}

// Source: analytic geometry of a spherical cap on a plane (science.md: the
// angle through the surrounding phase is 180° − the angle through the cap).
// Tolerance 5° on the mean from the task; published automated methods
// report spreads of 15–25° on real rock (science.md §4, from memory), so a
// few degrees of digitisation bias on ideal shapes is the relevant scale.
func TestCapAngles(t *testing.T) {
	for _, th := range []float64{30, 60, 90, 120, 150} {
		lab, _ := capScene(22, th)
		p := whole(lab, Options{})
		t.Logf("cap R=22, θ=%3.0f°: %3d samples, mean %6.2f° (error %+.2f°), median %6.2f°, std %.2f°",
			th, p.N, p.Mean(), p.Mean()-th, p.Median(), p.Std())
		if p.N < 20 {
			t.Errorf("θ=%v: only %d samples on a contact line of length %.0f", th, p.N, 2*math.Pi*22*math.Sin(th*math.Pi/180))
		}
		if math.Abs(p.Mean()-th) > 5 {
			t.Errorf("θ=%v: mean %.2f°, want within 5°", th, p.Mean())
		}
	}
}

// Source: analytic geometry — synth.WedgeScene puts a flat wall and a flat
// interface at a known angle; here both planes are tilted against the grid.
func TestTiltedWedges(t *testing.T) {
	s, w, n := codes.Sets()
	geoms := []struct {
		name       string
		wall, line [3]float64
		tol        float64
	}{
		{"tilted wall A", [3]float64{1, 0.3, 0.2}, [3]float64{0, 0.5541, -0.8325}, 5},
		{"tilted wall B", [3]float64{0.8, 0.36, -0.48}, [3]float64{0.6, -0.48, 0.64}, 5},
		// A contact line along a lattice axis repeats one staircase along
		// the whole line, so nothing averages: the worst case, looser bound.
		{"axis wall, axis line", [3]float64{1, 0, 0}, [3]float64{0, 1, 0}, 8},
	}
	for _, g := range geoms {
		for _, th := range []float64{30, 60, 120, 150} {
			lab := wedgeScene(th, g.wall, g.line)
			// Keep the samples whose fit window lies inside the scene.
			p := Measure(lab, s, w, n, lab.Box.Grow(-13), Options{})
			t.Logf("%s, θ=%3.0f°: %2d samples, mean %6.2f° (error %+.2f°), std %.2f°", g.name, th, p.N, p.Mean(), p.Mean()-th, p.Std())
			if p.N < 5 || math.Abs(p.Mean()-th) > g.tol {
				t.Errorf("%s, θ=%v: %d samples, mean %.2f°, want within %v°", g.name, th, p.N, p.Mean(), g.tol)
			}
		}
	}
}

// Source: gonum stat (Mean, StdDev, Quantile with the empirical CDF) on the
// per-sample angles returned by Angle — the partial's statistics must agree
// with a direct computation (median to the 0.1° bin width). Every line
// voxel is a sample here (AllLineVoxels); TestThinnedSampleCount checks
// which ones thinning keeps.
func TestPartialStatistics(t *testing.T) {
	lab, _ := capScene(20, 70)
	s, w, n := codes.Sets()
	p := Measure(lab, s, w, n, lab.Box, Options{AllLineVoxels: true})
	var angles []float64
	for z := lab.Box.Min[0]; z < lab.Box.Max[0]; z++ {
		for y := lab.Box.Min[1]; y < lab.Box.Max[1]; y++ {
			for x := lab.Box.Min[2]; x < lab.Box.Max[2]; x++ {
				if a, ok := Angle(lab, s, w, n, [3]int{z, y, x}, Options{}); ok {
					angles = append(angles, a)
				}
			}
		}
	}
	if int64(len(angles)) != p.N || p.N < 20 {
		t.Fatalf("Angle found %d samples, Measure %d", len(angles), p.N)
	}
	sort.Float64s(angles)
	if d := math.Abs(p.Mean() - stat.Mean(angles, nil)); d > 1e-9 {
		t.Errorf("mean %v, gonum %v", p.Mean(), stat.Mean(angles, nil))
	}
	if d := math.Abs(p.Std() - stat.StdDev(angles, nil)); d > 1e-6 {
		t.Errorf("std %v, gonum %v", p.Std(), stat.StdDev(angles, nil))
	}
	if d := math.Abs(p.Median() - stat.Quantile(0.5, stat.Empirical, angles, nil)); d > 0.1 {
		t.Errorf("median %v, gonum %v", p.Median(), stat.Quantile(0.5, stat.Empirical, angles, nil))
	}
	h := p.Histogram1Deg()
	var tot int64
	for i, c := range h {
		tot += c
		var want int64
		for _, a := range angles {
			if int(a) == i {
				want++
			}
		}
		if c != want {
			t.Errorf("1° bin %d: %d, direct count %d", i, c, want)
		}
	}
	if tot != p.N {
		t.Errorf("1° histogram holds %d of %d samples", tot, p.N)
	}
}

func TestEmptyPartial(t *testing.T) {
	lab := volume.NewShape[uint8](20, 20, 20, 0)
	synth.Fill(lab, codes.Wetting, func(z, y, x float64) bool { return z > 5 })
	p := whole(lab, Options{})
	if p.N != 0 || !math.IsNaN(p.Mean()) || !math.IsNaN(p.Median()) || !math.IsNaN(p.Std()) {
		t.Errorf("no contact line: %+v mean %v median %v std %v", p, p.Mean(), p.Median(), p.Std())
	}
}

// Source: architecture.md — whatever the tiling, the step result equals the
// whole-volume result (exactly for counts and histograms, to rounding for
// sums). Tiles at random positions, fixed seed, partials through JSON.
func TestTileAdditivity(t *testing.T) {
	lab, _ := capScene(14, 110)
	synth.Ball(lab, [3]float64{9, 8, 30}, 7, codes.Nonwetting) // a second, cut drop
	s, w, n := codes.Sets()
	for _, opt := range []Options{{}, {Radius: 7, LineHalfWidth: 2}, {AllLineVoxels: true}} {
		ref := Measure(lab, s, w, n, lab.Box, opt)
		rng := rand.New(rand.NewPCG(3, 5))
		cores := randomCores(lab.Box, rng, 2)
		var sum Partial
		for _, c := range cores {
			tile := lab.Crop(c.Grow(opt.Halo()).Intersect(lab.Box), 0)
			part := Measure(tile, s, w, n, c, opt)
			buf, err := json.Marshal(part)
			if err != nil {
				t.Fatal(err)
			}
			var back Partial
			if err := json.Unmarshal(buf, &back); err != nil {
				t.Fatal(err)
			}
			sum.Add(&back)
		}
		if ref.N < 20 || sum.N != ref.N {
			t.Fatalf("%d tiles: %d samples, whole volume %d", len(cores), sum.N, ref.N)
		}
		for i := range ref.Hist {
			if sum.Hist[i] != ref.Hist[i] {
				t.Fatalf("histogram bin %d: %d, whole volume %d", i, sum.Hist[i], ref.Hist[i])
			}
		}
		if math.Abs(sum.Sum-ref.Sum) > 1e-9*ref.Sum || math.Abs(sum.SumSq-ref.SumSq) > 1e-9*ref.SumSq {
			t.Errorf("sums %.15g %.15g, whole volume %.15g %.15g", sum.Sum, sum.SumSq, ref.Sum, ref.SumSq)
		}
		t.Logf("%d tiles, halo %d: %d samples, mean %.4f° = whole %.4f°", len(cores), opt.Halo(), sum.N, sum.Mean(), ref.Mean())
	}
}

func randomCores(box volume.Box, rng *rand.Rand, cuts int) []volume.Box {
	var edges [3][]int
	for a := 0; a < 3; a++ {
		e := []int{box.Min[a], box.Max[a]}
		for i := 0; i < cuts; i++ {
			e = append(e, box.Min[a]+1+rng.IntN(box.Max[a]-box.Min[a]-1))
		}
		sort.Ints(e)
		edges[a] = e
	}
	var out []volume.Box
	for i := 0; i+1 < len(edges[0]); i++ {
		for j := 0; j+1 < len(edges[1]); j++ {
			for k := 0; k+1 < len(edges[2]); k++ {
				b := volume.Box{Min: [3]int{edges[0][i], edges[1][j], edges[2][k]}, Max: [3]int{edges[0][i+1], edges[1][j+1], edges[2][k+1]}}
				if !b.Empty() {
					out = append(out, b)
				}
			}
		}
	}
	return out
}

// BenchmarkMeasure: a 128³ Boolean grain pack with nonwetting ganglia.
func BenchmarkMeasure(b *testing.B) {
	n := 128
	lab := volume.NewShape[uint8](n, n, n, 0)
	synth.Fill(lab, codes.Wetting, func(z, y, x float64) bool { return true })
	synth.Boolean(lab, synth.BooleanIntensity(0.5, 10), 10, codes.Nonwetting, 3)
	synth.Boolean(lab, synth.BooleanIntensity(0.6, 8), 8, codes.Solid, 5)
	s, w, nw := codes.Sets()
	var p Partial
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		p = Measure(lab, s, w, nw, lab.Box, Options{})
	}
	b.ReportMetric(float64(lab.Box.Voxels())*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
	b.ReportMetric(float64(p.N), "samples")
}

// Source: science.md §4 "Pitfall, measured" — on a cap whose angle through
// the cap is 110°, the normal from the pore-normalised convolution at the
// contact line reads ~100–105° instead of 110°. Reproduce that with
// levelset.Fraction on the same samples and check that the fitted estimator
// is much closer to the truth than the gradient at the wall.
func TestPitfallGradientAtWall(t *testing.T) {
	const theta = 70.0 // through the wetting phase; 110° through the cap
	lab, _ := capScene(22, theta)
	s, w, n := codes.Sets()
	pore := levelset.Union(w, n)
	phi := levelset.Fraction(lab, n, pore, lab.Box, 1.5)
	var naive, fitted []float64
	for z := lab.Box.Min[0]; z < lab.Box.Max[0]; z++ {
		for y := lab.Box.Min[1]; y < lab.Box.Max[1]; y++ {
			for x := lab.Box.Min[2]; x < lab.Box.Max[2]; x++ {
				a, ok := Angle(lab, s, w, n, [3]int{z, y, x}, Options{})
				if !ok {
					continue
				}
				g, ok := levelset.Gradient(phi, z, y, x)
				if !ok {
					continue
				}
				// n_f points out of the wetting phase, up the φ gradient;
				// the wall normal is +z.
				l := math.Sqrt(g[0]*g[0] + g[1]*g[1] + g[2]*g[2])
				naive = append(naive, math.Acos(g[0]/l)*180/math.Pi)
				fitted = append(fitted, a)
			}
		}
	}
	en, ef := stat.Mean(naive, nil)-theta, stat.Mean(fitted, nil)-theta
	t.Logf("θ=%v° through w (%v° through the cap), %d samples: gradient at the wall %+.1f°, quadric fit %+.2f°",
		theta, 180-theta, len(naive), en, ef)
	if len(naive) < 20 || math.Abs(en) < 3 || math.Abs(ef) > math.Abs(en)/2 {
		t.Errorf("gradient at the wall off by %+.1f°, fit by %+.2f°: want the known bias reproduced and the fit at least twice as close", en, ef)
	}
}

// TestWallGapCaps: with WallGap 3 the fit leaves out the interface faces of
// the first three voxel layers on the wall. Source: analytic spherical caps
// (as TestCapAngles). Measured 2026-12-05 on R 22 caps: θ 30° −1.6°, 60°
// −1.6°, 90° +0.6°, 120° +0.9°; the 150° cap (height 0.13 R, every face
// within a few voxels of the wall) has no sample left, which is why the gap
// is off by default. Band 3.5° ≈ 2× the largest measured error; with the
// gap at 8 (faces only from the far side of the 60° cap) the 60° case
// fails, so the band can fail.
func TestWallGapCaps(t *testing.T) {
	for _, th := range []float64{30, 60, 90, 120} {
		lab, _ := capScene(22, th)
		p := whole(lab, Options{WallGap: 3})
		t.Logf("cap R=22, θ=%3.0f°, wall gap 3: %3d samples, mean %6.2f° (error %+.2f°), std %.2f°", th, p.N, p.Mean(), p.Mean()-th, p.Std())
		if p.N < 20 {
			t.Errorf("θ=%v, wall gap 3: only %d samples", th, p.N)
		}
		if math.Abs(p.Mean()-th) > 3.5 {
			t.Errorf("θ=%v, wall gap 3: mean %.2f°, want within 3.5°", th, p.Mean())
		}
	}
	// The gap does leave faces out: on the thin 150° cap nothing is left.
	lab, _ := capScene(22, 150)
	if p := whole(lab, Options{WallGap: 3}); p.N != 0 {
		t.Errorf("150° cap, wall gap 3: %d samples, want 0 (all of its interface lies within 3 voxels of the wall)", p.N)
	}
}
