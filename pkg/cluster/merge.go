package cluster

import (
	"fmt"
	"math"
	"math/bits"
	"sort"

	"sluice/pkg/volume"
)

// Ganglion is one cluster of the whole volume.
type Ganglion struct {
	// Voxels is the cluster volume in voxels.
	Voxels int64 `json:"voxels"`
	// Inlet and Outlet report whether the cluster touches the low and high
	// faces of the whole box along the flow axis.
	Inlet  bool `json:"inlet"`
	Outlet bool `json:"outlet"`
	// CurvArea and CurvKappaArea are the sums of the tiles'
	// per-component curvature sums (Tile.CurvArea, voxel² and voxel): the
	// ganglion's w–n interface area and integrated curvature. Valid only
	// when Merged.Curvature is set.
	CurvArea      float64 `json:"curv_area,omitempty"`
	CurvKappaArea float64 `json:"curv_kappa_area,omitempty"`
	// Euler8 is 8 × the ganglion's Euler characteristic (connectivity of
	// the clusters), the sum of the tiles' Tile.Euler8 shares. Valid only
	// when Merged.Euler is set.
	Euler8 int64 `json:"euler8,omitempty"`
	// Topo is the sum of the tiles' Tile.Topo shares. Valid only when
	// Merged.Topo is set.
	Topo TopoSums `json:"topo,omitzero"`
}

// Euler returns the ganglion's Euler characteristic (components − tunnels
// + cavities, with the connectivity of the clusters); valid only when
// Merged.Euler is set.
func (g Ganglion) Euler() int64 { return g.Euler8 / 8 }

// Connected reports whether the ganglion touches the inlet or the outlet
// face: the definition Summary uses for connected and trapped volume.
func (g Ganglion) Connected() bool { return g.Inlet || g.Outlet }

// Merged is the whole-volume cluster set joined from tiles.
type Merged struct {
	// Ganglia lists the clusters, largest first (ties: inlet and outlet
	// contact first). The list is the same for every tiling, except that
	// ganglia equal in size and contact may come in another order.
	Ganglia []Ganglion
	// Local[t][i-1] is the index in Ganglia of local component i of tile t,
	// for relabelling a tile's label chunk with whole-volume cluster ids.
	Local [][]int32
	// Curvature reports whether every tile carried per-component
	// curvature sums, so that Ganglion.CurvArea and CurvKappaArea hold the
	// whole-volume sums.
	Curvature bool
	// CurvatureErr says why Curvature is false although every tile carried
	// sums (a sum that could not be placed); empty otherwise.
	CurvatureErr string
	// Euler reports whether every tile carried per-component Euler shares
	// (Tile.Euler8) besides the curvature sums, so that Ganglion.Euler8
	// holds each ganglion's whole Euler characteristic.
	Euler bool
	// Topo reports whether every tile carried topological contact-angle
	// sums (Tile.Topo) besides the curvature sums, so that Ganglion.Topo
	// holds each ganglion's whole sums.
	Topo bool
}

// forest is a disjoint-set forest with union by size and path compression
// (Tarjan 1975).
type forest struct {
	parent []int32
	size   []int32 // number of elements under a root
}

func newForest(n int) *forest {
	f := &forest{parent: make([]int32, n), size: make([]int32, n)}
	for i := range f.parent {
		f.parent[i] = int32(i)
		f.size[i] = 1
	}
	return f
}

func (f *forest) find(a int32) int32 {
	r := a
	for f.parent[r] != r {
		r = f.parent[r]
	}
	for f.parent[a] != r { // compress the path
		a, f.parent[a] = f.parent[a], r
	}
	return r
}

func (f *forest) union(a, b int32) {
	a, b = f.find(a), f.find(b)
	if a == b {
		return
	}
	if f.size[a] < f.size[b] {
		a, b = b, a
	}
	f.parent[b] = a
	f.size[a] += f.size[b]
}

// Join merges tile partials into the clusters of the whole volume. The
// tiles' cores must cover whole exactly once, and every tile must have been
// labelled with the same options and whole box.
func Join(tiles []*Tile, whole volume.Box, opt Options) (*Merged, error) {
	opt, err := opt.normalized()
	if err != nil {
		return nil, err
	}
	if err := checkTiles(tiles, whole, opt); err != nil {
		return nil, err
	}
	// Global ids: local id i of tile t is base[t]+i; 0 means "not in set".
	base := make([]int64, len(tiles)+1)
	for t, tl := range tiles {
		base[t+1] = base[t] + int64(len(tl.Sizes))
	}
	total := base[len(tiles)]
	if total >= math.MaxInt32 {
		return nil, fmt.Errorf("cluster: %d tile components exceed the merger's 2³¹−1 limit", total)
	}
	uf := newForest(int(total) + 1)
	if err := joinFaces(tiles, whole, opt, base, uf); err != nil {
		return nil, err
	}

	// Collect roots into ganglia in tile order.
	index := make([]int32, total+1)
	for i := range index {
		index[i] = -1
	}
	m := &Merged{Local: make([][]int32, len(tiles)), Curvature: true, Euler: true, Topo: true}
	for t, tl := range tiles {
		curv := tl.HasCurvature()
		m.Curvature = m.Curvature && curv
		m.Euler = m.Euler && curv && len(tl.Euler8) == len(tl.Sizes)
		m.Topo = m.Topo && curv && tl.TopoMeasured && len(tl.Topo) == len(tl.Sizes)
		m.Local[t] = make([]int32, len(tl.Sizes))
		for i, sz := range tl.Sizes {
			r := uf.find(int32(base[t]) + int32(i) + 1)
			g := index[r]
			if g < 0 {
				g = int32(len(m.Ganglia))
				index[r] = g
				m.Ganglia = append(m.Ganglia, Ganglion{})
			}
			m.Ganglia[g].Voxels += sz
			m.Ganglia[g].Inlet = m.Ganglia[g].Inlet || tl.Inlet[i]
			m.Ganglia[g].Outlet = m.Ganglia[g].Outlet || tl.Outlet[i]
			if curv && len(tl.CurvArea) > 0 {
				m.Ganglia[g].CurvArea += tl.CurvArea[i]
				m.Ganglia[g].CurvKappaArea += tl.CurvKappaArea[i]
			}
			if len(tl.Euler8) == len(tl.Sizes) {
				m.Ganglia[g].Euler8 += tl.Euler8[i]
			}
			if len(tl.Topo) == len(tl.Sizes) {
				m.Ganglia[g].Topo.Add(tl.Topo[i])
			}
			m.Local[t][i] = g
		}
	}
	// Canonical order: largest first, then inlet/outlet contact.
	order := make([]int32, len(m.Ganglia))
	for i := range order {
		order[i] = int32(i)
	}
	less := func(a, b Ganglion) bool {
		if a.Voxels != b.Voxels {
			return a.Voxels > b.Voxels
		}
		if a.Inlet != b.Inlet {
			return a.Inlet
		}
		return a.Outlet && !b.Outlet
	}
	sort.SliceStable(order, func(i, j int) bool { return less(m.Ganglia[order[i]], m.Ganglia[order[j]]) })
	rank := make([]int32, len(order))
	sorted := make([]Ganglion, len(order))
	for k, g := range order {
		rank[g] = int32(k)
		sorted[k] = m.Ganglia[g]
	}
	m.Ganglia = sorted
	for _, loc := range m.Local {
		for i, g := range loc {
			loc[i] = rank[g]
		}
	}
	if m.Curvature {
		r := m.Resolver(tiles)
	foreign:
		for t, tl := range tiles {
			for _, f := range tl.CurvForeign {
				g, err := r.At(f.At)
				if err != nil {
					// Inconsistent tile results: report no per-ganglion
					// curvature rather than a partial one.
					m.Curvature, m.Euler, m.Topo = false, false, false
					m.CurvatureErr = fmt.Sprintf("tile %d: curvature sum at %v: %v", t, f.At, err)
					for i := range m.Ganglia {
						m.Ganglia[i].CurvArea, m.Ganglia[i].CurvKappaArea, m.Ganglia[i].Euler8 = 0, 0, 0
						m.Ganglia[i].Topo = TopoSums{}
					}
					break foreign
				}
				m.Ganglia[g].CurvArea += f.Area
				m.Ganglia[g].CurvKappaArea += f.KappaArea
				m.Ganglia[g].Euler8 += f.Euler8
				if f.Topo != nil {
					m.Ganglia[g].Topo.Add(*f.Topo)
				}
			}
		}
	}
	return m, nil
}

// Resolver finds the whole-volume ganglion of a voxel that lies in the Rim
// of its tile.
type Resolver struct {
	m     *Merged
	tiles []*Tile
	last  int
	cache map[[2]int][]int32 // (tile, rim plane) → decoded plane
}

// Resolver returns a Resolver over the tiles Join merged into m.
func (m *Merged) Resolver(tiles []*Tile) *Resolver {
	return &Resolver{m: m, tiles: tiles, cache: map[[2]int][]int32{}}
}

// At returns the index in Ganglia of the ganglion holding voxel p, read
// from the Rim of the tile whose core holds p. It fails when no tile holds
// p, p lies deeper than that tile's RimDepth, or p is not in the set.
func (r *Resolver) At(p [3]int) (int32, error) {
	t := -1
	if r.last < len(r.tiles) && r.tiles[r.last].Core.Contains(p[0], p[1], p[2]) {
		t = r.last
	} else {
		for i, tl := range r.tiles {
			if tl.Core.Contains(p[0], p[1], p[2]) {
				t = i
				break
			}
		}
	}
	if t < 0 {
		return 0, fmt.Errorf("no tile holds voxel %v", p)
	}
	r.last = t
	tl := r.tiles[t]
	c, n := tl.Core, tl.Core.Size()
	for a := 0; a < 3; a++ {
		for side := 0; side < 2; side++ {
			d := p[a] - c.Min[a]
			if side == 1 {
				d = c.Max[a] - 1 - p[a]
			}
			if d >= tl.RimDepth {
				continue
			}
			k := (2*a+side)*tl.RimDepth + d
			key := [2]int{t, k}
			plane, ok := r.cache[key]
			if !ok {
				pl := tl.Rim[k]
				plane = make([]int32, pl.Rows*pl.Cols)
				if err := pl.Decode(plane); err != nil {
					return 0, err
				}
				r.cache[key] = plane
			}
			u, v := planeAxes(a)
			id := plane[(p[u]-c.Min[u])*n[v]+p[v]-c.Min[v]]
			if id <= 0 {
				return 0, fmt.Errorf("voxel %v is not in the set in tile %d", p, t)
			}
			return r.m.Local[t][id-1], nil
		}
	}
	return 0, fmt.Errorf("voxel %v lies deeper than the rim (%d) of tile %d", p, tl.RimDepth, t)
}

// checkTiles validates the tiles' metadata and that their cores partition
// whole.
func checkTiles(tiles []*Tile, whole volume.Box, opt Options) error {
	if whole.Empty() {
		return fmt.Errorf("cluster: whole box %v is empty", whole)
	}
	var sum int64
	for t, tl := range tiles {
		if tl == nil {
			return fmt.Errorf("cluster: tile %d is missing", t)
		}
		if tl.Whole != whole {
			return fmt.Errorf("cluster: tile %d was labelled for whole box %v, merging %v", t, tl.Whole, whole)
		}
		if tl.Connectivity != opt.Connectivity || tl.FlowAxis != opt.FlowAxis {
			return fmt.Errorf("cluster: tile %d was labelled with connectivity %d, flow axis %d; merging with %d, %d",
				t, tl.Connectivity, tl.FlowAxis, opt.Connectivity, opt.FlowAxis)
		}
		if tl.Core.Empty() || !whole.ContainsBox(tl.Core) {
			return fmt.Errorf("cluster: tile %d core %v is empty or outside %v", t, tl.Core, whole)
		}
		if len(tl.Inlet) != len(tl.Sizes) || len(tl.Outlet) != len(tl.Sizes) {
			return fmt.Errorf("cluster: tile %d has %d sizes, %d inlet and %d outlet flags", t, len(tl.Sizes), len(tl.Inlet), len(tl.Outlet))
		}
		if (len(tl.CurvArea) != 0 || len(tl.CurvKappaArea) != 0) && (len(tl.CurvArea) != len(tl.Sizes) || len(tl.CurvKappaArea) != len(tl.Sizes)) {
			return fmt.Errorf("cluster: tile %d has %d sizes, %d and %d curvature sums", t, len(tl.Sizes), len(tl.CurvArea), len(tl.CurvKappaArea))
		}
		if len(tl.Euler8) != 0 && len(tl.Euler8) != len(tl.Sizes) {
			return fmt.Errorf("cluster: tile %d has %d sizes, %d Euler shares", t, len(tl.Sizes), len(tl.Euler8))
		}
		if len(tl.Topo) != 0 && len(tl.Topo) != len(tl.Sizes) {
			return fmt.Errorf("cluster: tile %d has %d sizes, %d topological-angle sums", t, len(tl.Sizes), len(tl.Topo))
		}
		n := tl.Core.Size()
		if tl.RimDepth < 0 || len(tl.Rim) != 6*tl.RimDepth {
			return fmt.Errorf("cluster: tile %d has %d rim planes for depth %d", t, len(tl.Rim), tl.RimDepth)
		}
		for k, p := range tl.Rim {
			u, v := planeAxes(k / tl.RimDepth / 2)
			if p.Rows != n[u] || p.Cols != n[v] {
				return fmt.Errorf("cluster: tile %d rim plane %d is %d×%d, core %v needs %d×%d", t, k, p.Rows, p.Cols, tl.Core, n[u], n[v])
			}
			if err := p.check(n[u]*n[v], len(tl.Sizes)); err != nil {
				return fmt.Errorf("cluster: tile %d rim plane %d: %w", t, k, err)
			}
		}
		for a := 0; a < 3; a++ {
			u, v := planeAxes(a)
			for side := 0; side < 2; side++ {
				p := tl.Faces[2*a+side]
				if p.Rows != n[u] || p.Cols != n[v] {
					return fmt.Errorf("cluster: tile %d face %d is %d×%d, core %v needs %d×%d", t, 2*a+side, p.Rows, p.Cols, tl.Core, n[u], n[v])
				}
				if err := p.check(n[u]*n[v], len(tl.Sizes)); err != nil {
					return fmt.Errorf("cluster: tile %d face %d: %w", t, 2*a+side, err)
				}
			}
		}
		sum += int64(tl.Core.Voxels())
	}
	if sum != int64(whole.Voxels()) {
		return fmt.Errorf("cluster: tile cores hold %d voxels, whole box %v holds %d", sum, whole, whole.Voxels())
	}
	// Equal volume and no overlap means an exact cover.
	idx := make([]int, len(tiles))
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(i, j int) bool { return tiles[idx[i]].Core.Min[0] < tiles[idx[j]].Core.Min[0] })
	for i, a := range idx {
		ca := tiles[a].Core
		for _, b := range idx[i+1:] {
			cb := tiles[b].Core
			if cb.Min[0] >= ca.Max[0] {
				break
			}
			if !ca.Intersect(cb).Empty() {
				return fmt.Errorf("cluster: tile %d core %v overlaps tile %d core %v", a, ca, b, cb)
			}
		}
	}
	return nil
}

// joinFaces unions the global ids of set voxels that touch across tile
// boundaries.
func joinFaces(tiles []*Tile, whole volume.Box, opt Options, base []int64, uf *forest) error {
	ws := whole.Size()
	var lowBuf, highBuf, faceBuf []int32
	for a := 0; a < 3; a++ {
		u, v := planeAxes(a)
		rows, cols := ws[u], ws[v]
		if cap(lowBuf) < rows*cols {
			lowBuf = make([]int32, rows*cols)
			highBuf = make([]int32, rows*cols)
		}
		low, high := lowBuf[:rows*cols], highBuf[:rows*cols]
		// Tiles ending (starting) at each internal boundary coordinate.
		ending := map[int][]int{}
		starting := map[int][]int{}
		for t, tl := range tiles {
			if c := tl.Core.Max[a]; c < whole.Max[a] {
				ending[c] = append(ending[c], t)
			}
			if c := tl.Core.Min[a]; c > whole.Min[a] {
				starting[c] = append(starting[c], t)
			}
		}
		coords := make([]int, 0, len(ending))
		for c := range ending {
			coords = append(coords, c)
		}
		sort.Ints(coords)
		for _, c := range coords {
			ends, starts := ending[c], starting[c]
			if len(starts) == 0 {
				return fmt.Errorf("cluster: no tile starts at %d along axis %d where tiles end", c, a)
			}
			paint := func(plane []int32, list []int, side int, erase bool) error {
				for _, t := range list {
					tl := tiles[t]
					p := tl.Faces[2*a+side]
					n := p.Rows * p.Cols
					if cap(faceBuf) < n {
						faceBuf = make([]int32, n)
					}
					fb := faceBuf[:n]
					if !erase {
						if err := p.Decode(fb); err != nil {
							return fmt.Errorf("cluster: tile %d: %w", t, err)
						}
					}
					r0, c0 := tl.Core.Min[u]-whole.Min[u], tl.Core.Min[v]-whole.Min[v]
					off := int32(base[t])
					for i := 0; i < p.Rows; i++ {
						dst := plane[(r0+i)*cols+c0:][:p.Cols]
						if erase {
							clear(dst)
							continue
						}
						for j, id := range fb[i*p.Cols : (i+1)*p.Cols] {
							if id != 0 {
								dst[j] = off + id
							} else {
								dst[j] = 0
							}
						}
					}
				}
				return nil
			}
			if err := paint(low, ends, 1, false); err != nil {
				return err
			}
			if err := paint(high, starts, 0, false); err != nil {
				return err
			}
			// Union across the plane pair, scanning only the painted low
			// rectangles.
			for _, t := range ends {
				cr := tiles[t].Core
				for i := cr.Min[u] - whole.Min[u]; i < cr.Max[u]-whole.Min[u]; i++ {
					for j := cr.Min[v] - whole.Min[v]; j < cr.Max[v]-whole.Min[v]; j++ {
						g := low[i*cols+j]
						if g == 0 {
							continue
						}
						if opt.Connectivity == 6 {
							if h := high[i*cols+j]; h != 0 {
								uf.union(g, h)
							}
							continue
						}
						for di := max(i-1, 0); di <= min(i+1, rows-1); di++ {
							for dj := max(j-1, 0); dj <= min(j+1, cols-1); dj++ {
								if h := high[di*cols+dj]; h != 0 {
									uf.union(g, h)
								}
							}
						}
					}
				}
			}
			_ = paint(low, ends, 1, true)
			_ = paint(high, starts, 0, true)
		}
	}
	return nil
}

// Summary holds the whole-volume cluster statistics of one step.
type Summary struct {
	// Connectivity and FlowAxis are the options the clusters were found with.
	Connectivity int `json:"connectivity"`
	FlowAxis     int `json:"flow_axis"`
	// Count is the number of clusters; Total their summed volume (voxels).
	Count int   `json:"count"`
	Total int64 `json:"total_voxels"`
	// Largest is the volume of the largest cluster, LargestFraction its
	// share of Total.
	Largest         int64   `json:"largest_voxels"`
	LargestFraction float64 `json:"largest_fraction"`
	// Percolates reports whether some cluster touches both the inlet and
	// the outlet face; Spanning counts such clusters and SpanningFraction
	// is their share of Total.
	Percolates       bool    `json:"percolates"`
	Spanning         int     `json:"spanning_count"`
	SpanningFraction float64 `json:"spanning_fraction"`
	// ConnectedVoxels is the volume of clusters touching the inlet or the
	// outlet face; TrappedVoxels the volume of the isolated rest.
	// ConnectedFraction + TrappedFraction = 1 when Total > 0.
	ConnectedVoxels   int64   `json:"connected_voxels"`
	TrappedVoxels     int64   `json:"trapped_voxels"`
	ConnectedFraction float64 `json:"connected_fraction"`
	TrappedFraction   float64 `json:"trapped_fraction"`
	// TrappedCount is the number of isolated clusters.
	TrappedCount int `json:"trapped_count"`
	// SizeHistogram[k] counts clusters of 2^k to 2^(k+1)−1 voxels.
	SizeHistogram []int64 `json:"size_histogram"`
}

// Summarize computes the Summary of a cluster list.
func Summarize(ganglia []Ganglion, opt Options) Summary {
	s := Summary{Connectivity: opt.Connectivity, FlowAxis: opt.FlowAxis, Count: len(ganglia)}
	if s.Connectivity == 0 {
		s.Connectivity = 26
	}
	var spanning int64
	for _, g := range ganglia {
		s.Total += g.Voxels
		s.Largest = max(s.Largest, g.Voxels)
		if g.Inlet && g.Outlet {
			s.Spanning++
			spanning += g.Voxels
		}
		if g.Connected() {
			s.ConnectedVoxels += g.Voxels
		} else {
			s.TrappedVoxels += g.Voxels
			s.TrappedCount++
		}
		if g.Voxels > 0 {
			k := bits.Len64(uint64(g.Voxels)) - 1
			for len(s.SizeHistogram) <= k {
				s.SizeHistogram = append(s.SizeHistogram, 0)
			}
			s.SizeHistogram[k]++
		}
	}
	s.Percolates = s.Spanning > 0
	if s.Total > 0 {
		t := float64(s.Total)
		s.LargestFraction = float64(s.Largest) / t
		s.SpanningFraction = float64(spanning) / t
		s.ConnectedFraction = float64(s.ConnectedVoxels) / t
		s.TrappedFraction = float64(s.TrappedVoxels) / t
	}
	return s
}

// Merge joins the tiles (whose cores cover whole exactly once) and
// summarises the whole-volume clusters. A single tile covering whole gives
// the whole-volume result with nothing to join.
func Merge(tiles []*Tile, whole volume.Box, opt Options) (Summary, error) {
	m, err := Join(tiles, whole, opt)
	if err != nil {
		return Summary{}, err
	}
	opt, _ = opt.normalized()
	return Summarize(m.Ganglia, opt), nil
}
