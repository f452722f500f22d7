package scan

import (
	"fmt"
	"slices"
	"testing"

	"sluice/pkg/register"
)

// TestReferencePass1Tiling: in reference mode with the partial-volume
// correction and per-step Otsu, pass 1 keeps only pore voxels away from the
// solid (blurred solid fraction ≤ segment.BulkFraction) in the fluid
// histogram; the blur reads the solid mask PVHalo voxels around each voxel,
// so the histogram, and the thresholds, must not depend on the tile edge
// of pass 1 (the tile edge is not in the parameter hash). Tiles of 96
// (whole), 20 and 17 voxels. Source: architecture.md (results do not
// depend on the tiling). Seen failing with the mask read with the grey
// halo of 1 voxel (the tiled histograms had more bulk voxels).
func TestReferencePass1Tiling(t *testing.T) {
	sc := makeFluidScene(t, 96, 1, 0.3)
	grey := renderShifted(t, sc.lab, 5, 7, register.Shift{})
	var ref Prepared
	for i, tile := range []int{96, 20, 17} {
		cfg := referenceConfig(tile)
		cfg.Segment.Threshold, cfg.Segment.Fixed = "otsu", nil
		if cfg.Segment.PVHalo() <= HistHalo(cfg) {
			t.Fatalf("partial-volume halo %d not beyond the grey halo %d: the test cannot see the defect", cfg.Segment.PVHalo(), HistHalo(cfg))
		}
		prep, _, err := Prepare(MemorySource(grey), grey.Bounds(), grey.DType(), cfg, MemorySource(sc.rock), 2)
		if err != nil {
			t.Fatal(err)
		}
		var bulk int64
		for _, c := range prep.Hist.Counts {
			bulk += c
		}
		t.Logf("tile %d: thresholds %v, %d bulk fluid voxels in the histogram", tile, prep.Thresholds.T, bulk)
		if i == 0 {
			ref = prep
			continue
		}
		if !slices.Equal(prep.Hist.Counts, ref.Hist.Counts) || fmt.Sprint(prep.Thresholds.T) != fmt.Sprint(ref.Thresholds.T) {
			t.Errorf("tile %d: histogram or thresholds %v differ from the whole step's %v", tile, prep.Thresholds.T, ref.Thresholds.T)
		}
	}
}
