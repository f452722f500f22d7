package contact_test

import (
	"fmt"
	"sluice/internal/benchtile"
	"testing"

	"sluice/pkg/contact"
)

// The shared tile and throughput report of every stage benchmark.
var (
	drainageTile = benchtile.Drainage
	mvox         = benchtile.ReportMVox
)

// BenchmarkMeasureTile: contact angles along the contact line of a 128³
// tile core, on one and on two goroutines.
func BenchmarkMeasureTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	for _, w := range []int{1, 2} {
		b.Run(fmt.Sprintf("workers=%d", w), func(b *testing.B) {
			var p contact.Partial
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				p = contact.Measure(lab, sets[0], sets[1], sets[2], core, contact.Options{Workers: w})
			}
			mvox(b, core.Voxels())
			b.ReportMetric(float64(p.N), "samples")
		})
	}
}
