package morph_test

import (
	"sluice/internal/benchtile"
	"testing"

	"sluice/pkg/morph"
)

// The shared tile and throughput report of every stage benchmark.
var (
	drainageTile = benchtile.Drainage
	mvox         = benchtile.ReportMVox
)

// BenchmarkCellsTile: the six 2×2×2 configuration histograms (padded and
// interior, three phases) of a 128³ tile core, as measure.MeasureTile
// computes them.
func BenchmarkCellsTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	pad, in := morph.TileOrigins(core, lab.Box)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		for _, s := range sets {
			morph.Cells(lab, s, pad)
			morph.Cells(lab, s, in)
		}
	}
	mvox(b, core.Voxels())
}
