// Package cluster finds the connected clusters (ganglia) of a phase, tile by
// tile, and merges the tiles' partial results into the whole-volume result.
//
// Labelling within a tile is the classical two-pass connected-component
// algorithm (Rosenfeld & Pfaltz 1966, J. ACM 13:471) applied to runs, the
// maximal stretches of set voxels along x: a raster scan gives each run the
// provisional label of an already visited run it touches and records label
// equivalences in a union-find forest; a second pass replaces every
// provisional label by its class, numbered in raster order of first
// appearance. Connectivity is 26 (faces, edges and corners) or 6 (faces).
// The face planes a tile reports are read from the runs; no label array of
// the tile is built.
//
// Tiles are merged with a disjoint-set forest (union by size, path
// compression; Tarjan 1975, J. ACM 22:215). Each tile keeps the labels on
// its six core faces, run-length encoded. Two distinct tiles of a partition
// of the volume into boxes are separated along some axis a; any two
// neighbouring voxels p, q lying in different tiles therefore sit on facing
// core planes at a = c−1 and a = c for one boundary coordinate c. So the
// merger assembles, for every axis and boundary coordinate, the plane of all
// '+a' faces ending at c and the plane of all '−a' faces starting at c, and
// unions every pair of set voxels that touch across them (in-plane offsets
// {−1,0,1}² for 26-connectivity, {0} for 6). This works for any partition
// into boxes, grid or not, and gives exactly the whole-volume clusters.
package cluster

import (
	"fmt"
	"sync"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Options selects the connectivity and the flow axis.
type Options struct {
	// Connectivity is 26 (default when 0) or 6.
	Connectivity int `json:"connectivity"`
	// FlowAxis is the axis along which inlet and outlet lie: 0 = z
	// (default), 1 = y, 2 = x. The inlet is the low face of the whole box
	// along it, the outlet the high face.
	FlowAxis int `json:"flow_axis"`
}

func (o Options) normalized() (Options, error) {
	if o.Connectivity == 0 {
		o.Connectivity = 26
	}
	if o.Connectivity != 26 && o.Connectivity != 6 {
		return o, fmt.Errorf("cluster: connectivity %d (want 6 or 26)", o.Connectivity)
	}
	if o.FlowAxis < 0 || o.FlowAxis > 2 {
		return o, fmt.Errorf("cluster: flow axis %d (want 0 = z, 1 = y or 2 = x)", o.FlowAxis)
	}
	return o, nil
}

// Face indices into Tile.Faces: the low and high core planes along z, y, x.
const (
	FaceLowZ = iota
	FaceHighZ
	FaceLowY
	FaceHighY
	FaceLowX
	FaceHighX
)

// Tile is the per-tile partial result: the connected components of the set
// restricted to the tile core, with what the merger needs to join them to
// the components of other tiles. It is plain data and round-trips through
// JSON.
type Tile struct {
	// Core is the box of global voxel coordinates the tile covers.
	Core volume.Box `json:"core"`
	// Whole is the box of the whole volume (for inlet and outlet faces).
	Whole volume.Box `json:"whole"`
	// Connectivity and FlowAxis are the options the tile was labelled with.
	Connectivity int `json:"connectivity"`
	FlowAxis     int `json:"flow_axis"`
	// Sizes[i-1] is the voxel count of local component i; local ids run
	// 1..len(Sizes) in raster order (z, then y, then x) of first voxel.
	Sizes []int64 `json:"sizes"`
	// Inlet[i-1] (Outlet[i-1]) reports whether local component i has a
	// voxel on the low (high) face of Whole along the flow axis.
	Inlet  []bool `json:"inlet"`
	Outlet []bool `json:"outlet"`
	// Faces holds the local ids on the core's six boundary planes in the
	// order −z, +z, −y, +y, −x, +x (see FaceLowZ...); 0 = not in the set.
	Faces [6]Plane `json:"faces"`
	// CurvArea[i-1] and CurvKappaArea[i-1] are the interface area Σw and
	// integrated curvature Σκw (voxel², voxel) of the w–n band voxels
	// attributed to local component i (package curvature,
	// MeasureAttributed; set by package measure). Both nil when curvature
	// was not measured, or in results written before they existed. They
	// add over the tiles of a ganglion in Join.
	CurvArea      []float64 `json:"curv_area,omitempty"`
	CurvKappaArea []float64 `json:"curv_kappa_area,omitempty"`
	// CurvForeign holds the sums of band voxels of this tile attributed to
	// nonwetting voxels outside its core that no local component reaches
	// within the attribution box: each names one voxel At (global z, y, x)
	// of that nonwetting piece, which lies in another tile's Rim; Join
	// adds the sums to the ganglion there.
	CurvForeign []Foreign `json:"curv_foreign,omitempty"`
	// Euler8[i-1] is 8 times the share of local component i in the Euler
	// characteristic of its ganglion: the 2×2×2 cell weights (package
	// morph, with the tile's connectivity) of the cells this tile owns,
	// each cell's set voxels split by the component they belong to (set by
	// package measure with the curvature attribution; cells whose set
	// voxels all lie outside the core go to CurvForeign like the curvature
	// sums). Nil when not measured or in results written before it
	// existed. Adds over the tiles of a ganglion in Join; the sum over all
	// ganglia is 8 × the phase's Euler characteristic.
	Euler8 []int64 `json:"euler8,omitempty"`
	// Topo[i-1] holds local component i's share of the contact-line
	// turning sums of the topological contact angle (package measure,
	// topoangle.go), set with the curvature attribution; sums of
	// nonwetting voxels outside the core go to CurvForeign. Nil when not
	// measured or in results written before it existed. Adds over the
	// tiles of a ganglion in Join.
	Topo []TopoSums `json:"topo,omitempty"`
	// TopoMeasured reports that the topological sums were measured (Topo
	// then has one entry per component, none for a tile without any).
	TopoMeasured bool `json:"topo_measured,omitempty"`
	// RimDepth is the number of core layers on each side kept in Rim: the
	// local ids of planes 0..RimDepth−1 from each of the six faces, plane
	// (2a+side)·RimDepth + d at depth d from face 2a+side, laid out as
	// Faces (depth 0 repeats the face). Join reads them to find the
	// ganglion of another tile's CurvForeign voxel. 0 when not kept.
	RimDepth int     `json:"rim_depth,omitempty"`
	Rim      []Plane `json:"rim,omitempty"`
}

// Foreign is a curvature sum attributed to the ganglion holding voxel At.
type Foreign struct {
	At        [3]int  `json:"at"`
	Area      float64 `json:"area"`
	KappaArea float64 `json:"kappa_area"`
	// Euler8 is 8 × an Euler-characteristic share (see Tile.Euler8).
	Euler8 int64 `json:"euler8,omitempty"`
	// Topo is a share of the topological contact-angle sums (Tile.Topo).
	Topo *TopoSums `json:"topo,omitempty"`
}

// TopoLevels is the number of distances from the solid at which the
// topological contact angle's turning sums are taken (package measure).
const TopoLevels = 5

// TopoSums are a ganglion's (or a share of its) contact-line turning sums:
// at each of TopoLevels distances d from the solid, WN[k] is the turning
// ∮κ_g ds (radians) of the boundary of its w–n interface clipped to
// distance > d from the solid, NS[k] that of the surface at distance d from
// the solid clipped to the inside of the ganglion. Border reports that the
// ganglion reaches the image border or voxels outside the sample, where its
// surface is not closed by fluid and solid.
type TopoSums struct {
	WN     [TopoLevels]float64 `json:"wn"`
	NS     [TopoLevels]float64 `json:"ns"`
	Border bool                `json:"border,omitempty"`
}

// Add adds o to s.
func (s *TopoSums) Add(o TopoSums) {
	for k := range s.WN {
		s.WN[k] += o.WN[k]
		s.NS[k] += o.NS[k]
	}
	s.Border = s.Border || o.Border
}

// HasCurvature reports whether the tile carries per-component curvature
// sums and the rim other tiles' sums are placed by (always true for a tile
// without components).
func (t *Tile) HasCurvature() bool {
	return len(t.Sizes) == 0 || (len(t.CurvArea) == len(t.Sizes) && len(t.CurvKappaArea) == len(t.Sizes) && t.RimDepth > 0)
}

// Plane is a run-length encoded plane of local component ids. A face
// normal to axis a spans the other two axes in increasing order: (y, x) for
// z faces, (z, x) for y faces, (z, y) for x faces. Element (i, j), i along
// the first of them, is number i*Cols+j in row-major order.
type Plane struct {
	Rows int `json:"rows"`
	Cols int `json:"cols"`
	// Runs holds (id, count) pairs: count consecutive elements equal to id.
	Runs []int32 `json:"runs"`
}

// encodePlane run-length encodes vals as a rows × cols plane.
func encodePlane(vals []int32, rows, cols int) Plane {
	p := Plane{Rows: rows, Cols: cols}
	for i := 0; i < len(vals); {
		j := i + 1
		for j < len(vals) && vals[j] == vals[i] {
			j++
		}
		p.Runs = append(p.Runs, vals[i], int32(j-i))
		i = j
	}
	return p
}

// Decode expands the plane into dst, which must hold Rows*Cols elements.
func (p Plane) Decode(dst []int32) error {
	if err := p.check(len(dst), -1); err != nil {
		return err
	}
	k := 0
	for r := 0; r < len(p.Runs); r += 2 {
		id, n := p.Runs[r], int(p.Runs[r+1])
		for e := k + n; k < e; k++ {
			dst[k] = id
		}
	}
	return nil
}

// check validates the run structure against n elements and, when maxID >=
// 0, ids in [0, maxID].
func (p Plane) check(n, maxID int) error {
	if p.Rows < 0 || p.Cols < 0 || p.Rows*p.Cols != n {
		return fmt.Errorf("cluster: plane of %d×%d for %d elements", p.Rows, p.Cols, n)
	}
	if len(p.Runs)%2 != 0 {
		return fmt.Errorf("cluster: plane run list of odd length %d", len(p.Runs))
	}
	total := 0
	for r := 0; r < len(p.Runs); r += 2 {
		id, c := p.Runs[r], p.Runs[r+1]
		if c <= 0 || id < 0 || (maxID >= 0 && int(id) > maxID) {
			return fmt.Errorf("cluster: plane run (%d, %d) invalid", id, c)
		}
		total += int(c)
	}
	if total != n {
		return fmt.Errorf("cluster: plane runs cover %d of %d elements", total, n)
	}
	return nil
}

// planeAxes returns the two in-plane axes of a face normal to axis a.
func planeAxes(a int) (u, v int) {
	switch a {
	case 0:
		return 1, 2
	case 1:
		return 0, 2
	}
	return 0, 1
}

// offsets returns the backward neighbour offsets (dz, dy, dx) of a raster
// scan for the connectivity: those visited before the current voxel.
func offsets(conn int) [][3]int {
	if conn == 6 {
		return [][3]int{{-1, 0, 0}, {0, -1, 0}, {0, 0, -1}}
	}
	var out [][3]int
	for dz := -1; dz <= 0; dz++ {
		for dy := -1; dy <= 1; dy++ {
			for dx := -1; dx <= 1; dx++ {
				if dz < 0 || dy < 0 || (dy == 0 && dx < 0) {
					out = append(out, [3]int{dz, dy, dx})
				}
			}
		}
	}
	return out // 13 offsets
}

// Label finds the components of {voxels whose label is in s} restricted to
// core, which must lie inside lab.Box (lab may carry a halo; it is not
// read). whole is the box of the whole volume, used for the inlet and outlet
// faces. Label panics on invalid options or a core outside lab.Box, both
// programming errors.
//
// Memory: the runs of the set along x (12 bytes each, see labelRuns) and
// one face plane of int32; the run buffers go back to a sync.Pool for the
// next call (dropped by the garbage collector when unused). No per-voxel
// label array.
func Label(lab *volume.Labels, s *phase.Set, core, whole volume.Box, opt Options) *Tile {
	t, rl := label(lab, s, core, whole, opt)
	rl.release()
	return t
}

// Lookup answers which local component a voxel of a labelled core
// belongs to. Release it when done; it must not be used after.
type Lookup struct {
	core  volume.Box
	rl    *runLabels
	first [][3]int // LabelBox only
}

// LabelLookup is Label that also returns a Lookup of the core's local ids
// and keeps rimDepth layers of the core on each side in Tile.Rim (none
// when rimDepth ≤ 0).
func LabelLookup(lab *volume.Labels, s *phase.Set, core, whole volume.Box, opt Options, rimDepth int) (*Tile, *Lookup) {
	t, rl := label(lab, s, core, whole, opt)
	if rimDepth > 0 {
		n := core.Size()
		t.RimDepth = rimDepth
		t.Rim = make([]Plane, 6*rimDepth)
		var buf []int32
		for a := 0; a < 3; a++ {
			u, v := planeAxes(a)
			for side := 0; side < 2; side++ {
				for d := 0; d < rimDepth; d++ {
					at := min(d, n[a]-1)
					if side == 1 {
						at = max(n[a]-1-d, 0)
					}
					if cap(buf) < n[u]*n[v] {
						buf = make([]int32, n[u]*n[v])
					}
					buf = rl.plane(a, at, buf)
					t.Rim[(2*a+side)*rimDepth+d] = encodePlane(buf, n[u], n[v])
				}
			}
		}
	}
	return t, &Lookup{core: core, rl: rl}
}

// LabelBox labels the set on box (inside lab.Box) for lookups only: no
// faces, no flags. Components are numbered 1.. in raster order of their
// first voxel, which First returns.
func LabelBox(lab *volume.Labels, s *phase.Set, box volume.Box, opt Options) *Lookup {
	opt, err := opt.normalized()
	if err != nil {
		panic(err)
	}
	rl, sizes := labelRuns(lab, s, box, opt.Connectivity)
	l := &Lookup{core: box, rl: rl, first: make([][3]int, len(sizes))}
	seen := make([]bool, len(sizes))
	for r := 0; r < rl.N[0]*rl.N[1]; r++ {
		for _, u := range rl.Runs[rl.Start[r]:rl.Start[r+1]] {
			if !seen[u.L-1] {
				seen[u.L-1] = true
				l.first[u.L-1] = [3]int{box.Min[0] + r/rl.N[1], box.Min[1] + r%rl.N[1], box.Min[2] + int(u.X0)}
			}
		}
	}
	return l
}

// First returns the first voxel in raster order of component id of a
// LabelBox lookup.
func (l *Lookup) First(id int32) [3]int { return l.first[id-1] }

// Runs calls f for every run of the labelled box: global row (z, y), x
// range [x0, x1) and component id.
func (l *Lookup) Runs(f func(z, y, x0, x1 int, id int32)) {
	rl, c := l.rl, l.core
	for r := 0; r < rl.N[0]*rl.N[1]; r++ {
		for _, u := range rl.Runs[rl.Start[r]:rl.Start[r+1]] {
			f(c.Min[0]+r/rl.N[1], c.Min[1]+r%rl.N[1], c.Min[2]+int(u.X0), c.Min[2]+int(u.X1), u.L)
		}
	}
}

// At returns the local id (1..len(Sizes)) of voxel (z, y, x) in global
// coordinates, 0 when it is outside the core or not in the set.
func (l *Lookup) At(z, y, x int) int32 {
	c := l.core
	if !c.Contains(z, y, x) {
		return 0
	}
	row := l.rl.row(z-c.Min[0], y-c.Min[1])
	xx := int32(x - c.Min[2])
	// First run ending after xx.
	i, j := 0, len(row)
	for i < j {
		h := (i + j) / 2
		if row[h].X1 <= xx {
			i = h + 1
		} else {
			j = h
		}
	}
	if i < len(row) && row[i].X0 <= xx {
		return row[i].L
	}
	return 0
}

// Release returns the lookup's buffers to the pool.
func (l *Lookup) Release() {
	if l != nil && l.rl != nil {
		l.rl.release()
		l.rl = nil
	}
}

func label(lab *volume.Labels, s *phase.Set, core, whole volume.Box, opt Options) (*Tile, *runLabels) {
	opt, err := opt.normalized()
	if err != nil {
		panic(err)
	}
	if core.Empty() || !lab.Box.ContainsBox(core) {
		panic(fmt.Sprintf("cluster: core %v is empty or not inside the label volume %v", core, lab.Box))
	}
	if !whole.ContainsBox(core) {
		panic(fmt.Sprintf("cluster: core %v is not inside the whole box %v", core, whole))
	}
	rl, sizes := labelRuns(lab, s, core, opt.Connectivity)
	n := core.Size()
	t := &Tile{
		Core: core, Whole: whole,
		Connectivity: opt.Connectivity, FlowAxis: opt.FlowAxis,
		Sizes:  sizes,
		Inlet:  make([]bool, len(sizes)),
		Outlet: make([]bool, len(sizes)),
	}
	buf := make([]int32, max(n[1]*n[2], n[0]*n[2], n[0]*n[1]))
	for a := 0; a < 3; a++ {
		for side := 0; side < 2; side++ {
			at := 0
			if side == 1 {
				at = n[a] - 1
			}
			buf = rl.facePlane(a, at, buf)
			u, v := planeAxes(a)
			t.Faces[2*a+side] = encodePlane(buf, n[u], n[v])
			f := opt.FlowAxis
			if a == f && side == 0 && core.Min[f] == whole.Min[f] {
				mark(t.Inlet, buf)
			}
			if a == f && side == 1 && core.Max[f] == whole.Max[f] {
				mark(t.Outlet, buf)
			}
		}
	}
	return t, rl
}

func mark(flags []bool, ids []int32) {
	for _, id := range ids {
		if id > 0 {
			flags[id-1] = true
		}
	}
}

// run is a maximal stretch [X0, X1) of set voxels along x in one row of
// the core, with its label: provisional during the scan, final after it.
type run struct {
	X0, X1 int32
	L      int32
}

// runLabels is the labelling of a core as runs. Runs are stored in raster
// order; the runs of row r = z*ny + y (core-local z, y) are
// Runs[Start[r]:Start[r+1]].
type runLabels struct {
	N     [3]int
	Runs  []run
	Start []int32
	// parent and final are scratch kept for release.
	parent, final []int32
}

// scratch holds the buffers of one labelling, reused through scratchPool
// so that a worker labelling tile after tile does not regrow them.
type scratch struct {
	runs          []run
	start, parent []int32
	final         []int32
}

var scratchPool = sync.Pool{New: func() any { return new(scratch) }}

// release returns the buffers of rl to the pool; rl must not be used after.
func (rl *runLabels) release() {
	scratchPool.Put(&scratch{runs: rl.Runs[:0], start: rl.Start[:0], parent: rl.parent[:0], final: rl.final[:0]})
}

// row returns the runs of core-local row (z, y).
func (rl *runLabels) row(z, y int) []run {
	r := z*rl.N[1] + y
	return rl.Runs[rl.Start[r]:rl.Start[r+1]]
}

// labelRuns labels the set voxels of core by the two-pass algorithm on runs
// along x (the run-based form of Rosenfeld & Pfaltz's raster scan): each run
// is joined to the runs it touches in the already scanned neighbour rows,
// found by a merge walk of the sorted run lists: rows (z, y−1), (z−1, y−1),
// (z−1, y), (z−1, y+1) with x ranges touching or overlapping diagonally for
// 26-connectivity; rows (z, y−1), (z−1, y) with overlapping x ranges for 6.
// Runs end with final labels 1..len(sizes) numbered in raster order of first
// voxel, and sizes holds the voxel counts.
//
// Memory: 12 bytes per run (at most ⌈nx/2⌉ per row) plus 4 bytes per row,
// and the provisional label forest (4 bytes per run without a backward
// neighbour).
func labelRuns(lab *volume.Labels, s *phase.Set, core volume.Box, conn int) (*runLabels, []int64) {
	n := core.Size()
	nz, ny, nx := n[0], n[1], n[2]
	sc := scratchPool.Get().(*scratch)
	rl := &runLabels{N: n, Start: grow(sc.start, nz*ny+1)}
	// Provisional label forest; parent[0] is unused. Roots are the smallest
	// label of their class; a class's smallest label is that of its first
	// run in raster order (a run with a backward neighbour in its class
	// takes an existing label), so classes are numbered by first voxel.
	parent := append(sc.parent[:0], 0)
	find := func(l int32) int32 {
		for parent[l] != l {
			parent[l] = parent[parent[l]] // path halving
			l = parent[l]
		}
		return l
	}
	// reach widens a run's x range for the overlap test: by one voxel on
	// each side for 26-connectivity (diagonal contact), none for 6.
	reach := int32(1)
	if conn == 6 {
		reach = 0
	}
	var nbRows [4][]run
	runs := sc.runs[:0]
	for z := 0; z < nz; z++ {
		for y := 0; y < ny; y++ {
			r := z*ny + y
			first := len(runs)
			rowPix := lab.Pix[lab.Index(core.Min[0]+z, core.Min[1]+y, core.Min[2]):][:nx]
			// Runs of the row.
			for x := 0; x < nx; {
				if !s[rowPix[x]] {
					x++
					continue
				}
				x0 := x
				for x++; x < nx && s[rowPix[x]]; x++ {
				}
				runs = append(runs, run{X0: int32(x0), X1: int32(x)})
			}
			rl.Start[r+1] = int32(len(runs))
			if len(runs) == first {
				continue
			}
			// Backward neighbour rows.
			k := 0
			row := func(zz, yy int) {
				if zz < 0 || yy < 0 || yy >= ny {
					return
				}
				rr := zz*ny + yy
				if rl.Start[rr] < rl.Start[rr+1] {
					nbRows[k] = runs[rl.Start[rr]:rl.Start[rr+1]]
					k++
				}
			}
			row(z, y-1)
			if conn == 6 {
				row(z-1, y)
			} else {
				row(z-1, y-1)
				row(z-1, y)
				row(z-1, y+1)
			}
			var pos [4]int
			cur := runs[first:]
			for i := range cur {
				a, b := cur[i].X0-reach, cur[i].X1+reach
				var l int32
				for q := 0; q < k; q++ {
					nb := nbRows[q]
					j := pos[q]
					for j < len(nb) && nb[j].X1 <= a {
						j++
					}
					pos[q] = j
					for ; j < len(nb) && nb[j].X0 < b; j++ {
						m := find(nb[j].L)
						if l == 0 {
							l = m
						} else if m != l {
							if m < l {
								l, m = m, l
							}
							parent[m] = l
						}
					}
				}
				if l == 0 {
					l = int32(len(parent))
					if len(parent) == 1<<31-1 {
						panic("cluster: more than 2³¹−1 provisional labels in one tile")
					}
					parent = append(parent, l)
				}
				cur[i].L = l
			}
		}
	}
	// Number classes by first appearance: label l's root is <= l.
	final := grow(sc.final, len(parent))
	next := int32(0)
	for l := 1; l < len(parent); l++ {
		r := find(int32(l))
		if r == int32(l) {
			next++
			final[l] = next
		} else {
			final[l] = final[r]
		}
	}
	sizes := make([]int64, next)
	for i := range runs {
		f := final[runs[i].L]
		runs[i].L = f
		sizes[f-1] += int64(runs[i].X1 - runs[i].X0)
	}
	rl.Runs, rl.parent, rl.final = runs, parent, final
	return rl, sizes
}

// components labels the set voxels of core (see labelRuns) and returns the
// labels in C order over core, 0 outside the set, and the sizes.
func components(lab *volume.Labels, s *phase.Set, core volume.Box, conn int) ([]int32, []int64) {
	rl, sizes := labelRuns(lab, s, core, conn)
	n := rl.N
	ids := make([]int32, core.Voxels())
	for r := 0; r < n[0]*n[1]; r++ {
		row := ids[r*n[2]:][:n[2]]
		for _, u := range rl.Runs[rl.Start[r]:rl.Start[r+1]] {
			for x := u.X0; x < u.X1; x++ {
				row[x] = u.L
			}
		}
	}
	rl.release()
	return ids, sizes
}

// grow returns buf resized to n zeroed elements, reallocating only when
// its capacity is short.
func grow(buf []int32, n int) []int32 {
	if cap(buf) < n {
		return make([]int32, n)
	}
	buf = buf[:n]
	clear(buf)
	return buf
}

// facePlane writes into buf the labels of the plane at core-local
// coordinate at along axis a, in the order of Plane, expanding the runs.
func (rl *runLabels) facePlane(a, at int, buf []int32) []int32 {
	n := rl.N
	u, v := planeAxes(a)
	buf = buf[:n[u]*n[v]]
	clear(buf)
	switch a {
	case 0: // (y, x): rows of plane z = at
		for y := 0; y < n[1]; y++ {
			fill(buf[y*n[2]:][:n[2]], rl.row(at, y))
		}
	case 1: // (z, x): rows y = at
		for z := 0; z < n[0]; z++ {
			fill(buf[z*n[2]:][:n[2]], rl.row(z, at))
		}
	case 2: // (z, y): voxel x = at of every row
		x := int32(at)
		for z := 0; z < n[0]; z++ {
			for y := 0; y < n[1]; y++ {
				rr := rl.row(z, y)
				if len(rr) == 0 {
					continue
				}
				// The first run for x = 0, the last for x = nx−1.
				u := rr[0]
				if x > 0 {
					u = rr[len(rr)-1]
				}
				if u.X0 <= x && x < u.X1 {
					buf[z*n[1]+y] = u.L
				}
			}
		}
	}
	return buf
}

// plane is facePlane for any core-local coordinate at, also inside the
// core (facePlane reads x planes only at x = 0 and x = nx−1).
func (rl *runLabels) plane(a, at int, buf []int32) []int32 {
	if a != 2 || at == 0 || at == rl.N[2]-1 {
		return rl.facePlane(a, at, buf)
	}
	n := rl.N
	buf = buf[:n[0]*n[1]]
	clear(buf)
	x := int32(at)
	for z := 0; z < n[0]; z++ {
		for y := 0; y < n[1]; y++ {
			rr := rl.row(z, y)
			// First run ending after x.
			i, j := 0, len(rr)
			for i < j {
				h := (i + j) / 2
				if rr[h].X1 <= x {
					i = h + 1
				} else {
					j = h
				}
			}
			if i < len(rr) && rr[i].X0 <= x {
				buf[z*n[1]+y] = rr[i].L
			}
		}
	}
	return buf
}

func fill(dst []int32, runs []run) {
	for _, u := range runs {
		for x := u.X0; x < u.X1; x++ {
			dst[x] = u.L
		}
	}
}
