package curvature

import (
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// tubeScene describes a capillary tube with a meniscus: a straight circular
// tube of radius R (voxels) cut in solid, its axis along z tilted by Tilt
// degrees (towards (y, x) = (0.6, 0.8)); wetting phase below and
// nonwetting phase above a spherical cap of radius R/cos θ centred on the
// axis, which meets the wall at the contact angle θ (degrees, through the
// wetting phase; θ = 90° is a flat meniscus, a plane normal to the axis).
// Off shifts the axis (y, x) and the apex (z) by sub-voxel amounts.
//
// Source: Young–Laplace and Jurin's law for a capillary tube (de Gennes,
// Brochard-Wyart & Quéré 2004, Capillarity and Wetting Phenomena, ch. 1;
// science.md, analytic check values): the meniscus is a spherical cap of
// radius R/cos θ, κ = 2 cos θ / R.
type tubeScene struct {
	R, Theta, Tilt float64
	Off            [3]float64
}

// kappa returns the exact total curvature 2 cos θ / R (1/voxel).
func (s tubeScene) kappa() float64 { return 2 * math.Cos(s.Theta*math.Pi/180) / s.R }

// draw returns the labels: solid outside the tube, a margin of at least
// 8 voxels of solid around it and 12 voxels of each fluid beyond the
// meniscus along the axis.
func (s tubeScene) draw() *volume.Labels {
	th := s.Theta * math.Pi / 180
	height := 0.0 // apex to contact line
	if s.Theta < 90 {
		height = s.R * (1 - math.Sin(th)) / math.Cos(th)
	}
	tl := s.Tilt * math.Pi / 180
	nz := int(height) + 26
	drift := int(math.Ceil(float64(nz) * math.Tan(tl)))
	n := int(2*s.R) + 18 + 2*drift
	lab := volume.NewShape[uint8](nz, n, n, 0)
	apex := 12.5 + s.Off[2]
	// c: the apex (z, y, x); a: the unit axis.
	c := [3]float64{apex, float64(n)/2 + s.Off[0], float64(n)/2 + s.Off[1]}
	a := [3]float64{math.Cos(tl), 0.6 * math.Sin(tl), 0.8 * math.Sin(tl)}
	// axial returns the coordinate along the axis from the apex and the
	// squared distance from the axis.
	axial := func(z, y, x float64) (float64, float64) {
		d := [3]float64{z - c[0], y - c[1], x - c[2]}
		t := d[0]*a[0] + d[1]*a[1] + d[2]*a[2]
		return t, d[0]*d[0] + d[1]*d[1] + d[2]*d[2] - t*t
	}
	rc := s.R / math.Cos(th)
	synth.Fill(lab, codes.Nonwetting, func(z, y, x float64) bool { return true })
	synth.Fill(lab, codes.Wetting, func(z, y, x float64) bool {
		t, r2 := axial(z, y, x)
		if s.Theta >= 90 {
			return t < 0
		}
		// Below the lower cap of the sphere centred at apex + rc·a.
		return t < rc-math.Sqrt(math.Max(rc*rc-r2, 0))
	})
	synth.Fill(lab, codes.Solid, func(z, y, x float64) bool {
		_, r2 := axial(z, y, x)
		return r2 > s.R*s.R
	})
	return lab
}

var tubeTable = flag.Bool("tubetable", false, "log the tube-meniscus table of the package documentation")

// TestTubeTable logs the mean κ error (%) of the tube menisci for the
// table in the package documentation (go test -run TubeTable -tubetable),
// with and without the continuation into the solid, for several
// exclusions.
func TestTubeTable(t *testing.T) {
	if !*tubeTable {
		t.Skip("run with -tubetable")
	}
	for _, fit := range []float64{-1, DefaultWallFit} {
		for _, ex := range []float64{1, 2, 3, 4} {
			for _, r := range []float64{12, 20, 30} {
				line := ""
				for _, th := range []float64{20, 45, 60, 90} {
					var es []float64
					for _, o := range offsets(5, 43) {
						s := tubeScene{R: r, Theta: th, Off: o}
						p := whole(s.draw(), Options{Exclude: ex, WallFit: fit})
						if th == 90 {
							es = append(es, p.Mean()*r)
						} else {
							es = append(es, 100*relErr(p.Mean(), s.kappa()))
						}
					}
					line += " |" + fmtList(es)
				}
				t.Logf("wall fit %v exclude %v R %2.0f: %s", fit, ex, r, line)
			}
		}
	}
}

// tubeFailures returns the tube menisci (R 12, 20, 30 voxels; θ 20, 45,
// 60°; three sub-voxel placements each; flat menisci) whose mean κ misses
// the band, measured with opt and compared with the curvature of a
// meniscus of angle θ + dTheta.
//
// Bands (source: Young–Laplace/Jurin, κ = 2 cos θ / R, see tubeScene):
// 4 % for R ≥ 20 and 8 % for R = 12, about twice the largest error
// measured with the defaults (2026-12-05, five placements, package doc
// table: R = 12 −4.6…+1.0 %, R = 20 −1.8…+0.8 %, R = 30 −1.9…+2.2 %) and
// inside the targets of issue 14 (5 % and 8 %). Flat menisci (θ = 90°,
// tube tilted 7° or 15° off the lattice): |κ|·R < 0.05 (the issue's
// target), measured |κR| ≤ 0.046 over five placements per radius (0.058
// at 25° tilt, R 30: not tested, see the package doc).
func tubeFailures(opt Options, dTheta float64) []string {
	var bad []string
	for _, r := range []float64{12, 20, 30} {
		tol := 0.04
		if r < 20 {
			tol = 0.08
		}
		for _, th := range []float64{20, 45, 60, 90} {
			for i, o := range offsets(3, uint64(300+r+th)) {
				s := tubeScene{R: r, Theta: th, Off: o}
				if th == 90 {
					// A lattice-aligned flat meniscus reads 0 by symmetry.
					s.Tilt = []float64{7, 15, 7}[i]
				}
				p := whole(s.draw(), opt)
				want := tubeScene{R: r, Theta: th + dTheta}.kappa()
				if th+dTheta == 90 || th == 90 {
					if !(math.Abs(p.Mean())*r < 0.05) {
						bad = append(bad, fmt.Sprintf("flat meniscus R=%v placement %d: κR = %.3f, want |κR| < 0.05", r, i, p.Mean()*r))
					}
					continue
				}
				if e := relErr(p.Mean(), want); !(math.Abs(e) <= tol) {
					bad = append(bad, fmt.Sprintf("R=%v θ=%v° placement %d: mean κ %.5f, want %.5f ± %.0f%% (error %+.2f%%)", r, th, i, p.Mean(), want, 100*tol, 100*e))
				}
			}
		}
	}
	return bad
}

// TestTubeMeniscus checks the wall-aware estimator on capillary-tube
// menisci (bands and source at tubeFailures).
func TestTubeMeniscus(t *testing.T) {
	for _, b := range tubeFailures(Options{}, 0) {
		t.Error(b)
	}
}

// TestTubeMeniscusCanFail spoils TestTubeMeniscus: without the
// continuation into the solid (the estimator before 2026-12-05) and with a
// truth 10° off, menisci must miss their bands.
func TestTubeMeniscusCanFail(t *testing.T) {
	if testing.Short() {
		t.Skip("spoiled runs of TestTubeMeniscus")
	}
	for _, c := range []struct {
		name   string
		opt    Options
		dTheta float64
	}{{"no continuation into the solid", Options{WallFit: -1}, 0}, {"θ + 10°", Options{}, 10}} {
		bad := tubeFailures(c.opt, c.dTheta)
		t.Logf("%s: %d menisci out of band, e.g. %v", c.name, len(bad), bad[:min(len(bad), 1)])
		if len(bad) < 9 {
			t.Errorf("%s: only %d menisci out of band", c.name, len(bad))
		}
	}
	// The flat-meniscus band must reject a meniscus of 80° (κR = 0.35).
	s := tubeScene{R: 20, Theta: 80, Tilt: 7, Off: [3]float64{0.3, 0.6, 0.2}}
	if p := whole(s.draw(), Options{}); math.Abs(p.Mean())*s.R < 0.05 {
		t.Errorf("an 80° meniscus passes as flat: κR = %.3f", p.Mean()*s.R)
	}
}

// Source: architecture.md — whatever the tiling, the result equals the
// whole-volume result; here with the continuation into a curved wall
// active, on 1, 8 and 27 tiles.
func TestTubeTiles(t *testing.T) {
	lab := tubeScene{R: 12, Theta: 45, Off: [3]float64{0.3, -0.2, 0.4}}.draw()
	s, w, n := sets()
	opt := Options{}
	ref := Measure(lab, s, w, n, lab.Box, opt)
	for cuts := 0; cuts <= 2; cuts++ {
		rng := rand.New(rand.NewPCG(uint64(cuts), 5))
		var sum Partial
		cores := randomCores(lab.Box, rng, cuts)
		for _, c := range cores {
			tile := lab.Crop(c.Grow(opt.Halo()).Intersect(lab.Box), 0)
			part := Measure(tile, s, w, n, c, opt)
			sum.Add(&part)
		}
		if ref.Voxels == 0 || sum.Voxels != ref.Voxels || math.Abs(sum.KappaArea-ref.KappaArea) > 1e-9*math.Abs(ref.KappaArea) || math.Abs(sum.Area-ref.Area) > 1e-9*ref.Area {
			t.Errorf("%d tiles: voxels %d area %.12g κ·area %.12g; whole volume %d %.12g %.12g", len(cores), sum.Voxels, sum.Area, sum.KappaArea, ref.Voxels, ref.Area, ref.KappaArea)
		}
		// Spoiled: a halo one voxel short must change the result.
		if cuts == 2 {
			var short Partial
			for _, c := range cores {
				tile := lab.Crop(c.Grow(opt.Halo()-1).Intersect(lab.Box), 0)
				part := Measure(tile, s, w, n, c, opt)
				short.Add(&part)
			}
			if short.KappaArea == ref.KappaArea && short.Area == ref.Area {
				t.Errorf("halo %d (one short) gives the whole-volume result too: the halo is wider than needed", opt.Halo()-1)
			}
		}
	}
}

func fmtList(v []float64) string {
	s := ""
	for _, x := range v {
		s += fmt.Sprintf(" %+.2f", x)
	}
	return s
}
