package cluster

// The voxel-by-voxel two-pass labelling that components replaced, kept as
// the reference the run-based one must equal label for label.

import (
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// componentsRaster labels the set voxels of core by the two-pass algorithm and
// returns the labels (C order over core, 0 outside the set, components
// 1..len(sizes) numbered in raster order of first voxel) and their sizes.
func componentsRaster(lab *volume.Labels, s *phase.Set, core volume.Box, conn int) ([]int32, []int64) {
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

// rasterFaces encodes the six face planes of a C-order label array of
// shape n as Label did before labelling by runs.
func rasterFaces(ids []int32, n [3]int) [6]Plane {
	var f [6]Plane
	stride := [3]int{n[1] * n[2], n[2], 1}
	for a := 0; a < 3; a++ {
		u, v := planeAxes(a)
		for side := 0; side < 2; side++ {
			at := 0
			if side == 1 {
				at = n[a] - 1
			}
			var buf []int32
			for i := 0; i < n[u]; i++ {
				for j := 0; j < n[v]; j++ {
					buf = append(buf, ids[at*stride[a]+i*stride[u]+j*stride[v]])
				}
			}
			f[2*a+side] = encodePlane(buf, n[u], n[v])
		}
	}
	return f
}
