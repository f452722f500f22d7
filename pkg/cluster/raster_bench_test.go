package cluster

import (
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/scenario"
	"sluice/pkg/volume"
)

func benchComponents(b *testing.B, label func(*volume.Labels, *phase.Set, volume.Box, int)) {
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
// core of a drainage step with their face planes, as Label does it: by
// runs.
func BenchmarkComponentsRuns(b *testing.B) {
	benchComponents(b, func(lab *volume.Labels, s *phase.Set, core volume.Box, conn int) {
		Label(lab, s, core, lab.Box, Options{Connectivity: conn})
	})
}

// BenchmarkComponentsRaster: the same work as Label did before, by the
// voxel-by-voxel reference scan into a label array and face planes read
// from it, for before/after comparison in one run.
func BenchmarkComponentsRaster(b *testing.B) {
	benchComponents(b, func(lab *volume.Labels, s *phase.Set, core volume.Box, conn int) {
		ids, _ := componentsRaster(lab, s, core, conn)
		rasterFaces(ids, core.Size())
	})
}

// BenchmarkLabelRaster: the reference scan on the random volume of
// BenchmarkLabel (near the 26-connected percolation threshold, runs mostly
// one voxel long: the worst case for labelling by runs).
func BenchmarkLabelRaster(b *testing.B) {
	lab := randomVolume([3]int{128, 128, 128}, 0.1, 1)
	set := phase.Of(nw)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		ids, _ := componentsRaster(lab, set, lab.Box, 26)
		rasterFaces(ids, lab.Box.Size())
	}
	b.ReportMetric(float64(len(lab.Pix))*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}
