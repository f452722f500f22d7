package levelset_test

import (
	"testing"

	"sluice/pkg/levelset"
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

// BenchmarkFractionTile: the dense normalised convolution (σ = 1.5) of
// the nonwetting phase over the pore space on a 128³ tile core.
func BenchmarkFractionTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	pore := levelset.Union(sets[1], sets[2])
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		levelset.Fraction(lab, sets[2], pore, core, 1.5)
	}
	mvox(b, core.Voxels())
}

// BenchmarkFractionBandTile: the narrow band as the curvature uses it —
// Mixed over the core, then FractionOn on the mixed voxels.
func BenchmarkFractionBandTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	pore := levelset.Union(sets[1], sets[2])
	r := levelset.Radius(1.5)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		need := levelset.Mixed(lab, sets[2], sets[1], core, r)
		levelset.FractionOn(lab, sets[2], pore, core, 1.5, need)
	}
	mvox(b, core.Voxels())
}

// BenchmarkNearTile: the exclusion mask (distance 3 to the solid) over a
// 128³ tile core.
func BenchmarkNearTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		levelset.Near(lab, sets[0], core, 3)
	}
	mvox(b, core.Voxels())
}
