package scan

import (
	"sync"

	"sluice/pkg/campaign"
	"sluice/pkg/segment"
	"sluice/pkg/volume"
)

// superblockEdge is the (y, x) edge of the column superblocks of pass 1,
// in voxels, on a lattice fixed at multiples of it (a multiple of the
// default segment.Params.SampleBlock, though nothing depends on that: the
// column moments add exactly however a block is split).
const superblockEdge = 32

// superblocks holds, per column superblock of the scan (every z, superblockEdge²
// columns), the counts pass 1 puts in segment.Hist.Counts and .Solid over
// its voxels. A voxel's filtered grey value and whether it is counted
// depend only on the grey (and mask) around it, not on the box it is
// filtered in, so the counts of the histogram restricted to a sample are
// the sum of those of the superblocks inside it and of the voxels inside
// it in the superblocks it cuts.
type superblocks struct {
	whole    volume.Box
	by0, bx0 int // superblock coordinates of whole.Min
	nby, nbx int
	mu       sync.Mutex
	counts   [][]int64 // per superblock (by − by0)·nbx + bx − bx0; nil when empty
	solid    [][]int64
}

func newSuperblocks(whole volume.Box) *superblocks {
	e := superblockEdge
	sb := &superblocks{whole: whole, by0: floorDivInt(whole.Min[1], e), bx0: floorDivInt(whole.Min[2], e)}
	sb.nby = floorDivInt(whole.Max[1]-1, e) - sb.by0 + 1
	sb.nbx = floorDivInt(whole.Max[2]-1, e) - sb.bx0 + 1
	sb.counts = make([][]int64, sb.nby*sb.nbx)
	sb.solid = make([][]int64, sb.nby*sb.nbx)
	return sb
}

func floorDivInt(a, b int) int {
	q := a / b
	if a%b != 0 && a < 0 {
		q--
	}
	return q
}

// parts calls f with the index and the part of core inside each
// superblock core meets.
func (sb *superblocks) parts(core volume.Box, f func(i int, part volume.Box) error) error {
	e := superblockEdge
	for by := floorDivInt(core.Min[1], e); by*e < core.Max[1]; by++ {
		for bx := floorDivInt(core.Min[2], e); bx*e < core.Max[2]; bx++ {
			part := core
			part.Min[1], part.Max[1] = max(core.Min[1], by*e), min(core.Max[1], (by+1)*e)
			part.Min[2], part.Max[2] = max(core.Min[2], bx*e), min(core.Max[2], (bx+1)*e)
			if err := f((by-sb.by0)*sb.nbx+bx-sb.bx0, part); err != nil {
				return err
			}
		}
	}
	return nil
}

// histogram is Histogram of core (grey and mask read for core plus the
// pass-1 halo) computed superblock part by part: the same histogram, with
// each part's counts also added to its superblock.
func (sb *superblocks) histogram(g volume.Any, core volume.Box, c campaign.Config, m *volume.Labels) (segment.Hist, error) {
	var h segment.Hist
	err := sb.parts(core, func(i int, part volume.Box) error {
		x, err := Histogram(g, part, c, m)
		if err != nil {
			return err
		}
		sb.mu.Lock()
		sb.counts[i] = addCounts(sb.counts[i], x.Counts)
		if len(x.Solid) > 0 {
			sb.solid[i] = addCounts(sb.solid[i], x.Solid)
		}
		sb.mu.Unlock()
		return h.Add(x)
	})
	return h, err
}

func addCounts(dst, src []int64) []int64 {
	if dst == nil {
		dst = make([]int64, len(src))
	}
	for i, v := range src {
		dst[i] += v
	}
	return dst
}

// restrict replaces h.Counts and h.Solid by those of the voxels inside
// c.Segment.Sample: the stored counts of superblocks wholly inside, plus
// the superblocks the sample's rim cuts filtered again (of each tile of t,
// only the bounding box of the cut parts is read; tiles that meet none are
// not read).
func (sb *superblocks) restrict(h *segment.Hist, t volume.Tiling, workers int, c campaign.Config, read func(volume.Box) (volume.Any, *volume.Labels, error)) error {
	s := c.Segment.Sample
	e := superblockEdge
	const (
		outside = iota
		inside
		cut
	)
	state := make([]uint8, len(sb.counts))
	for k := range state {
		by, bx := sb.by0+k/sb.nbx, sb.bx0+k%sb.nbx
		y0, y1 := max(by*e, sb.whole.Min[1]), min((by+1)*e, sb.whole.Max[1])
		x0, x1 := max(bx*e, sb.whole.Min[2]), min((bx+1)*e, sb.whole.Max[2])
		in, all := 0, 0
		for y := y0; y < y1; y++ {
			for x := x0; x < x1; x++ {
				all++
				if s.Inside(y, x) {
					in++
				}
			}
		}
		switch {
		case in == all:
			state[k] = inside
		case in > 0:
			state[k] = cut
		}
	}
	counts := make([]int64, len(h.Counts))
	var solid []int64
	if len(h.Solid) > 0 {
		solid = make([]int64, len(h.Solid))
	}
	for k, st := range state {
		if st != inside {
			continue
		}
		for i, v := range sb.counts[k] {
			counts[i] += v
		}
		if solid != nil {
			for i, v := range sb.solid[k] {
				solid[i] += v
			}
		}
	}
	var mu sync.Mutex
	err := forTiles(t, workers, func(core volume.Box) error {
		var parts []volume.Box
		_ = sb.parts(core, func(i int, part volume.Box) error {
			if state[i] == cut {
				parts = append(parts, part)
			}
			return nil
		})
		if len(parts) == 0 {
			return nil
		}
		// Read only the bounding box of the cut parts (plus the halo);
		// with the partial-volume blur of the reference mask the whole
		// tile, as pass 1 did: the blur reads the mask beyond the pass-1
		// halo and is clipped to the box read, so a smaller box would move
		// the bulk-fluid restriction near its faces.
		bb := parts[0]
		for _, p := range parts[1:] {
			for a := 0; a < 3; a++ {
				bb.Min[a], bb.Max[a] = min(bb.Min[a], p.Min[a]), max(bb.Max[a], p.Max[a])
			}
		}
		if c.Segment.Reference && c.Segment.PartialVolume.Blur > 0 {
			bb = core
		}
		g, m, err := read(bb)
		if err != nil {
			return err
		}
		for _, part := range parts {
			x, err := Histogram(g, part, c, m)
			if err != nil {
				return err
			}
			mu.Lock()
			for i, v := range x.Counts {
				counts[i] += v
			}
			for i, v := range x.Solid {
				solid[i] += v
			}
			mu.Unlock()
		}
		return nil
	})
	if err != nil {
		return err
	}
	h.Counts, h.Solid = counts, solid
	return nil
}
