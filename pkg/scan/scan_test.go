package scan

import (
	"math"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

func greyScene(t *testing.T, n int) (*volume.Volume[uint16], *volume.Labels) {
	t.Helper()
	lab := volume.NewShape[uint8](n, n, n, 3e-6)
	forward.Rock{GrainRadius: 6, Porosity: 0.4, BlobRadius: 5, BlobFrac: 0.4, Seed: 11}.Draw(lab, phase.Default())
	p := forward.Default()
	p.Sample = &forward.Cylinder{Y: float64(n-1) / 2, X: float64(n-1) / 2, Radius: float64(n)/2 - 4, Wall: 2}
	g, err := forward.Render(lab, p)
	if err != nil {
		t.Fatal(err)
	}
	return forward.Uint16(g), forward.Truth(lab, p)
}

// TestWholeIndependentOfTiling: grey → labels → result through pass 1 and
// pass 2 gives identical labels and results for 1, 8 and 27 tiles and for
// uneven edge tiles (architecture.md: the step result equals the
// whole-volume result whatever the tiling).
func TestWholeIndependentOfTiling(t *testing.T) {
	grey, truth := greyScene(t, 44)
	c := campaign.Default()
	c.Segment.MinIsland = 4
	c.Segment.Hysteresis.Band = 1500
	c.Tile = 44
	c.Measure.SkipContact = true // contact-angle tiling is checked in pkg/measure
	ref, refRes, refPrep, err := Whole(grey, c, nil, 2)
	if err != nil {
		t.Fatal(err)
	}
	if refPrep.Thresholds.Sample.Radius == 0 {
		t.Errorf("sample cylinder not detected")
	}
	// Against the forward model's truth (the accuracy targets are asserted
	// on a better resolved scene in pkg/segment): confusion of truth and
	// segmented labels over the whole volume, the detector's mask included
	// (true pore voxels it masks count as wrong).
	var conf [3][4]float64 // truth solid/wetting/nonwetting × seg solid/wetting/nonwetting/outside
	var inTruth, inSeg, poreSeg, wetSeg float64
	for i, v := range truth.Pix {
		g := ref.Pix[i]
		if g != phase.Outside {
			inSeg++
			if g == 1 || g == 2 {
				poreSeg++
			}
			if g == 1 {
				wetSeg++
			}
		}
		if v == phase.Outside {
			continue
		}
		inTruth++
		if g == phase.Outside {
			g = 3
		}
		conf[v][g]++
	}
	row := func(v int) float64 { return conf[v][0] + conf[v][1] + conf[v][2] + conf[v][3] }
	poreAcc := (conf[1][1] + conf[2][2]) / (row(1) + row(2))
	wetAcc, nonAcc := conf[1][1]/row(1), conf[2][2]/row(2)
	masked := (conf[0][3] + conf[1][3] + conf[2][3]) / inTruth
	dS := wetSeg/poreSeg - row(1)/(row(1)+row(2))
	dPhi := poreSeg/inSeg - (row(1)+row(2))/inTruth
	t.Logf("truth × segmented (solid, wetting, nonwetting, outside): %v; sample %+v; thresholds %v %+v", conf, refPrep.Thresholds.Sample, refPrep.Thresholds.T, refPrep.Thresholds.Phases)
	t.Logf("pore voxels right %.4f (wetting %.4f, nonwetting %.4f), sample masked %.4f, ΔS_w %+.4f, Δφ %+.4f", poreAcc, wetAcc, nonAcc, masked, dS, dPhi)
	// Source: the forward model's truth labels and cylinder. Measured
	// 2026-12-05 with the default watershed assignment (errors in the
	// table): the pores of this small scene are only a few voxels wide, and
	// a fifth of the true wetting voxels come out nonwetting (and 10 % of
	// the nonwetting ones wetting), so the pore accuracy is 75 %. The
	// detected disc (radius 17.45 for 18) masks 6.4 % of the sample. With
	// the threshold assignment (2026-12-04) ΔS_w was only −0.013 because
	// two errors cancelled: 1751 solid voxels called wetting (the false
	// brine skin on rock contacts) offset 2110 wetting voxels called
	// nonwetting; the watershed calls 748 fewer solid voxels wetting and
	// 372 fewer nonwetting voxels wetting (pore accuracy 0.7426 → 0.7476,
	// |Δφ| 0.0372 → 0.0175), which leaves ΔS_w at −0.058. Bands twice each
	// measured error; together they catch a lost phase (e.g. all pore
	// wetting: nonwetting 100 % wrong, ΔS_w +0.46) and an over-eager mask.
	for _, c := range []struct {
		name          string
		err, measured float64
	}{
		{"pore voxels wrong", 1 - poreAcc, 0.2524},
		{"wetting voxels wrong", 1 - wetAcc, 0.3168},
		{"nonwetting voxels wrong", 1 - nonAcc, 0.1764},
		{"sample masked", masked, 0.0637},
		{"|ΔS_w|", math.Abs(dS), 0.0576},
		{"|Δφ|", math.Abs(dPhi), 0.0175},
	} {
		if c.err > 2*c.measured {
			t.Errorf("%s: %.4f, more than twice the measured %.4f", c.name, c.err, c.measured)
		}
	}
	for _, tile := range []int{22, 15, 17} { // 8 tiles, 27 tiles, uneven edges
		c.Tile = tile
		lab, res, prep, err := Whole(grey, c, nil, 2)
		if err != nil {
			t.Fatal(err)
		}
		if prep.Thresholds.T[0] != refPrep.Thresholds.T[0] || prep.Thresholds.T[1] != refPrep.Thresholds.T[1] {
			t.Errorf("tile %d: thresholds %v, whole %v", tile, prep.Thresholds.T, refPrep.Thresholds.T)
		}
		diff := 0
		for i := range lab.Pix {
			if lab.Pix[i] != ref.Pix[i] {
				diff++
			}
		}
		if diff != 0 {
			t.Errorf("tile %d: %d labels differ from the single-tile result", tile, diff)
		}
		if res.EulerNonwetting != refRes.EulerNonwetting || res.GangliaCount != refRes.GangliaCount ||
			res.VoxelsNonwetting != refRes.VoxelsNonwetting || res.VoxelsOutside != refRes.VoxelsOutside {
			t.Errorf("tile %d: result differs: Euler %d/%d ganglia %d/%d", tile, res.EulerNonwetting, refRes.EulerNonwetting, res.GangliaCount, refRes.GangliaCount)
		}
	}
}

// TestDefaultSegmentationTiling: with the default segmentation (median
// classes by threshold decomposition, detected sample cylinder) the labels
// of 1, 8 and 27 tiles and of uneven tiles are identical, and equal those
// of the same scan given as float32 (the float median path). Source:
// architecture.md (tiling invariance); the float path is the one checked
// against scipy.
func TestDefaultSegmentationTiling(t *testing.T) {
	grey, _ := greyScene(t, 40)
	c := campaign.Default()
	c.Tile = 40
	c.Measure.SkipContact = true
	c.Measure.SkipCurvature = true
	ref, _, refPrep, err := Whole(grey, c, nil, 2)
	if err != nil {
		t.Fatal(err)
	}
	var nw, out int
	for _, v := range ref.Pix {
		switch v {
		case phase.Outside:
			out++
		case c.Segment.Codes.Nonwetting:
			nw++
		}
	}
	if nw == 0 || out == 0 {
		t.Fatalf("no nonwetting (%d) or outside (%d) voxels: the check proves nothing", nw, out)
	}
	for _, tile := range []int{20, 14, 17} {
		c.Tile = tile
		lab, _, _, err := Whole(grey, c, nil, 2)
		if err != nil {
			t.Fatal(err)
		}
		for i := range lab.Pix {
			if lab.Pix[i] != ref.Pix[i] {
				t.Fatalf("tile %d: label %d is %d, single tile %d", tile, i, lab.Pix[i], ref.Pix[i])
			}
		}
	}
	// The float32 scan through the float median, with the thresholds and
	// sample of the uint16 run.
	c.Tile = 40
	c.Segment.Sample = refPrep.Thresholds.Sample
	f := volume.Float(grey)
	core := grey.Box
	lab, _, err := Tile(f, core, grey.Box, refPrep.Thresholds, c, nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := range lab.Pix {
		if lab.Pix[i] != ref.Pix[i] {
			t.Fatalf("float32 input: label %d is %d, uint16 %d", i, lab.Pix[i], ref.Pix[i])
		}
	}
}
