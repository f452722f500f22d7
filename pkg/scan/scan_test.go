package scan

import (
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
	// Sanity against the forward model's truth (the accuracy targets are
	// asserted in pkg/segment): most pore voxels inside the detected
	// sample right.
	var ok, pore int
	for i, v := range truth.Pix {
		if (v == 1 || v == 2) && ref.Pix[i] != phase.Outside {
			pore++
			if ref.Pix[i] == v {
				ok++
			}
		}
	}
	// The pores of this small scene are only a few voxels wide, so partial
	// volume next to the bright grains costs accuracy; the CNR-5 targets
	// (≥ 98 %) are asserted on a properly resolved scene in pkg/segment.
	if frac := float64(ok) / float64(pore); frac < 0.75 {
		t.Errorf("only %.3f of pore voxels right", frac)
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
