package cluster_test

import (
	"sluice/internal/benchtile"
	"testing"

	"sluice/pkg/cluster"
)

// The shared tile and throughput report of every stage benchmark.
var (
	drainageTile = benchtile.Drainage
	mvox         = benchtile.ReportMVox
)

// BenchmarkLabelTile: 26-connected nonwetting clusters of a 128³ tile
// core with their face planes.
func BenchmarkLabelTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		cluster.Label(lab, sets[2], core, lab.Box, cluster.Options{})
	}
	mvox(b, core.Voxels())
}
