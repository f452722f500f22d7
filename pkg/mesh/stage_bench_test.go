package mesh_test

import (
	"sluice/internal/benchtile"
	"testing"

	"sluice/pkg/mesh"
)

// The shared tile and throughput report of every stage benchmark.
var (
	drainageTile = benchtile.Drainage
	mvox         = benchtile.ReportMVox
)

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
