package scan

import (
	"syscall"
	"testing"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/phase"
	"sluice/pkg/scenario"
	"sluice/pkg/segment"
	"sluice/pkg/volume"
)

// cpuTime is the process CPU time (user + system): on a machine shared
// with other jobs it is steadier than wall time.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	_ = syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// reportThroughput reports core voxels per wall second (MVox/s) and per
// CPU second of the process (MVox/cpu-s, i.e. per core when the cores are
// busy).
func reportThroughput(b *testing.B, voxels int, cpu time.Duration) {
	v := float64(voxels) * float64(b.N) / 1e6
	b.ReportMetric(v/b.Elapsed().Seconds(), "MVox/s")
	if cpu > 0 {
		b.ReportMetric(v/cpu.Seconds(), "MVox/cpu-s")
	}
}

// drainageTile is one 128³ tile of a drainage step of the demo campaign,
// with its pass-2 halo, as a worker reads it.
func drainageTile(b *testing.B) (*volume.Volume[uint16], volume.Box, volume.Box, Prepared, campaign.Config) {
	sc := &scenario.Campaign{Shape: [3]int{160, 160, 160}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		b.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	g, err := forward.Render(lab, forward.Default())
	if err != nil {
		b.Fatal(err)
	}
	grey := forward.Uint16(g)
	c := campaign.Default()
	c.Tile = 128
	prep, c, err := Prepare(MemorySource(grey), grey.Box, volume.Uint16, c, nil, 0)
	if err != nil {
		b.Fatal(err)
	}
	halo, _ := Halo(c)
	core := volume.Box{Min: [3]int{16, 16, 16}, Max: [3]int{144, 144, 144}}
	return grey.Crop(core.Grow(halo).Intersect(grey.Box), 0), core, grey.Box, prep, c
}

// BenchmarkTile measures pass 2 (segment + every measurement) of one 128³
// tile of a drainage step with its halo, as a worker runs it.
func BenchmarkTile(b *testing.B) {
	in, core, whole, prep, c := drainageTile(b)
	b.ReportAllocs()
	b.ResetTimer()
	c0 := cpuTime()
	for i := 0; i < b.N; i++ {
		if _, _, err := Tile(in, core, whole, prep.Thresholds, c, nil); err != nil {
			b.Fatal(err)
		}
	}
	reportThroughput(b, core.Voxels(), cpuTime()-c0)
}

// BenchmarkTileSegment is the segmentation share of BenchmarkTile: the
// labels of the core grown by the measurement halo, from the same input.
func BenchmarkTileSegment(b *testing.B) {
	in, core, whole, prep, c := drainageTile(b)
	mo, err := c.MeasureOptions()
	if err != nil {
		b.Fatal(err)
	}
	p := c.Segment
	p.Sample = prep.Thresholds.Sample
	ext := core.Grow(mo.Halo()).Intersect(whole)
	b.ReportAllocs()
	b.ResetTimer()
	c0 := cpuTime()
	for i := 0; i < b.N; i++ {
		if _, err := segment.Segment(in, ext, prep.Thresholds, p, nil); err != nil {
			b.Fatal(err)
		}
	}
	reportThroughput(b, core.Voxels(), cpuTime()-c0)
}

// BenchmarkTile256 runs pass 2 on one 256³ tile (the demo's tile edge) of a
// grain-and-blob scene inside a 284³ scan (core + halo), thresholds from
// pass 1 over the whole scan.
func BenchmarkTile256(b *testing.B) {
	const n = 256
	c := campaign.Default()
	c.Tile = n
	halo, err := Halo(c)
	if err != nil {
		b.Fatal(err)
	}
	m := n + 2*halo
	lab := volume.NewShape[uint8](m, m, m, 3e-6)
	forward.Rock{GrainRadius: 9, Porosity: 0.35, BlobRadius: 7, BlobFrac: 0.4, Seed: 3}.Draw(lab, phase.Default())
	g, err := forward.Render(lab, forward.Default())
	if err != nil {
		b.Fatal(err)
	}
	grey := forward.Uint16(g)
	c.DetectSample = false
	c.Tile = m
	prep, c, err := Prepare(MemorySource(grey), grey.Box, volume.Uint16, c, nil, 0)
	if err != nil {
		b.Fatal(err)
	}
	c.Tile = n
	core := grey.Box.Grow(-halo)
	b.ReportAllocs()
	b.ResetTimer()
	c0 := cpuTime()
	for i := 0; i < b.N; i++ {
		if _, _, err := Tile(grey, core, grey.Box, prep.Thresholds, c, nil); err != nil {
			b.Fatal(err)
		}
	}
	reportThroughput(b, core.Voxels(), cpuTime()-c0)
}
