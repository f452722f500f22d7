package morph

import (
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Cells returns the histogram of 2×2×2 cell configurations of the indicator
// {s[lab value]} over the cells whose origin (lowest corner voxel, global
// coordinates) lies in origins. Configuration index c = Σ x_b 2^b with
// b = dx + 2dy + 4dz (dz, dy, dx ∈ {0, 1}). Voxels outside lab.Box read as
// background (0).
//
// One pass over the voxels of origins grown by one on the high side. Two
// planes of 4-bit partial indices are kept, each plane
//
//	q[y][x] = i(y,x) | i(y,x+1)<<1 | i(y+1,x)<<2 | i(y+1,x+1)<<3
//
// (i the indicator, (ny)×(nx) entries for the origin box), so a cell index is
// q_z[y][x] | q_{z+1}[y][x]<<4 and each plane is built once and used twice.
func Cells(lab *volume.Labels, s *phase.Set, origins volume.Box) [256]int64 {
	var h [256]int64
	if origins.Empty() {
		return h
	}
	var ind [256]uint8
	for v, ok := range s {
		if ok {
			ind[v] = 1
		}
	}
	n := origins.Size()
	ny, nx := n[1], n[2]
	row := make([]uint8, nx+1)     // indicator of one voxel row, x in [x0, x0+nx]
	prevRow := make([]uint8, nx+1) // the row below it
	lo := make([]uint8, ny*nx)     // q plane at z
	hi := make([]uint8, ny*nx)     // q plane at z+1

	// Histogram in uint32 partial counts per plane (flushed every plane)
	// split over two tables by x parity to shorten store-to-load chains.
	var h0, h1 [256]uint32

	fillRow := func(dst []uint8, z, y int) {
		clear(dst)
		b := lab.Box
		if z < b.Min[0] || z >= b.Max[0] || y < b.Min[1] || y >= b.Max[1] {
			return
		}
		x0 := origins.Min[2]
		xa, xb := max(x0, b.Min[2]), min(x0+nx+1, b.Max[2])
		if xa >= xb {
			return
		}
		src := lab.Pix[lab.Index(z, y, xa):][: xb-xa : xb-xa]
		d := dst[xa-x0:][:len(src)]
		for i, v := range src {
			d[i] = ind[v]
		}
	}
	buildPlane := func(q []uint8, z int) {
		y0 := origins.Min[1]
		fillRow(prevRow, z, y0)
		for j := 0; j < ny; j++ {
			fillRow(row, z, y0+j+1)
			out := q[j*nx : (j+1)*nx]
			a, b := prevRow[:nx+1], row[:nx+1]
			for x := range out {
				out[x] = a[x] | a[x+1]<<1 | b[x]<<2 | b[x+1]<<3
			}
			prevRow, row = row, prevRow
		}
	}

	buildPlane(lo, origins.Min[0])
	for z := origins.Min[0]; z < origins.Max[0]; z++ {
		buildPlane(hi, z+1)
		m := len(lo) &^ 1
		for i := 0; i < m; i += 2 {
			h0[lo[i]|hi[i]<<4]++
			h1[lo[i+1]|hi[i+1]<<4]++
		}
		if m < len(lo) {
			h0[lo[m]|hi[m]<<4]++
		}
		for c := range h {
			h[c] += int64(h0[c]) + int64(h1[c])
		}
		h0, h1 = [256]uint32{}, [256]uint32{}
		lo, hi = hi, lo
	}
	return h
}

// TileOrigins returns the origins a tile with the given core owns within
// whole, for the padded histogram (Euler characteristic, voxel volume) and
// the interior histogram (surface area, mean curvature); see the package
// doc. Over the tiles of a tiling of whole the boxes partition
// [whole.Min−1, whole.Max) and [whole.Min, whole.Max−1) respectively.
func TileOrigins(core, whole volume.Box) (padded, interior volume.Box) {
	padded = core.Intersect(whole)
	interior = padded
	for a := 0; a < 3; a++ {
		if padded.Min[a] == whole.Min[a] {
			padded.Min[a]--
		}
		interior.Max[a] = min(interior.Max[a], whole.Max[a]-1)
	}
	if core.Intersect(whole).Empty() {
		return volume.Box{}, volume.Box{}
	}
	if interior.Max[0] < interior.Min[0] || interior.Max[1] < interior.Min[1] || interior.Max[2] < interior.Min[2] {
		interior = volume.Box{}
	}
	return padded, interior
}
