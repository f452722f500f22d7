package scenario

import (
	"syscall"
	"testing"
	"time"
)

// cpuTime returns the process's user + system CPU time, so that the
// benchmarks can report throughput per CPU-second besides wall-clock
// throughput on a shared machine.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// benchStep measures one drainage step (flood-free centre threshold, exact
// EDT dilation, labels copy) after the one-time preparation.
func benchStep(b *testing.B, n int) {
	c := &Campaign{Shape: [3]int{n, n, n}, Seed: 1}
	if err := c.Prepare(); err != nil {
		b.Fatal(err)
	}
	// A step past breakthrough: the widest dilation box.
	i := c.Steps - c.SteadySteps - 1
	b.ResetTimer()
	cpu0 := cpuTime()
	for k := 0; k < b.N; k++ {
		c.Step(i)
	}
	cpu := cpuTime() - cpu0
	vox := float64(n) * float64(n) * float64(n) * float64(b.N)
	b.ReportMetric(vox/b.Elapsed().Seconds()/1e6, "MVox/s")
	if cpu > 0 {
		b.ReportMetric(vox/cpu.Seconds()/1e6, "MVox/cpu-s")
	}
}

func BenchmarkStep128(b *testing.B) { benchStep(b, 128) }
func BenchmarkStep256(b *testing.B) { benchStep(b, 256) }

// BenchmarkPrepare256 is the one-time cost: grain pack, exact EDT of the
// pore space and the widest-path map of the ball centres.
func BenchmarkPrepare256(b *testing.B) {
	for k := 0; k < b.N; k++ {
		c := &Campaign{Seed: 1}
		if err := c.Prepare(); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(256*256*256*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}
