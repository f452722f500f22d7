package scan

import (
	"fmt"
	"reflect"
	"sync"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/phase"
	"sluice/pkg/segment"
	"sluice/pkg/volume"
)

// prepareTwoPass is pass 1 with sample detection as Prepare did it before
// the superblock counts: the histogram of every tile, the detection, then
// the histogram of every tile again restricted to the sample. It is the
// reference Prepare must reproduce exactly.
func prepareTwoPass(src Source, whole volume.Box, c campaign.Config, solid Source, workers int) (Prepared, campaign.Config, error) {
	t := volume.Tiling{Whole: whole, Tile: [3]int{c.Tile, c.Tile, c.Tile}}
	halo := HistHalo(c)
	hist := func(c campaign.Config) (segment.Hist, error) {
		var h segment.Hist
		var mu sync.Mutex
		err := forTiles(t, workers, func(core volume.Box) error {
			box := core.Grow(halo).Intersect(whole)
			g, err := src(box)
			if err != nil {
				return err
			}
			var m *volume.Labels
			if solid != nil {
				a, err := solid(core.Grow(HistMaskHalo(c)).Intersect(whole))
				if err != nil {
					return err
				}
				m = a.(*volume.Labels)
			}
			x, err := Histogram(g, core, c, m)
			if err != nil {
				return err
			}
			mu.Lock()
			defer mu.Unlock()
			return h.Add(x)
		})
		return h, err
	}
	h, err := hist(c)
	if err != nil {
		return Prepared{}, c, err
	}
	s, err := segment.DetectSample(h, c.Segment, c.SampleMargin)
	if err != nil {
		return Prepared{}, c, err
	}
	c.Segment.Sample = s
	if h, err = hist(c); err != nil {
		return Prepared{}, c, err
	}
	th, err := segment.ComputeThresholds(h, c.Segment)
	return Prepared{Thresholds: th, Hist: h}, c, err
}

// Pass 1 with sample detection through the superblock counts (the step
// filtered once, plus the superblocks the sample's rim cuts) gives the
// histogram, thresholds and configuration of filtering the whole step
// twice, exactly: for cylinders whose rim cuts superblocks, leaves some
// wholly outside and some wholly inside, for even and uneven tiles, one
// and two workers, and in reference mode with the partial-volume
// correction (mask counts in Hist.Solid, bulk-fluid restriction).
func TestPrepareSampleMatchesTwoPasses(t *testing.T) {
	const n = 112
	lab := volume.NewShape[uint8](24, n, n, 3e-6)
	forward.Rock{GrainRadius: 6, Porosity: 0.4, BlobRadius: 5, BlobFrac: 0.4, Seed: 5}.Draw(lab, phase.Default())
	mask := lab.Clone()
	outside := 0
	for _, cyl := range []forward.Cylinder{
		{Y: 55.5, X: 55.5, Radius: 50, Wall: 2},
		{Y: 50, X: 61.3, Radius: 37, Wall: 2},
	} {
		p := forward.Default()
		p.Sample = &cyl
		g, err := forward.Render(lab, p)
		if err != nil {
			t.Fatal(err)
		}
		grey := forward.Uint16(g)
		for _, tc := range []struct {
			tile, workers int
			reference     bool
		}{{n, 1, false}, {32, 2, false}, {20, 2, false}, {48, 1, true}} {
			name := fmt.Sprintf("cyl R %g tile %d workers %d reference %v", cyl.Radius, tc.tile, tc.workers, tc.reference)
			c := campaign.Default()
			c.Tile = tc.tile
			var solid Source
			if tc.reference {
				c.Segment.Reference = true
				c.Segment.PartialVolume.Blur = 1
				solid = MemorySource(mask)
			}
			want, wc, err := prepareTwoPass(MemorySource(grey), grey.Box, c, solid, tc.workers)
			if err != nil {
				t.Fatalf("%s: two passes: %v", name, err)
			}
			if wc.Segment.Sample.Radius == 0 {
				t.Fatalf("%s: no sample detected: the scene tests nothing", name)
			}
			in, cut, out := superblockStates(grey.Box, wc.Segment.Sample)
			if in == 0 || cut == 0 {
				t.Fatalf("%s: superblocks inside / cut / outside the detected sample %d / %d / %d: want some inside and some cut", name, in, cut, out)
			}
			outside += out
			got, gc, err := Prepare(MemorySource(grey), grey.Box, volume.Uint16, c, solid, tc.workers)
			if err != nil {
				t.Fatalf("%s: %v", name, err)
			}
			if !reflect.DeepEqual(got, want) || !reflect.DeepEqual(gc, wc) {
				t.Errorf("%s: Prepare differs from filtering the step twice (sample %+v vs %+v, %d vs %d voxels counted)",
					name, gc.Segment.Sample, wc.Segment.Sample, got.Hist.Total(), want.Hist.Total())
			}
		}
	}
	if outside == 0 {
		t.Error("no superblock wholly outside a detected sample: that branch is not tested")
	}
}

// superblockStates counts the superblocks of whole wholly inside s, cut
// by its rim and wholly outside.
func superblockStates(whole volume.Box, s segment.Sample) (in, cut, out int) {
	sb := newSuperblocks(whole)
	for k := range sb.counts {
		by, bx := sb.by0+k/sb.nbx, sb.bx0+k%sb.nbx
		n, all := 0, 0
		for y := max(by*superblockEdge, whole.Min[1]); y < min((by+1)*superblockEdge, whole.Max[1]); y++ {
			for x := max(bx*superblockEdge, whole.Min[2]); x < min((bx+1)*superblockEdge, whole.Max[2]); x++ {
				all++
				if s.Inside(y, x) {
					n++
				}
			}
		}
		switch {
		case n == all:
			in++
		case n == 0:
			out++
		default:
			cut++
		}
	}
	return in, cut, out
}

// BenchmarkPrepareSample: pass 1 with sample detection on a 48 × 512 × 512
// uint16 scan of a cylindrical sample (radius 248 voxels), tiles of 64, as
// Prepare does it (one filtering of the step plus the superblocks the
// sample's rim cuts) and as before (prepareTwoPass: the step filtered
// twice). Reports scan MVox/s and MVox per CPU second.
func BenchmarkPrepareSample(b *testing.B) {
	lab := volume.NewShape[uint8](48, 512, 512, 3e-6)
	forward.Rock{GrainRadius: 6, Porosity: 0.4, BlobRadius: 5, BlobFrac: 0.4, Seed: 5}.Draw(lab, phase.Default())
	p := forward.Default()
	p.Sample = &forward.Cylinder{Y: 255.5, X: 255.5, Radius: 248, Wall: 2}
	g, err := forward.Render(lab, p)
	if err != nil {
		b.Fatal(err)
	}
	grey := forward.Uint16(g)
	c := campaign.Default()
	c.Tile = 64
	for _, way := range []string{"superblocks", "twopass"} {
		b.Run(way, func(b *testing.B) {
			b.ReportAllocs()
			b.ResetTimer()
			c0 := cpuTime()
			for i := 0; i < b.N; i++ {
				var err error
				if way == "twopass" {
					_, _, err = prepareTwoPass(MemorySource(grey), grey.Box, c, nil, 0)
				} else {
					_, _, err = Prepare(MemorySource(grey), grey.Box, volume.Uint16, c, nil, 0)
				}
				if err != nil {
					b.Fatal(err)
				}
			}
			reportThroughput(b, grey.Box.Voxels(), cpuTime()-c0)
		})
	}
}
