// Package benchtile is the shared input of the measurement packages' stage
// benchmarks: one 128³ tile core of a synthetic drainage step, the tile a
// worker measures, so that stage figures add up to BenchmarkTile in
// pkg/scan.
package benchtile

import (
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/scenario"
	"sluice/pkg/volume"
)

// Drainage returns the labels of step 6 of a 160³ drainage campaign (fixed
// seed), the 128³ core a worker measures in it, and the solid, wetting and
// nonwetting phase sets. The labels reach 16 voxels past the core, more
// than any measurement halo.
func Drainage(tb testing.TB) (*volume.Labels, volume.Box, [3]*phase.Set) {
	tb.Helper()
	sc := &scenario.Campaign{Shape: [3]int{160, 160, 160}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		tb.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	s, w, n := phase.Default().Sets()
	return lab, volume.Box{Min: [3]int{16, 16, 16}, Max: [3]int{144, 144, 144}}, [3]*phase.Set{s, w, n}
}

// ReportMVox reports the throughput of b.N operations on n voxels each.
func ReportMVox(b *testing.B, n int) {
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}
