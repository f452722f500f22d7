package segment

import (
	"math"
	"math/rand/v2"
	"syscall"
	"testing"
	"time"

	"sluice/pkg/forward"
	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// TestIntegerPathMatchesFloat segments a uint16 scene and its float32
// conversion with the same thresholds: the integer path (integer median,
// class table, row-wise labelling) must give the labels the float path
// gives, with every stage that reads the filtered grey switched on in turn.
// Source: the float path (checked by the accuracy and tiling tests);
// float32 holds every uint16 exactly and the median commutes with the
// monotone conversion.
func TestIntegerPathMatchesFloat(t *testing.T) {
	const n = 26
	grey, truth, fp := scene(n, 4, 3)
	f := volume.Float(grey)
	mask := idealMask(truth)
	core := volume.Box{Min: [3]int{4, 3, 5}, Max: [3]int{22, 24, 20}}
	cases := map[string]func(p *Params){
		"plain":    func(p *Params) {},
		"none":     func(p *Params) { p.Filter.Method = "none" },
		"sample":   func(p *Params) { p.Sample = Sample{Y: 12.5, X: 13, Radius: 11} },
		"hyst+isl": func(p *Params) { p.Hysteresis = Hysteresis{Band: 600, Steps: 2}; p.MinIsland = 4 },
		"hyst-bright": func(p *Params) {
			p.Order = "wsn"
			p.Hysteresis = Hysteresis{Band: 900, Steps: 3}
			p.Sample = Sample{Y: 12.5, X: 13, Radius: 11}
		},
		"hyst-ref":  func(p *Params) { p.Reference = true; p.Hysteresis = Hysteresis{Band: 600, Steps: 2} },
		"reference": func(p *Params) { p.Reference = true; p.Sample = Sample{Y: 12, X: 12, Radius: 10} },
		"pv":        func(p *Params) { p.PartialVolume.Blur = 0.7 },
	}
	// Every case with the watershed (default) and with the threshold
	// assignment, whose median path never computes the median
	// (filter.Median3Levels).
	for _, assign := range []string{AssignWatershed, AssignThreshold} {
		for name, set := range cases {
			name := name + " " + assign
			p := withFilter(fp, "median")
			p.Assign = assign
			p.MinIsland = 0
			// The paths, not the phase decision, are compared: this small CNR 4
			// scene lies below the decision's limit (phases.go), so state both.
			p.Fluids = FluidsBoth
			set(&p)
			var solid *volume.Labels
			if p.Reference {
				solid = mask
			}
			h, err := Histogram(grey, grey.Box, p, solid)
			if err != nil {
				t.Fatal(err)
			}
			hf, err := Histogram(f, grey.Box, withRange(p), solid)
			if err != nil {
				t.Fatal(err)
			}
			th, err := ComputeThresholds(h, p)
			if err != nil {
				t.Fatal(err)
			}
			// Same binning (64 grey values per bin from 0): same counts.
			for i := range h.Counts {
				if h.Counts[i] != hf.Counts[i] {
					t.Fatalf("%s: histogram bin %d: uint16 %d, float32 %d", name, i, h.Counts[i], hf.Counts[i])
				}
			}
			a, err := Segment(grey, core, th, p, solid)
			if err != nil {
				t.Fatalf("%s: %v", name, err)
			}
			b, err := Segment(f, core, th, withRange(p), solid)
			if err != nil {
				t.Fatalf("%s: %v", name, err)
			}
			var diff, nw, out int
			for i := range a.Pix {
				if a.Pix[i] != b.Pix[i] {
					diff++
				}
				if a.Pix[i] == p.Codes.Nonwetting {
					nw++
				}
				if a.Pix[i] == phase.Outside {
					out++
				}
			}
			if diff != 0 || a.Box != b.Box || a.VoxelSize != b.VoxelSize {
				t.Errorf("%s: %d of %d labels differ between uint16 and float32 input (boxes %v %v)", name, diff, len(a.Pix), a.Box, b.Box)
			}
			if nw == 0 || (p.Sample.Radius > 0 && out == 0) {
				t.Errorf("%s: no nonwetting (%d) or outside (%d) voxels: the check proves nothing", name, nw, out)
			}
		}
	}
}

// withRange gives float32 input a histogram range (unused by Segment).
func withRange(p Params) Params {
	p.Range = [2]float64{0, 65536}
	return p
}

// TestIntegerMedianTiling segments with the integer median, hysteresis,
// islands and the sample cylinder on 1, 8 and 27 tiles.
func TestIntegerMedianTiling(t *testing.T) {
	const n = 30
	grey, _, fp := scene(n, 4, 5)
	p := withFilter(fp, "median")
	p.Hysteresis = Hysteresis{Band: 600, Steps: 2}
	p.MinIsland = 4
	p.Sample = Sample{Y: 14.5, X: 15, Radius: 13}
	for _, assign := range []string{AssignWatershed, AssignThreshold} {
		p.Assign = assign
		l1, _, _ := tiled(t, grey, grey.Box, [3]int{n, n, n}, p, nil)
		for _, k := range []int{2, 3} {
			e := (n + k - 1) / k
			lk, _, _ := tiled(t, grey, grey.Box, [3]int{e, e, e}, p, nil)
			for i := range l1.Pix {
				if l1.Pix[i] != lk.Pix[i] {
					t.Fatalf("%s, %d³ tiles: label %d differs from the whole volume", assign, k, i)
				}
			}
		}
	}
}

// cpuTime is the process CPU time (user + system), for benchmarks on a
// shared machine where wall time is noisy.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	_ = syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// reportThroughput reports MVox/s (wall) and MVox per CPU second.
func reportThroughput(b *testing.B, voxels int, cpu time.Duration) {
	v := float64(voxels) * float64(b.N) / 1e6
	b.ReportMetric(v/b.Elapsed().Seconds(), "MVox/s")
	if cpu > 0 {
		b.ReportMetric(v/cpu.Seconds(), "MVox/cpu-s")
	}
}

// benchScene is a 96³ three-phase scene (uint16, CNR 4): nonwetting and
// solid Boolean models of spheres on wetting, rendered by the forward model,
// with its thresholds and the core of an 80³ tile inside it (halo 8).
func benchScene(b *testing.B, p Params) (*volume.Volume[uint16], volume.Box, Thresholds) {
	c := phase.Default()
	lab := volume.NewShape[uint8](96, 96, 96, 2e-6)
	for i := range lab.Pix {
		lab.Pix[i] = c.Wetting
	}
	synth.Boolean(lab, synth.BooleanIntensity(-math.Log(0.6), 5), 5, c.Nonwetting, 2)
	synth.Boolean(lab, synth.BooleanIntensity(-math.Log(0.4), 7), 7, c.Solid, 1)
	fp := forward.Default()
	fp.CNR, fp.Seed = 4, 1
	img, err := forward.Render(lab, fp)
	if err != nil {
		b.Fatal(err)
	}
	grey := forward.Uint16(img)
	h, err := Histogram(grey, grey.Box, p, nil)
	if err != nil {
		b.Fatal(err)
	}
	th, err := ComputeThresholds(h, p)
	if err != nil {
		b.Fatal(err)
	}
	return grey, volume.Box{Min: [3]int{8, 8, 8}, Max: [3]int{88, 88, 88}}, th
}

func benchSegment(b *testing.B, set func(p *Params)) {
	p := Defaults()
	p.Assign = AssignThreshold // each stage alone, unless set asks for the watershed
	set(&p)
	grey, core, th := benchScene(b, p)
	b.ReportAllocs()
	b.ResetTimer()
	c0 := cpuTime()
	for i := 0; i < b.N; i++ {
		if _, err := Segment(grey, core, th, p, nil); err != nil {
			b.Fatal(err)
		}
	}
	reportThroughput(b, core.Voxels(), cpuTime()-c0)
}

// BenchmarkSegmentMedian: median + thresholds + watershed (the default) on
// uint16.
func BenchmarkSegmentMedian(b *testing.B) {
	benchSegment(b, func(p *Params) { p.Assign = AssignWatershed })
}

// BenchmarkSegmentMedianThreshold: median + thresholds, threshold
// assignment (the median never computed: threshold decomposition).
func BenchmarkSegmentMedianThreshold(b *testing.B) { benchSegment(b, func(p *Params) {}) }

// BenchmarkSegmentThreshold: thresholding alone (filter none) on uint16.
func BenchmarkSegmentThreshold(b *testing.B) {
	benchSegment(b, func(p *Params) { p.Filter.Method = "none" })
}

// BenchmarkSegmentHysteresis: no filter, hysteresis of 4 steps.
func BenchmarkSegmentHysteresis(b *testing.B) {
	benchSegment(b, func(p *Params) { p.Filter.Method = "none"; p.Hysteresis = Hysteresis{Band: 600, Steps: 4} })
}

// BenchmarkSegmentMedianHysteresis: median, hysteresis of 4 steps.
func BenchmarkSegmentMedianHysteresis(b *testing.B) {
	benchSegment(b, func(p *Params) { p.Hysteresis = Hysteresis{Band: 600, Steps: 4} })
}

// BenchmarkSegmentIslands: no filter, island removal below 8 voxels.
func BenchmarkSegmentIslands(b *testing.B) {
	benchSegment(b, func(p *Params) { p.Filter.Method = "none"; p.MinIsland = 8 })
}

// BenchmarkSegmentPartialVolume: median, partial-volume correction σ 0.7.
func BenchmarkSegmentPartialVolume(b *testing.B) {
	benchSegment(b, func(p *Params) { p.PartialVolume.Blur = 0.7 })
}

// BenchmarkHistogram: pass 1 on one tile (median + binning + columns).
func BenchmarkHistogram(b *testing.B) {
	p := Defaults()
	grey, core, _ := benchScene(b, p)
	in := grey.Crop(core.Grow(1), 0)
	b.ReportAllocs()
	b.ResetTimer()
	c0 := cpuTime()
	for i := 0; i < b.N; i++ {
		if _, err := Histogram(in, core, p, nil); err != nil {
			b.Fatal(err)
		}
	}
	reportThroughput(b, core.Voxels(), cpuTime()-c0)
}

// growReference is the multi-source breadth-first search the package used
// before (all seeds queued at distance 0, expansion while the distance is
// below steps): the definition of the bounded hysteresis, written plainly.
func growReference(c *classes, lab *volume.Labels, kind []uint8, steps int) {
	s := lab.Box.Size()
	nyx := s[1] * s[2]
	dist := make([]int, len(kind))
	var queue []int
	for i, k := range kind {
		dist[i] = -1
		if k == seed {
			dist[i] = 0
			queue = append(queue, i)
		}
	}
	for head := 0; head < len(queue); head++ {
		i := queue[head]
		if dist[i] >= steps {
			continue
		}
		z, y, x := i/nyx, i%nyx/s[2], i%s[2]
		for _, d := range [][3]int{{0, 0, -1}, {0, 0, 1}, {0, -1, 0}, {0, 1, 0}, {-1, 0, 0}, {1, 0, 0}} {
			zz, yy, xx := z+d[0], y+d[1], x+d[2]
			if zz < 0 || yy < 0 || xx < 0 || zz >= s[0] || yy >= s[1] || xx >= s[2] {
				continue
			}
			j := (zz*s[1]+yy)*s[2] + xx
			if kind[j] == cand && dist[j] < 0 {
				dist[j] = dist[i] + 1
				queue = append(queue, j)
			}
		}
	}
	for i, k := range kind {
		if k == cand {
			if dist[i] >= 0 {
				lab.Pix[i] = c.n
			} else if lab.Pix[i] == c.n {
				lab.Pix[i] = c.next
			}
		}
	}
}

// TestGrowMatchesReference runs the layered hysteresis against the plain
// multi-source search on random kinds (fixed seeds), for 1..6 steps.
// Source: the definition in the package doc (bounded face-path growth).
func TestGrowMatchesReference(t *testing.T) {
	c := &classes{n: 2, next: 1}
	for trial := uint64(0); trial < 12; trial++ {
		rng := rand.New(rand.NewPCG(trial, 17))
		box := volume.BoxOf(5+rng.IntN(6), 4+rng.IntN(7), 3+rng.IntN(9))
		lab := volume.New[uint8](box, 1)
		kind := make([]uint8, len(lab.Pix))
		for i := range kind {
			r := rng.Float64()
			switch {
			case r < 0.05:
				kind[i], lab.Pix[i] = seed, c.n
			case r < 0.6:
				kind[i] = cand
				lab.Pix[i] = []uint8{c.n, c.next}[rng.IntN(2)]
			default:
				lab.Pix[i] = []uint8{0, c.next}[rng.IntN(2)]
			}
		}
		steps := 1 + int(trial%6)
		want := lab.Clone()
		growReference(c, want, kind, steps)
		c.grow(lab, kind, steps)
		changed := 0
		for i := range lab.Pix {
			if lab.Pix[i] != want.Pix[i] {
				t.Fatalf("trial %d steps %d voxel %d: %d, reference %d", trial, steps, i, lab.Pix[i], want.Pix[i])
			}
			if kind[i] == cand && lab.Pix[i] == c.n {
				changed++
			}
		}
		if changed == 0 {
			t.Fatalf("trial %d: no candidate reached", trial)
		}
	}
}
