package levelset_test

import (
	"sluice/internal/benchtile"
	"testing"

	"sluice/pkg/levelset"
)

// The shared tile and throughput report of every stage benchmark.
var (
	drainageTile = benchtile.Drainage
	mvox         = benchtile.ReportMVox
)

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
