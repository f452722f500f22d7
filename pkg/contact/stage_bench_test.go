package contact_test

import (
	"fmt"
	"slices"
	"testing"
	"time"

	"sluice/internal/benchtile"

	"sluice/pkg/contact"
)

// The shared tile and throughput report of every stage benchmark.
var (
	drainageTile = benchtile.Drainage
	mvox         = benchtile.ReportMVox
)

// BenchmarkMeasureTile: contact angles along the contact line of a 128³
// tile core, on one and on two goroutines, with the samples thinned to one
// per 2×2×2 lattice cell (the default) and with every line voxel a sample.
func BenchmarkMeasureTile(b *testing.B) {
	lab, core, sets := drainageTile(b)
	for _, all := range []bool{false, true} {
		for _, w := range []int{1, 2} {
			name := fmt.Sprintf("samples=thinned/workers=%d", w)
			if all {
				name = fmt.Sprintf("samples=all/workers=%d", w)
			}
			b.Run(name, func(b *testing.B) {
				var p contact.Partial
				b.ReportAllocs()
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					p = contact.Measure(lab, sets[0], sets[1], sets[2], core, contact.Options{Workers: w, AllLineVoxels: all})
				}
				mvox(b, core.Voxels())
				b.ReportMetric(float64(p.N), "samples")
			})
		}
	}
}

// BenchmarkThinningPaired runs the contact stage of the 128³ tile on one
// goroutine with thinned samples and with every line voxel a sample, one
// after the other in every iteration, so both see the same machine load
// (the shared machine's load swings more than the difference otherwise).
// It reports the median time of each and their ratio.
func BenchmarkThinningPaired(b *testing.B) {
	lab, core, sets := drainageTile(b)
	var thin, all []float64
	for i := 0; i < b.N; i++ {
		for _, every := range []bool{false, true} {
			t0 := time.Now()
			contact.Measure(lab, sets[0], sets[1], sets[2], core, contact.Options{Workers: 1, AllLineVoxels: every})
			d := time.Since(t0).Seconds()
			if every {
				all = append(all, d)
			} else {
				thin = append(thin, d)
			}
		}
	}
	slices.Sort(thin)
	slices.Sort(all)
	mt, ma := thin[len(thin)/2], all[len(all)/2]
	v := float64(core.Voxels()) / 1e6
	b.ReportMetric(v/mt, "MVox/s-thinned")
	b.ReportMetric(v/ma, "MVox/s-all")
	b.ReportMetric(ma/mt, "speedup")
}
