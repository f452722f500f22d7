package contact

import (
	"fmt"
	"math"
	"testing"

	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// tubeScene draws a capillary tube of radius r (voxels) cut in solid, its
// axis along z tilted by tilt degrees towards (y, x) = (0.6, 0.8), wetting
// phase below and nonwetting phase above a spherical meniscus of radius
// r/cos θ centred on the axis, which meets the wall at θ through the
// wetting phase (θ = 90°: a flat meniscus normal to the axis).
//
// Source: Young–Laplace and Jurin's law for a capillary tube (de Gennes,
// Brochard-Wyart & Quéré 2004, Capillarity and Wetting Phenomena, ch. 1):
// the meniscus is a spherical cap of radius R/cos θ. The same scene as the
// curvature package's tube checks.
func tubeScene(r, theta, tilt float64) *volume.Labels {
	th := theta * math.Pi / 180
	height := 0.0 // apex to contact line
	if theta < 90 {
		height = r * (1 - math.Sin(th)) / math.Cos(th)
	} else if theta > 90 {
		height = r * (1 - math.Sin(th)) / -math.Cos(th)
	}
	tl := tilt * math.Pi / 180
	nz := int(height) + 2*DefaultHalo() + 4
	drift := int(math.Ceil(float64(nz) * math.Tan(tl)))
	n := int(2*r) + 18 + 2*drift
	lab := volume.NewShape[uint8](nz, n, n, 0)
	apex := float64(DefaultHalo()) + 1.3
	if theta > 90 {
		apex += height
	}
	c := [3]float64{apex, float64(n)/2 + 0.31, float64(n)/2 - 0.17}
	a := [3]float64{math.Cos(tl), 0.6 * math.Sin(tl), 0.8 * math.Sin(tl)}
	axial := func(z, y, x float64) (float64, float64) {
		d := [3]float64{z - c[0], y - c[1], x - c[2]}
		t := d[0]*a[0] + d[1]*a[1] + d[2]*a[2]
		return t, d[0]*d[0] + d[1]*d[1] + d[2]*d[2] - t*t
	}
	rc := r / math.Cos(th)
	synth.Fill(lab, codes.Nonwetting, func(z, y, x float64) bool { return true })
	synth.Fill(lab, codes.Wetting, func(z, y, x float64) bool {
		t, r2 := axial(z, y, x)
		if theta == 90 {
			return t < 0
		}
		if theta < 90 {
			// Below the lower cap of the sphere centred at apex + rc·a.
			return t < rc-math.Sqrt(math.Max(rc*rc-r2, 0))
		}
		// θ > 90°: rc < 0, the sphere's centre lies below the apex and
		// the wetting phase below its upper cap.
		return t < rc+math.Sqrt(math.Max(rc*rc-r2, 0))
	})
	synth.Fill(lab, codes.Solid, func(z, y, x float64) bool {
		_, r2 := axial(z, y, x)
		return r2 > r*r
	})
	return lab
}

// DefaultHalo is the halo of the default options.
func DefaultHalo() int { return Options{}.Halo() }

// thinScene is one analytic check scene with the core whose samples count.
type thinScene struct {
	name  string
	theta float64
	lab   *volume.Labels
	core  volume.Box
}

var wedgeEdge = 44

func thinScenes() []thinScene {
	var out []thinScene
	for _, th := range []float64{30, 60, 90, 120, 150} {
		lab, _ := capScene(22, th)
		out = append(out, thinScene{fmt.Sprintf("cap R=22 θ=%v", th), th, lab, lab.Box})
	}
	for _, g := range []struct {
		name       string
		wall, line [3]float64
	}{
		{"tilted wall A", [3]float64{1, 0.3, 0.2}, [3]float64{0, 0.5541, -0.8325}},
		{"tilted wall B", [3]float64{0.8, 0.36, -0.48}, [3]float64{0.6, -0.48, 0.64}},
		{"axis wall, axis line", [3]float64{1, 0, 0}, [3]float64{0, 1, 0}},
	} {
		for _, th := range []float64{30, 60, 120, 150} {
			lab := volume.NewShape[uint8](wedgeEdge, wedgeEdge, wedgeEdge, 0)
			c := float64(wedgeEdge) / 2
			ws := synth.WedgeScene{Point: [3]float64{c + 0.2, c - 0.3, c + 0.1}, Solid: g.wall, Line: g.line, Angle: th}
			ws.Draw(lab, codes.Solid, codes.Nonwetting, codes.Wetting)
			out = append(out, thinScene{fmt.Sprintf("wedge %s θ=%v", g.name, th), th, lab, lab.Box.Grow(-13)})
		}
	}
	for _, th := range []float64{45, 70, 90, 110} {
		lab := tubeScene(16, th, 17)
		out = append(out, thinScene{fmt.Sprintf("tube R=16 tilt 17° θ=%v", th), th, lab, lab.Box})
	}
	return out
}

// TestThinningKeepsStatistics: thinning the samples to one per 2×2×2
// lattice cell moves the mean, median and standard deviation by less than
// 0.5° (the bound the project set for the thinning) on the analytic cap,
// wedge and tube scenes, except where no choice of about half the samples
// could stay within it; every scene keeps fewer samples than it has line
// voxels.
//
// Halving n of N samples of spread σ moves the mean and σ by about
// σ·√(1/n − 1/N) by chance alone, and the median anywhere between the
// quantiles 0.5 ± ½/√n of the unthinned set. Where twice that exceeds 0.5°
// it is the bound. Measured 2026-12-05 (21 scenes): 17 move less than 0.5°
// in all three statistics; the others are the 90° cap (median +0.50°, noise
// bound 1.03°), the 44³ wedge A at 30° (median +1.26°: five distinct
// values six times each, a gap of 1.3° next to the median; bound 1.35°) and
// wedge B at 30° and 150° (σ 10.4° and 6.5° over 32 samples: mean −0.79°,
// std −0.71°; bounds 2.65° and 1.70°). The test also fails when more than
// those 4 scenes pass 0.5°. Spoiled (thinned partial fitted with WallGap 1,
// a different estimator): 20 of the 21 scenes fail.
func TestThinningKeepsStatistics(t *testing.T) {
	s, w, n := codes.Sets()
	const bound = 0.5 // degrees, the project's decision for issue 18
	over := 0
	for _, sc := range thinScenes() {
		all := Measure(sc.lab, s, w, n, sc.core, Options{AllLineVoxels: true})
		thin := Measure(sc.lab, s, w, n, sc.core, Options{})
		dm, dmed, dsd := thin.Mean()-all.Mean(), thin.Median()-all.Median(), thin.Std()-all.Std()
		t.Logf("%-34s samples %4d → %4d (line %4d → %4d); mean %7.2f° %+.2f°, median %7.2f° %+.2f°, std %5.2f° %+.2f°; error of the thinned mean %+.2f°",
			sc.name, all.N, thin.N, all.Line, thin.Line, all.Mean(), dm, all.Median(), dmed, all.Std(), dsd, thin.Mean()-sc.theta)
		if all.N < 5 || thin.N < 5 {
			t.Errorf("%s: %d samples unthinned, %d thinned: too few to compare", sc.name, all.N, thin.N)
			continue
		}
		if thin.N >= all.N || thin.Line >= all.Line {
			t.Errorf("%s: thinning kept %d of %d samples (%d of %d line voxels)", sc.name, thin.N, all.N, thin.Line, all.Line)
		}
		noise := 2 * all.Std() * math.Sqrt(1/float64(thin.N)-1/float64(all.N))
		// The thinned median lands, at twice its noise, between the
		// unthinned quantiles 0.5 ± 1/√n; allow the farther one (plus a
		// 0.1° bin).
		dq := 1 / math.Sqrt(float64(thin.N))
		lo := orderStat(&all, int64(math.Floor(float64(all.N)*(0.5-dq)))+1)
		hi := orderStat(&all, int64(math.Ceil(float64(all.N)*(0.5+dq))))
		gap := math.Max(hi-all.Median(), all.Median()-lo) + 0.1
		tm, tsd, tmed := math.Max(bound, noise), math.Max(bound, noise), math.Max(bound, gap)
		if math.Abs(dm) >= bound || math.Abs(dmed) >= bound || math.Abs(dsd) >= bound {
			over++
			t.Logf("  over 0.5°: allowed mean %.2f°, median %.2f°, std %.2f° (twice the sampling noise)", tm, tmed, tsd)
		}
		if math.Abs(dm) >= tm || math.Abs(dmed) >= tmed || math.Abs(dsd) >= tsd {
			t.Errorf("%s: thinning moved mean %+.3f°, median %+.3f°, std %+.3f°; allowed %.2f°, %.2f°, %.2f°", sc.name, dm, dmed, dsd, tm, tmed, tsd)
		}
	}
	if over > 4 {
		t.Errorf("%d scenes moved 0.5° or more, 4 measured", over)
	}
}

// orderStat returns the lower edge (degrees) of the histogram bin of the
// k-th smallest sample (1-based).
func orderStat(p *Partial, k int64) float64 {
	var acc int64
	for i, v := range p.Hist {
		acc += v
		if acc >= k {
			return float64(i) * 180 / float64(len(p.Hist))
		}
	}
	return 180
}

// TestThinnedSampleCount: the reported sample count is the thinned one. The
// samples are recounted here from Angle at every voxel (every line voxel
// with a fit), grouped into 2×2×2 cells of the global lattice by integer
// division, one kept per cell: N must equal the number of cells whose kept
// voxel has a fit, Line the number of cells with a line voxel.
func TestThinnedSampleCount(t *testing.T) {
	s, w, n := codes.Sets()
	for _, th := range []float64{60, 120} {
		lab, _ := capScene(20, th)
		type pick struct {
			rank uint64
			ok   bool
		}
		cells := map[[3]int]pick{}
		for z := lab.Box.Min[0]; z < lab.Box.Max[0]; z++ {
			for y := lab.Box.Min[1]; y < lab.Box.Max[1]; y++ {
				for x := lab.Box.Min[2]; x < lab.Box.Max[2]; x++ {
					p := [3]int{z, y, x}
					f := newFitter(lab, s, w, n, Options{}.norm())
					if l, _ := f.line(volume.Box{Min: p, Max: [3]int{z + 1, y + 1, x + 1}}, false); len(l) == 0 {
						continue
					}
					_, ok := Angle(lab, s, w, n, p, Options{})
					c := [3]int{z / 2, y / 2, x / 2}
					r := thinRank(z, y, x)
					if q, seen := cells[c]; !seen || r < q.rank {
						cells[c] = pick{r, ok}
					}
				}
			}
		}
		var fitted int64
		for _, q := range cells {
			if q.ok {
				fitted++
			}
		}
		p := whole(lab, Options{})
		all := whole(lab, Options{AllLineVoxels: true})
		t.Logf("cap R=20 θ=%v: %d line voxels, %d cells, %d fitted; Measure N %d Line %d", th, all.Line, len(cells), fitted, p.N, p.Line)
		if p.N != fitted || p.Line != int64(len(cells)) || p.N >= all.N {
			t.Errorf("θ=%v: Measure N %d, Line %d; recount %d fitted of %d cells (unthinned N %d)", th, p.N, p.Line, fitted, len(cells), all.N)
		}
	}
}
