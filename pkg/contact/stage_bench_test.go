package contact_test

import (
	"fmt"
	"testing"

	"sluice/pkg/contact"
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
