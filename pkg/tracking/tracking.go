// Package tracking follows the nonwetting ganglia from one step of a
// displacement to the next. The ganglia of each step are the connected
// components of the nonwetting phase (package cluster, the measurement's
// connectivity, joined across tiles by its union-find merge); a ganglion of
// the earlier step and one of the later step are linked when they share at
// least one voxel. From the links:
//
//   - one-to-one: an earlier ganglion with exactly one later ganglion, which
//     has no other earlier one;
//   - split: an earlier ganglion linked to two or more later ones;
//   - merge: a later ganglion linked to two or more earlier ones;
//   - appeared: a later ganglion with no earlier one;
//   - vanished: an earlier ganglion with no later one.
//
// A ganglion is trapped when it touches neither the inlet nor the outlet
// face along the flow axis (cluster.Ganglion.Connected). A trapped ganglion
// keeps the birth of its predecessor when it is linked one-to-one to a
// trapped ganglion of the earlier step; otherwise it is born at the later
// step. Ganglia of the earlier step without a recorded birth (the first step
// of a run, or after a step without tracking) are taken as born at the
// earlier step, so lifetimes are lower bounds there. A trapped ganglion
// moved when it is linked one-to-one to a trapped predecessor but its voxels
// differ (their overlap is smaller than either). Ganglia are identified
// between the results of consecutive steps by their voxel count and the
// integer sums of their voxel coordinates, which every tiling gives alike.
// The definitions are ours; tracking ganglia by voxel overlap between
// consecutive time-resolved micro-CT volumes is common practice.
package tracking

import (
	"fmt"
	"sort"

	"sluice/pkg/cluster"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Side is the nonwetting components of one step in one tile, with the sums
// of their voxels' global coordinates.
type Side struct {
	Clusters *cluster.Tile `json:"clusters"`
	Sum      [][3]int64    `json:"sum_zyx"`
}

// Tile is the per-tile partial: both steps' components, the voxel overlap
// of their pairs (earlier local id, later local id, voxels) and the later
// step's pore voxels (wetting or nonwetting).
type Tile struct {
	Core    volume.Box `json:"core"`
	Prev    Side       `json:"prev"`
	Cur     Side       `json:"cur"`
	Overlap [][3]int64 `json:"overlap"`
	Pore    int64      `json:"pore_voxels"`
}

func side(lab *volume.Labels, s *phase.Set, core, whole volume.Box, opt cluster.Options) (Side, *cluster.Lookup) {
	ct, look := cluster.LabelLookup(lab, s, core, whole, opt, 0)
	sum := make([][3]int64, len(ct.Sizes))
	look.Runs(func(z, y, x0, x1 int, id int32) {
		n := int64(x1 - x0)
		p := &sum[id-1]
		p[0] += int64(z) * n
		p[1] += int64(y) * n
		p[2] += int64(x0+x1-1) * n / 2
	})
	return Side{Clusters: ct, Sum: sum}, look
}

// TileOf computes the partial of core from the labels of the earlier
// (prev) and later (cur) step, which must both cover core.
func TileOf(prev, cur *volume.Labels, core, whole volume.Box, codes phase.Codes, opt cluster.Options) (*Tile, error) {
	if core.Empty() || !prev.Box.ContainsBox(core) || !cur.Box.ContainsBox(core) || !whole.ContainsBox(core) {
		return nil, fmt.Errorf("tracking: core %v is empty or not inside the labels of both steps (%v, %v) and the volume %v", core, prev.Box, cur.Box, whole)
	}
	nw := phase.Of(codes.Nonwetting)
	t := &Tile{Core: core}
	var lp, lc *cluster.Lookup
	t.Prev, lp = side(prev, nw, core, whole, opt)
	defer lp.Release()
	t.Cur, lc = side(cur, nw, core, whole, opt)
	defer lc.Release()
	// Overlaps: voxels nonwetting in both steps, by pair of local ids.
	pairs := map[[2]int32]int64{}
	for z := core.Min[0]; z < core.Max[0]; z++ {
		for y := core.Min[1]; y < core.Max[1]; y++ {
			p := prev.Pix[prev.Index(z, y, core.Min[2]):][:core.Max[2]-core.Min[2]]
			c := cur.Pix[cur.Index(z, y, core.Min[2]):][:core.Max[2]-core.Min[2]]
			for i := range c {
				if c[i] == codes.Wetting || c[i] == codes.Nonwetting {
					t.Pore++
				}
				if p[i] == codes.Nonwetting && c[i] == codes.Nonwetting {
					x := core.Min[2] + i
					pairs[[2]int32{lp.At(z, y, x), lc.At(z, y, x)}]++
				}
			}
		}
	}
	for k, n := range pairs {
		t.Overlap = append(t.Overlap, [3]int64{int64(k[0]), int64(k[1]), n})
	}
	sort.Slice(t.Overlap, func(i, j int) bool {
		a, b := t.Overlap[i], t.Overlap[j]
		return a[0] < b[0] || a[0] == b[0] && a[1] < b[1]
	})
	return t, nil
}

// Ganglion is a ganglion of the whole volume in one step.
type Ganglion struct {
	Voxels  int64    `json:"voxels"`
	Sum     [3]int64 `json:"sum_zyx"`
	Trapped bool     `json:"-"`
}

// Links are the joined ganglia of both steps and their overlaps.
type Links struct {
	Prev, Cur []Ganglion
	// Overlap maps (earlier index, later index) to shared voxels.
	Overlap map[[2]int]int64
	// Pore is the later step's pore voxels.
	Pore int64
}

func joinSide(tiles []*Tile, whole volume.Box, opt cluster.Options, get func(*Tile) Side) ([]Ganglion, [][]int32, error) {
	cts := make([]*cluster.Tile, len(tiles))
	for i, t := range tiles {
		s := get(t)
		if s.Clusters == nil || len(s.Sum) != len(s.Clusters.Sizes) {
			return nil, nil, fmt.Errorf("tracking: tile %d has no or inconsistent components", i)
		}
		cts[i] = s.Clusters
	}
	m, err := cluster.Join(cts, whole, opt)
	if err != nil {
		return nil, nil, fmt.Errorf("tracking: %w", err)
	}
	g := make([]Ganglion, len(m.Ganglia))
	for i, gg := range m.Ganglia {
		g[i].Voxels, g[i].Trapped = gg.Voxels, !gg.Connected()
	}
	for i, t := range tiles {
		for j, k := range m.Local[i] {
			s := get(t).Sum[j]
			for a := range 3 {
				g[k].Sum[a] += s[a]
			}
		}
	}
	return g, m.Local, nil
}

// Join merges the tiles' partials (cores covering whole exactly once).
func Join(tiles []*Tile, whole volume.Box, opt cluster.Options) (*Links, error) {
	for i, t := range tiles {
		if t == nil {
			return nil, fmt.Errorf("tracking: tile %d missing", i)
		}
	}
	l := &Links{Overlap: map[[2]int]int64{}}
	var lp, lc [][]int32
	var err error
	if l.Prev, lp, err = joinSide(tiles, whole, opt, func(t *Tile) Side { return t.Prev }); err != nil {
		return nil, err
	}
	if l.Cur, lc, err = joinSide(tiles, whole, opt, func(t *Tile) Side { return t.Cur }); err != nil {
		return nil, err
	}
	for i, t := range tiles {
		l.Pore += t.Pore
		for _, o := range t.Overlap {
			a, b := o[0], o[1]
			if a < 1 || b < 1 || int(a) > len(lp[i]) || int(b) > len(lc[i]) {
				return nil, fmt.Errorf("tracking: tile %d overlap names components %d, %d", i, a, b)
			}
			l.Overlap[[2]int{int(lp[i][a-1]), int(lc[i][b-1])}] += o[2]
		}
	}
	return l, nil
}

// Trapped is one trapped ganglion of a step with its history.
type Trapped struct {
	Voxels int64    `json:"voxels"`
	Sum    [3]int64 `json:"sum_zyx"`
	// BornStep and BornS are the step (and its time) from which the
	// ganglion has been trapped without split or merge; LifetimeS is the
	// time since then.
	BornStep  string  `json:"born_step"`
	BornS     float64 `json:"born_s"`
	LifetimeS float64 `json:"lifetime_s"`
	// Moved is set when it was trapped one-to-one in the previous step
	// with other voxels.
	Moved bool `json:"moved"`
}

// Result is the ganglion_tracking object of a step result.
type Result struct {
	PreviousStep *string `json:"previous_step"`
	OneToOne     int     `json:"one_to_one"`
	Splits       int     `json:"splits"`
	Merges       int     `json:"merges"`
	Appeared     int     `json:"appeared"`
	Vanished     int     `json:"vanished"`
	// TrappedSaturation is the trapped nonwetting volume over the pore
	// volume (wetting + nonwetting voxels).
	TrappedSaturation *float64 `json:"trapped_saturation"`
	// TrappedMovedFraction is the fraction of the trapped ganglia with a
	// trapped one-to-one predecessor whose voxels changed; null without any.
	TrappedMovedFraction *float64 `json:"trapped_moved_fraction"`
	// LifetimeMeanS is the mean lifetime of the trapped ganglia.
	LifetimeMeanS *float64 `json:"trapped_lifetime_mean_s"`
	// Trapped lists the trapped ganglia, largest first.
	Trapped []Trapped `json:"trapped"`
	Note    string    `json:"note,omitempty"`
}

// Without is the Result when tracking against prev is not possible.
func Without(prev, reason string) *Result {
	return &Result{PreviousStep: &prev, Trapped: []Trapped{}, Note: reason}
}

// Track builds the Result of the later step: prevStep and prevS name the
// earlier step and its time, curStep and curS the later one; before holds
// the earlier step's trapped ganglia as its result recorded them (nil when
// it recorded none).
func Track(l *Links, prevStep string, prevS float64, curStep string, curS float64, before []Trapped) *Result {
	r := &Result{PreviousStep: &prevStep, Trapped: []Trapped{}}
	src := make([][]int, len(l.Cur))
	dst := make([][]int, len(l.Prev))
	overlap := map[[2]int]int64{}
	for k, n := range l.Overlap {
		src[k[1]] = append(src[k[1]], k[0])
		dst[k[0]] = append(dst[k[0]], k[1])
		overlap[k] = n
	}
	for p := range l.Prev {
		switch len(dst[p]) {
		case 0:
			r.Vanished++
		case 1:
			if len(src[dst[p][0]]) == 1 {
				r.OneToOne++
			}
		default:
			r.Splits++
		}
	}
	type key struct {
		v int64
		s [3]int64
	}
	born := map[key]Trapped{}
	for _, b := range before {
		born[key{b.Voxels, b.Sum}] = b
	}
	var trappedVox int64
	var candidates, moved int
	var life float64
	for c, g := range l.Cur {
		switch len(src[c]) {
		case 0:
			r.Appeared++
		case 1:
		default:
			r.Merges++
		}
		if !g.Trapped {
			continue
		}
		trappedVox += g.Voxels
		t := Trapped{Voxels: g.Voxels, Sum: g.Sum, BornStep: curStep, BornS: curS}
		if len(src[c]) == 1 && len(dst[src[c][0]]) == 1 && l.Prev[src[c][0]].Trapped {
			p := l.Prev[src[c][0]]
			t.BornStep, t.BornS = prevStep, prevS
			if b, ok := born[key{p.Voxels, p.Sum}]; ok {
				t.BornStep, t.BornS = b.BornStep, b.BornS
			}
			candidates++
			if n := overlap[[2]int{src[c][0], c}]; n < p.Voxels || n < g.Voxels {
				t.Moved = true
				moved++
			}
		}
		t.LifetimeS = curS - t.BornS
		life += t.LifetimeS
		r.Trapped = append(r.Trapped, t)
	}
	sort.SliceStable(r.Trapped, func(i, j int) bool {
		a, b := r.Trapped[i], r.Trapped[j]
		if a.Voxels != b.Voxels {
			return a.Voxels > b.Voxels
		}
		return a.Sum[0] < b.Sum[0] || a.Sum[0] == b.Sum[0] && (a.Sum[1] < b.Sum[1] || a.Sum[1] == b.Sum[1] && a.Sum[2] < b.Sum[2])
	})
	if l.Pore > 0 {
		s := float64(trappedVox) / float64(l.Pore)
		r.TrappedSaturation = &s
	}
	if candidates > 0 {
		f := float64(moved) / float64(candidates)
		r.TrappedMovedFraction = &f
	}
	if len(r.Trapped) > 0 {
		m := life / float64(len(r.Trapped))
		r.LifetimeMeanS = &m
	}
	return r
}
