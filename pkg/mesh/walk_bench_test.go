package mesh

import (
	"testing"

	"sluice/pkg/filter"
	"sluice/pkg/phase"
	"sluice/pkg/scenario"
	"sluice/pkg/volume"
)

// nonwettingField returns the indicator of the nonwetting phase of step 6
// of a 160³ drainage campaign (fixed seed) around the 128³ tile core a
// worker measures, grown by one voxel, and that core.
func nonwettingField(b *testing.B) (*volume.Volume[float32], volume.Box) {
	b.Helper()
	sc := &scenario.Campaign{Shape: [3]int{160, 160, 160}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		b.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	_, _, n := phase.Default().Sets()
	core := volume.Box{Min: [3]int{16, 16, 16}, Max: [3]int{144, 144, 144}}
	return Indicator(lab, n, core.Grow(1)), core
}

// smoothedField is nonwettingField smoothed by a Gaussian of σ = 1.5
// voxels truncated at 3σ, as the curvature stage and sluice bench compare
// smooth it.
func smoothedField(b *testing.B) (*volume.Volume[float32], volume.Box) {
	b.Helper()
	f, core := nonwettingField(b)
	g, err := filter.Gaussian(f, core.Grow(1), 1.5, 3)
	if err != nil {
		b.Fatal(err)
	}
	return g, core
}

// cellArea is Area by the reference walk.
func cellArea(f *volume.Volume[float32], level float64, cubes volume.Box) float64 {
	var a float64
	walkCells(f, level, cubes, func(_ [3]int64, p [3][3]float64) { a += triArea(p) })
	return a
}

func benchWalk(b *testing.B, f *volume.Volume[float32], core volume.Box, area func(*volume.Volume[float32], float64, volume.Box) float64) {
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if area(f, 0.5, core) == 0 {
			b.Fatal("no surface")
		}
	}
	b.ReportMetric(float64(core.Voxels())*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}

// BenchmarkAreaWalk: marching-cubes area of the nonwetting surface of a
// 128³ tile core, indicator already built (the step sluice bench compare
// times), by the bit-mask walk.
func BenchmarkAreaWalk(b *testing.B) {
	f, core := nonwettingField(b)
	benchWalk(b, f, core, Area)
}

// BenchmarkAreaCellWalk: the same by the cube-by-cube reference walk, for
// before/after comparison in one run.
func BenchmarkAreaCellWalk(b *testing.B) {
	f, core := nonwettingField(b)
	benchWalk(b, f, core, cellArea)
}

// BenchmarkAreaWalkSmoothed: as BenchmarkAreaWalk on the Gaussian-smoothed
// indicator (vertices off the edge midpoints, as in sluice bench compare).
func BenchmarkAreaWalkSmoothed(b *testing.B) {
	f, core := smoothedField(b)
	benchWalk(b, f, core, Area)
}

// BenchmarkAreaCellWalkSmoothed: the reference walk on the same field.
func BenchmarkAreaCellWalkSmoothed(b *testing.B) {
	f, core := smoothedField(b)
	benchWalk(b, f, core, cellArea)
}
