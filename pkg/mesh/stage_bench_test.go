package mesh_test

import (
	"testing"

	"sluice/pkg/mesh"
	"sluice/pkg/phase"
	"sluice/pkg/scenario"
	"sluice/pkg/volume"
)

// drainageTile returns the labels of step 6 of a 160³ drainage campaign
// (fixed seed) and the 128³ core a worker measures in it; the labels
// reach 16 voxels past the core, more than any measurement halo.
func drainageTile(b *testing.B) (*volume.Labels, volume.Box, [3]*phase.Set) {
	b.Helper()
	sc := &scenario.Campaign{Shape: [3]int{160, 160, 160}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		b.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	s, w, n := phase.Default().Sets()
	return lab, volume.Box{Min: [3]int{16, 16, 16}, Max: [3]int{144, 144, 144}}, [3]*phase.Set{s, w, n}
}

// mvox reports the throughput of b.N operations on n voxels each.
func mvox(b *testing.B, n int) {
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}

// BenchmarkAreaTile: marching-cubes area of the nonwetting surface of a
// 128³ tile core (indicator field at level ½).
func BenchmarkAreaTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		f := mesh.Indicator(lab, sets[2], core.Grow(1))
		if mesh.Area(f, 0.5, core) == 0 {
			b.Fatal("no surface")
		}
	}
	mvox(b, core.Voxels())
}

// BenchmarkMarchTile: the same surface as a shared-vertex mesh.
func BenchmarkMarchTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		f := mesh.Indicator(lab, sets[2], core.Grow(1))
		if len(mesh.March(f, 0.5, core).Triangles) == 0 {
			b.Fatal("no surface")
		}
	}
	mvox(b, core.Voxels())
}
