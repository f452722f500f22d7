// Package cluster finds the connected clusters (ganglia) of a phase, tile by
// tile, and merges the tiles' partial results into the whole-volume result.
//
// Labelling within a tile is the classical two-pass connected-component
// algorithm (Rosenfeld & Pfaltz 1966, J. ACM 13:471): a raster scan gives
// each set voxel the provisional label of an already visited neighbour and
// records label equivalences in a union-find forest; a second pass replaces
// every provisional label by its class, numbered in raster order of first
// appearance. Connectivity is 26 (faces, edges and corners) or 6 (faces).
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
// Memory: one int32 per core voxel for the labels plus the provisional
// label forest, freed on return.
func Label(lab *volume.Labels, s *phase.Set, core, whole volume.Box, opt Options) *Tile {
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
	ids, sizes := components(lab, s, core, opt.Connectivity)
	n := core.Size()
	t := &Tile{
		Core: core, Whole: whole,
		Connectivity: opt.Connectivity, FlowAxis: opt.FlowAxis,
		Sizes:  sizes,
		Inlet:  make([]bool, len(sizes)),
		Outlet: make([]bool, len(sizes)),
	}
	var buf []int32
	for a := 0; a < 3; a++ {
		for side := 0; side < 2; side++ {
			at := 0
			if side == 1 {
				at = n[a] - 1
			}
			buf = facePlane(ids, n, a, at, buf)
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
	return t
}

func mark(flags []bool, ids []int32) {
	for _, id := range ids {
		if id > 0 {
			flags[id-1] = true
		}
	}
}

// facePlane copies the plane at local coordinate at along axis a of the
// labels ids (shape n, C order) into buf, in the order of Plane.
func facePlane(ids []int32, n [3]int, a, at int, buf []int32) []int32 {
	u, v := planeAxes(a)
	buf = buf[:0]
	stride := [3]int{n[1] * n[2], n[2], 1}
	for i := 0; i < n[u]; i++ {
		for j := 0; j < n[v]; j++ {
			buf = append(buf, ids[at*stride[a]+i*stride[u]+j*stride[v]])
		}
	}
	return buf
}

// components labels the set voxels of core by the two-pass algorithm and
// returns the labels (C order over core, 0 outside the set, components
// 1..len(sizes) numbered in raster order of first voxel) and their sizes.
func components(lab *volume.Labels, s *phase.Set, core volume.Box, conn int) ([]int32, []int64) {
	n := core.Size()
	nz, ny, nx := n[0], n[1], n[2]
	ids := make([]int32, core.Voxels())
	// Provisional label forest; parent[0] is unused. Roots are the smallest
	// label of their class, so classes are numbered by first appearance.
	parent := []int32{0}
	find := func(l int32) int32 {
		for parent[l] != l {
			parent[l] = parent[parent[l]] // path halving
			l = parent[l]
		}
		return l
	}
	union := func(a, b int32) int32 {
		a, b = find(a), find(b)
		if a == b {
			return a
		}
		if b < a {
			a, b = b, a
		}
		parent[b] = a
		return a
	}
	type nb struct {
		off   int  // index offset of the neighbour
		needs byte // bits: 1 x−1, 2 x+1, 4 y−1, 8 y+1, 16 z−1 inside the core
	}
	var nbs []nb
	for _, o := range offsets(conn) {
		var need byte
		if o[2] < 0 {
			need |= 1
		}
		if o[2] > 0 {
			need |= 2
		}
		if o[1] < 0 {
			need |= 4
		}
		if o[1] > 0 {
			need |= 8
		}
		if o[0] < 0 {
			need |= 16
		}
		nbs = append(nbs, nb{off: (o[0]*ny+o[1])*nx + o[2], needs: need})
	}
	for z := 0; z < nz; z++ {
		for y := 0; y < ny; y++ {
			row := lab.Pix[lab.Index(core.Min[0]+z, core.Min[1]+y, core.Min[2]):][:nx]
			base := (z*ny + y) * nx
			var have byte
			if y > 0 {
				have |= 4
			}
			if y < ny-1 {
				have |= 8
			}
			if z > 0 {
				have |= 16
			}
			for x, p := range row {
				if !s[p] {
					continue
				}
				h := have
				if x > 0 {
					h |= 1
				}
				if x < nx-1 {
					h |= 2
				}
				i := base + x
				var l int32
				for _, q := range nbs {
					if q.needs&h != q.needs {
						continue
					}
					m := ids[i+q.off]
					if m == 0 {
						continue
					}
					if l == 0 {
						l = m
					} else if m != l {
						l = union(l, m)
					}
				}
				if l == 0 {
					l = int32(len(parent))
					if len(parent) == 1<<31-1 {
						panic("cluster: more than 2³¹−1 provisional labels in one tile")
					}
					parent = append(parent, l)
				}
				ids[i] = l
			}
		}
	}
	// Number classes by first appearance: label l's root is <= l.
	final := make([]int32, len(parent))
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
	for i, l := range ids {
		if l != 0 {
			f := final[l]
			ids[i] = f
			sizes[f-1]++
		}
	}
	return ids, sizes
}
