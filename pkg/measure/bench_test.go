package measure

import (
	"syscall"
	"testing"
	"time"

	"sluice/pkg/scenario"
	"sluice/pkg/volume"
)

// BenchmarkVolume256 measures the full measurement (counts, Minkowski
// functionals, interfacial areas, curvature, contact angles, ganglia) of a
// 256³ label volume of a drainage step, in 128³ tiles on all CPUs.
func BenchmarkVolume256(b *testing.B) {
	sc := &scenario.Campaign{Shape: [3]int{256, 256, 256}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		b.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	opt := Defaults()
	opt.IFT = sc.IFT
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Volume(lab, opt, 128, 0); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(lab.Box.Voxels())*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}

// benchTile returns the labels of drainage step 6 of a 160³ campaign
// (fixed seed) and the 128³ core a worker would measure in it.
func benchTile(b *testing.B) (*volume.Labels, volume.Box) {
	b.Helper()
	sc := &scenario.Campaign{Shape: [3]int{160, 160, 160}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		b.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	return lab, volume.Box{Min: [3]int{16, 16, 16}, Max: [3]int{144, 144, 144}}
}

// BenchmarkMeasureTile measures every quantity on the 128³ core of a tile
// (labels already segmented), as a worker does after segmentation.
// Sub-benchmarks set Options.Workers.
func BenchmarkMeasureTile(b *testing.B) {
	lab, core := benchTile(b)
	for _, w := range []int{1, 2} {
		b.Run(map[int]string{1: "workers=1", 2: "workers=2"}[w], func(b *testing.B) {
			opt := Defaults()
			opt.Workers = w
			in := lab.Crop(core.Grow(opt.Halo()).Intersect(lab.Box), 0)
			b.ReportAllocs()
			b.ResetTimer()
			cpu0 := cpuTime()
			for i := 0; i < b.N; i++ {
				if _, err := MeasureTile(in, core, lab.Box, opt); err != nil {
					b.Fatal(err)
				}
			}
			reportVoxels(b, core.Voxels(), cpuTime()-cpu0)
		})
	}
}

// cpuTime returns the process's user + system CPU time: on a shared
// machine throughput per CPU-second is steadier than wall-clock throughput.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// reportVoxels reports MVox/s (wall clock) and MVox/cpu-s for b.N
// operations of n voxels each.
func reportVoxels(b *testing.B, n int, cpu time.Duration) {
	v := float64(n) * float64(b.N)
	b.ReportMetric(v/b.Elapsed().Seconds()/1e6, "MVox/s")
	if cpu > 0 {
		b.ReportMetric(v/cpu.Seconds()/1e6, "MVox/cpu-s")
	}
}
