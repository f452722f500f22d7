package accuracy

import (
	"fmt"
	"math"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/volume"
)

// coneRegion is a solid block pierced along z by a tapered tube of radius
// R(z) = r0 − slope·z around the centre line.
func coneRegion(nz, nxy int, r0, slope float64) *volume.Labels {
	lab := volume.New[uint8](volume.BoxOf(nz, nxy, nxy), 2e-6)
	c := float64(nxy-1) / 2
	i := 0
	for z := 0; z < nz; z++ {
		R := r0 - slope*float64(z)
		for y := 0; y < nxy; y++ {
			for x := 0; x < nxy; x++ {
				if math.Hypot(float64(y)-c, float64(x)-c) < R {
					lab.Pix[i] = 1
				}
				i++
			}
		}
	}
	return lab
}

func refConfig() campaign.Config {
	cfg := campaign.Default()
	cfg.IFT = 0.03
	cfg.Tile = 64
	cfg.Segment.Reference = true
	cfg.Segment.Threshold = "fixed"
	cfg.Segment.Fixed = []float64{19000}
	cfg.Segment.Assign = "threshold"
	return cfg
}

// perfectConfig segments a scan without noise or blur exactly: reference
// mode, no filter, one fixed threshold midway between the fluid levels,
// every voxel classified by its own grey.
func perfectConfig() campaign.Config {
	cfg := refConfig()
	cfg.Segment.Filter.Method = "none"
	cfg.Segment.MinIsland = 0
	return cfg
}

var levels = ScanEstimate{Solid: 40000, Wetting: 24000, Nonwetting: 14000}

// TestRunPerfectScan: with no noise and no blur, and a segmentation that
// takes every voxel's class from its own grey, the rendered scan
// segments back to the true labels, so the grey path must equal the labels
// path exactly: S_w and a_wn errors 0, κ and θ identical. A check that
// the chain (region at the origin, walls, codes, rendering, the campaign's
// segmentation, measurement) loses nothing. Seen failing with the fixed
// threshold at 25000 (above the wetting level: S_w error −0.29).
func TestRunPerfectScan(t *testing.T) {
	in := Input{Solid: coneRegion(48, 40, 16, 0.15), Config: perfectConfig(), DType: volume.Uint16, Scan: levels}
	rep, err := Run(in, Options{Theta: 45, Pressures: []float64{0.11}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	s := rep.States[0]
	if s.Skipped != "" {
		t.Fatalf("state skipped: %s", s.Skipped)
	}
	g := rep.GreyPath
	if g.SatWetting.Bias == nil || *g.SatWetting.Bias != 0 || *g.SpecificWN.Bias != 0 {
		t.Errorf("perfect scan: S_w error %v, a_wn error %v, want 0 and 0", fmtp(g.SatWetting.Bias), fmtp(g.SpecificWN.Bias))
	}
	if s.Curvature.Grey == nil || s.Curvature.Labels == nil || s.AngleMean.Grey == nil || s.AngleMean.Labels == nil {
		t.Fatalf("perfect scan: κ %s / %s, θ %s / %s (grey / labels): want all measured", fmtp(s.Curvature.Grey), fmtp(s.Curvature.Labels), fmtp(s.AngleMean.Grey), fmtp(s.AngleMean.Labels))
	}
	if *s.Curvature.Grey != *s.Curvature.Labels || *s.AngleMean.Grey != *s.AngleMean.Labels {
		t.Errorf("perfect scan: κ %v / %v, θ %v / %v (grey / labels), want equal", *s.Curvature.Grey, *s.Curvature.Labels, *s.AngleMean.Grey, *s.AngleMean.Labels)
	}
}

func fmtp(p *float64) string {
	if p == nil {
		return "null"
	}
	return fmt.Sprint(*p)
}

// TestRunTubePc: in a converging tube (radius R(z) = 16 − 0.15z voxels,
// half-angle α = 8.5°, nonwetting phase entering at z = 0) the equilibrium
// meniscus at Pc/σ = P is a spherical cap of radius 2/P meeting the wall
// at radius R_cl = (2/P)·cos(θ + α) (Young–Laplace and Jurin's law with
// the wall's tilt; de Gennes, Brochard-Wyart & Quéré 2004, Capillarity
// and Wetting Phenomena, ch. 1). The report's Pc of the labels path
// (prescribed Pc against the curvature the campaign's measurement reads
// from the true labels) must hold the prescribed one. Measured
// (2026-12-05): +0.3 % and −0.6 % at P 0.11 and 0.13 (radius 2/P 18 and
// 15 voxels) with the first equilibrium solver, −5.2 % and +0.1 % after
// its band/tile rework (commit 7502214); the check uses the issue's
// target for tube menisci of radius below 20 voxels (within 8 %; 5 % is
// the target from 20 voxels up, not reached by these radii). The meniscus sits deeper than the Jurin position at 45° (S_n 0.71
// and 0.90 against 0.95 and 1.0) because the states' wall angle is a few
// degrees low on this staircase wall (package equilibrium doc; the
// labels path reads 40.6° and 42.7°): logged, not checked here.
func TestRunTubePc(t *testing.T) {
	const theta = 45.0
	in := Input{Solid: coneRegion(48, 40, 16, 0.15), Config: refConfig(), DType: volume.Uint16, Scan: levels}
	P := []float64{0.11, 0.13}
	rep, err := Run(in, Options{Theta: theta, Pressures: P}, nil)
	if err != nil {
		t.Fatal(err)
	}
	alpha := math.Atan(0.15) * 180 / math.Pi
	for k, p := range P {
		s := rep.States[k]
		if s.Skipped != "" {
			t.Fatalf("P %g: skipped: %s", p, s.Skipped)
		}
		rcl := 2 / p * math.Cos((theta+alpha)*math.Pi/180)
		pcRel := *s.Pc.Labels / *s.Pc.Truth - 1
		t.Logf("P %.3f: Pc labels %.1f Pa vs prescribed %.1f (%+.2f %%), grey %.1f; S_n %.4f (Jurin contact line at z %.1f); θ labels %.1f°, grey %.1f°; converged %v",
			p, *s.Pc.Labels, *s.Pc.Truth, 100*pcRel, *s.Pc.Grey, s.SatNonwet, (16-rcl)/0.15, *s.AngleMean.Labels, *s.AngleMean.Grey, s.Converged)
		if math.Abs(pcRel) > 0.08 {
			t.Errorf("P %g: measured Pc %.1f Pa against the prescribed %.1f (%+.1f %%)", p, *s.Pc.Labels, *s.Pc.Truth, 100*pcRel)
		}
	}
}

// TestPressures: the states span the entry curvature of the largest pores
// to min(1/minRadius, 2cos θ/r50), and a pore space too fine for the
// minimum radius is refused.
func TestPressures(t *testing.T) {
	var d []float64
	for i := 1; i <= 100; i++ {
		d = append(d, float64(i)/5) // 0.2 … 20 voxels
	}
	P, r, err := Pressures(d, 60, 8, 3)
	if err != nil {
		t.Fatal(err)
	}
	// r50 = 10.2, r99 = 20 (index 99); 2cos60° = 1: lo 0.05, hi min(0.125, 0.098).
	lo, hi := 1/20.0, 1/10.2
	lo += (hi - lo) / 10
	want := []float64{lo, (lo + hi) / 2, hi}
	for i := range want {
		if math.Abs(P[i]-want[i]) > 1e-12 {
			t.Errorf("P %v, want %v (radii %v)", P, want, r)
			break
		}
	}
	if _, _, err := Pressures(d, 0.1, 40, 3); err == nil {
		t.Error("a minimum radius of 40 voxels in pores of at most 20: no error")
	}
}
