package cluster

import (
	"math/rand/v2"
	"reflect"
	"slices"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// The run-based labelling must give the same labels, sizes and face planes
// as the voxel-by-voxel raster scan, label for label, on random volumes
// around both percolation thresholds, in sub-cores of a larger label volume
// (halo not read) and in degenerate shapes (one voxel thick, one row).
// Source: identity with the previous implementation (Rosenfeld & Pfaltz
// two-pass scan, raster_ref_test.go); the scipy comparisons of
// TestLabelMatchesScipy check both against scipy.ndimage.label.
func TestRunLabelsEqualRasterScan(t *testing.T) {
	set := phase.Of(nw)
	shapes := [][3]int{{23, 19, 37}, {1, 1, 64}, {1, 17, 1}, {9, 1, 13}, {5, 6, 1}, {2, 2, 2}}
	seed := uint64(1)
	for _, sh := range shapes {
		for _, p := range []float64{0.05, 0.1, 0.3, 0.5, 0.9} {
			for _, conn := range []int{6, 26} {
				seed++
				lab := randomVolume(sh, p, seed)
				rng := rand.New(rand.NewPCG(seed, 7))
				cores := []volume.Box{lab.Box}
				var c volume.Box
				for a := 0; a < 3; a++ {
					c.Min[a] = rng.IntN(sh[a])
					c.Max[a] = c.Min[a] + 1 + rng.IntN(sh[a]-c.Min[a])
				}
				cores = append(cores, c)
				for _, core := range cores {
					want, wantSizes := componentsRaster(lab, set, core, conn)
					got, gotSizes := components(lab, set, core, conn)
					if !slices.Equal(got, want) || !slices.Equal(gotSizes, wantSizes) {
						t.Fatalf("shape %v p %.2f conn %d core %v: run labels differ from the raster scan", sh, p, conn, core)
					}
					tile := Label(lab, set, core, lab.Box, Options{Connectivity: conn})
					if f := rasterFaces(want, core.Size()); !reflect.DeepEqual(tile.Faces, f) {
						t.Fatalf("shape %v p %.2f conn %d core %v: face planes differ from the raster scan", sh, p, conn, core)
					}
					if !slices.Equal(tile.Sizes, wantSizes) {
						t.Fatalf("shape %v p %.2f conn %d core %v: tile sizes differ", sh, p, conn, core)
					}
				}
			}
		}
	}
}
