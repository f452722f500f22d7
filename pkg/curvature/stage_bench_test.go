package curvature_test

import (
	"testing"

	"sluice/pkg/curvature"
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
