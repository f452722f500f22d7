package distance_test

import (
	"sluice/internal/benchtile"
	"testing"

	"sluice/pkg/distance"
)

// The shared tile and throughput report of every stage benchmark.
var (
	drainageTile = benchtile.Drainage
	mvox         = benchtile.ReportMVox
)

// BenchmarkSquaredToSetTile: exact squared EDT to the solid of the 160³
// labels a 128³ tile is cut from.
func BenchmarkSquaredToSetTile(b *testing.B) {
	lab, _, sets := drainageTile(b)
	dst := distance.SquaredToSet(lab, sets[0])
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		dst = distance.SquaredToSetInto(dst, lab, sets[0])
	}
	mvox(b, lab.Box.Voxels())
}
