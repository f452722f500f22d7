package cluster

import (
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/scenario"
	"sluice/pkg/volume"
)

func benchComponents(b *testing.B, label func(*volume.Labels, *phase.Set, volume.Box, int) ([]int32, []int64)) {
	sc := &scenario.Campaign{Shape: [3]int{160, 160, 160}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		b.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	_, _, n := phase.Default().Sets()
	core := volume.Box{Min: [3]int{16, 16, 16}, Max: [3]int{144, 144, 144}}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		label(lab, n, core, 26)
	}
	b.ReportMetric(float64(core.Voxels())*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}

// BenchmarkComponentsRuns: 26-connected nonwetting clusters of a 128³ tile
// core of a drainage step, labelled by runs and expanded to a label array.
func BenchmarkComponentsRuns(b *testing.B) { benchComponents(b, components) }

// BenchmarkComponentsRaster: the same by the voxel-by-voxel reference scan,
// for before/after comparison in one run.
func BenchmarkComponentsRaster(b *testing.B) { benchComponents(b, componentsRaster) }
