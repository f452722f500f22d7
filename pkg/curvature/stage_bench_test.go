package curvature_test

import (
	"sluice/internal/benchtile"
	"testing"

	"sluice/pkg/curvature"
)

// The shared tile and throughput report of every stage benchmark.
var (
	drainageTile = benchtile.Drainage
	mvox         = benchtile.ReportMVox
)

// BenchmarkMeasureTile: level set + curvature (σ = 1.5, exclusion 3) of
// the wetting–nonwetting interface of a 128³ tile core.
func BenchmarkMeasureTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if p := curvature.Measure(lab, sets[0], sets[1], sets[2], core, curvature.Options{}); p.Voxels == 0 {
			b.Fatal("no interface")
		}
	}
	mvox(b, core.Voxels())
}
