//go:build goexperiment.simd && amd64

package filter

import (
	"simd/archsimd"

	"sluice/pkg/volume"
)

const vectorBuilt = true

// vectorCPU: the CPU runs the AVX2 instructions of the vector path.
var vectorCPU = archsimd.X86.AVX2()

// has512: the CPU runs AVX-512; use512: the Gaussian's row loops then take
// 8-lane vectors for whole 16-voxel blocks.
var (
	has512 = archsimd.X86.AVX512()
	use512 = has512
)

// symmetricRowVector computes what symmetricRow computes, on four float64
// lanes: per lane w[0]·c, then + w[j]·(a₋ⱼ + a₊ⱼ) for j = 1..r (float64,
// separate multiply and add, so each lane rounds exactly as the scalar
// loop does), rounded to float32. It returns false for the element types
// it does not handle, leaving the row to the scalar code.
func symmetricRowVector[S, D real](dst []D, w []float64, base []S, at []int) bool {
	switch b := any(base).(type) {
	case []float32:
		if d, ok := any(dst).([]float64); ok {
			rowF32F64(d, w, b, at)
			return true
		}
	case []float64:
		switch d := any(dst).(type) {
		case []float64:
			rowF64F64(d, w, b, at)
			return true
		case []float32:
			rowF64F32(d, w, b, at)
			return true
		}
	}
	return false
}

// The three row kernels below sum 16 voxels per step (four vectors, so
// that each tap's weight, row offsets and bounds checks serve four
// vectors), then 4 at a time, then the scalar tail.

// rowF32F64: float32 source rows, float64 destination holding
// float32-rounded values (the z pass).
func rowF32F64(dst []float64, w []float64, base []float32, at []int) {
	r := len(w) - 1
	n := len(dst)
	w0 := archsimd.BroadcastFloat64x4(w[0])
	c := at[r]
	ld := func(s []float32) archsimd.Float64x4 { return archsimd.LoadFloat32x4Slice(s).ConvertToFloat64() }
	i := 0
	if use512 {
		i = rowF32F64512(dst, w, base, at)
	}
	for ; i+16 <= n; i += 16 {
		p := base[c+i:][:16]
		s0, s1, s2, s3 := w0.Mul(ld(p[0:])), w0.Mul(ld(p[4:])), w0.Mul(ld(p[8:])), w0.Mul(ld(p[12:]))
		for j := 1; j <= r; j++ {
			wj := archsimd.BroadcastFloat64x4(w[j])
			pa, pb := base[at[r-j]+i:][:16], base[at[r+j]+i:][:16]
			s0 = s0.Add(wj.Mul(ld(pa[0:]).Add(ld(pb[0:]))))
			s1 = s1.Add(wj.Mul(ld(pa[4:]).Add(ld(pb[4:]))))
			s2 = s2.Add(wj.Mul(ld(pa[8:]).Add(ld(pb[8:]))))
			s3 = s3.Add(wj.Mul(ld(pa[12:]).Add(ld(pb[12:]))))
		}
		d := dst[i:][:16]
		s0.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[0:])
		s1.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[4:])
		s2.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[8:])
		s3.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[12:])
	}
	for ; i+4 <= n; i += 4 {
		s := w0.Mul(ld(base[c+i:]))
		for j := 1; j <= r; j++ {
			s = s.Add(archsimd.BroadcastFloat64x4(w[j]).Mul(ld(base[at[r-j]+i:]).Add(ld(base[at[r+j]+i:]))))
		}
		s.ConvertToFloat32().ConvertToFloat64().StoreSlice(dst[i:])
	}
	// Scalar SSE code follows (the tail, the caller): leave the upper
	// halves of the vector registers clean, or every later SSE instruction
	// of this thread pays a false dependency on them (measured: the scalar
	// Gaussian 13.7 → 49 ns/voxel after a vector call without this).
	archsimd.ClearAVXUpperBits()
	symmetricRowTail(dst, w, base, at, i)
}

// rowF64F64: float64 rows of float32 values in and out (the y pass).
func rowF64F64(dst []float64, w []float64, base []float64, at []int) {
	r := len(w) - 1
	n := len(dst)
	w0 := archsimd.BroadcastFloat64x4(w[0])
	c := at[r]
	ld := archsimd.LoadFloat64x4Slice
	i := 0
	if use512 {
		i = rowF64F64512(dst, w, base, at)
	}
	for ; i+16 <= n; i += 16 {
		p := base[c+i:][:16]
		s0, s1, s2, s3 := w0.Mul(ld(p[0:])), w0.Mul(ld(p[4:])), w0.Mul(ld(p[8:])), w0.Mul(ld(p[12:]))
		for j := 1; j <= r; j++ {
			wj := archsimd.BroadcastFloat64x4(w[j])
			pa, pb := base[at[r-j]+i:][:16], base[at[r+j]+i:][:16]
			s0 = s0.Add(wj.Mul(ld(pa[0:]).Add(ld(pb[0:]))))
			s1 = s1.Add(wj.Mul(ld(pa[4:]).Add(ld(pb[4:]))))
			s2 = s2.Add(wj.Mul(ld(pa[8:]).Add(ld(pb[8:]))))
			s3 = s3.Add(wj.Mul(ld(pa[12:]).Add(ld(pb[12:]))))
		}
		d := dst[i:][:16]
		s0.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[0:])
		s1.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[4:])
		s2.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[8:])
		s3.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[12:])
	}
	for ; i+4 <= n; i += 4 {
		s := w0.Mul(ld(base[c+i:]))
		for j := 1; j <= r; j++ {
			s = s.Add(archsimd.BroadcastFloat64x4(w[j]).Mul(ld(base[at[r-j]+i:]).Add(ld(base[at[r+j]+i:]))))
		}
		s.ConvertToFloat32().ConvertToFloat64().StoreSlice(dst[i:])
	}
	// Scalar SSE code follows (the tail, the caller): leave the upper
	// halves of the vector registers clean, or every later SSE instruction
	// of this thread pays a false dependency on them (measured: the scalar
	// Gaussian 13.7 → 49 ns/voxel after a vector call without this).
	archsimd.ClearAVXUpperBits()
	symmetricRowTail(dst, w, base, at, i)
}

// rowF64F32: float64 rows in, float32 out (the x pass into the output).
func rowF64F32(dst []float32, w []float64, base []float64, at []int) {
	r := len(w) - 1
	n := len(dst)
	w0 := archsimd.BroadcastFloat64x4(w[0])
	c := at[r]
	ld := archsimd.LoadFloat64x4Slice
	i := 0
	if use512 {
		i = rowF64F32512(dst, w, base, at)
	}
	for ; i+16 <= n; i += 16 {
		p := base[c+i:][:16]
		s0, s1, s2, s3 := w0.Mul(ld(p[0:])), w0.Mul(ld(p[4:])), w0.Mul(ld(p[8:])), w0.Mul(ld(p[12:]))
		for j := 1; j <= r; j++ {
			wj := archsimd.BroadcastFloat64x4(w[j])
			pa, pb := base[at[r-j]+i:][:16], base[at[r+j]+i:][:16]
			s0 = s0.Add(wj.Mul(ld(pa[0:]).Add(ld(pb[0:]))))
			s1 = s1.Add(wj.Mul(ld(pa[4:]).Add(ld(pb[4:]))))
			s2 = s2.Add(wj.Mul(ld(pa[8:]).Add(ld(pb[8:]))))
			s3 = s3.Add(wj.Mul(ld(pa[12:]).Add(ld(pb[12:]))))
		}
		d := dst[i:][:16]
		s0.ConvertToFloat32().StoreSlice(d[0:])
		s1.ConvertToFloat32().StoreSlice(d[4:])
		s2.ConvertToFloat32().StoreSlice(d[8:])
		s3.ConvertToFloat32().StoreSlice(d[12:])
	}
	for ; i+4 <= n; i += 4 {
		s := w0.Mul(ld(base[c+i:]))
		for j := 1; j <= r; j++ {
			s = s.Add(archsimd.BroadcastFloat64x4(w[j]).Mul(ld(base[at[r-j]+i:]).Add(ld(base[at[r+j]+i:]))))
		}
		s.ConvertToFloat32().StoreSlice(dst[i:])
	}
	// Scalar SSE code follows (the tail, the caller): leave the upper
	// halves of the vector registers clean, or every later SSE instruction
	// of this thread pays a false dependency on them (measured: the scalar
	// Gaussian 13.7 → 49 ns/voxel after a vector call without this).
	archsimd.ClearAVXUpperBits()
	symmetricRowTail(dst, w, base, at, i)
}

// median3RowsVector is median3Rows for uint16 voxels on 16 lanes: per
// output row, the 9 input rows of its 3×3 (z, y) neighbourhood are copied
// with clamped ends, each column of 9 is sorted by a comparator network
// (sort9Vec), and the median of each x is the 14th smallest of the sorted
// columns x−1, x, x+1 (median27Vec, a pruned merge network). Min and max
// of integers are exact, so the result is the scalar path's bit for bit.
// It returns false, leaving the work to the scalar code, for other voxel
// types.
func median3RowsVector[T Integer](in *volume.Volume[T], core volume.Box, emit func(z, y int, row []T)) bool {
	pix, ok := any(in.Pix).([]uint16)
	if !ok {
		return false
	}
	em, ok := any(emit).(func(z, y int, row []uint16))
	if !ok {
		return false
	}
	ib := in.Box
	s := ib.Size()
	ncx := core.Max[2] - core.Min[2]
	nv := (ncx + 15) / 16 * 16 // outputs rounded up to whole vectors
	L := nv + 16               // columns core.Min[2]−1 … core.Max[2], rounded up, and slack
	// Columns j = 0 … ncx+1 are x = core.Min[2]−1+j clamped to ib;
	// jlo … jhi−1 lie inside ib.
	x0 := core.Min[2] - 1
	jlo := max(ib.Min[2]-x0, 0)
	jhi := min(ib.Max[2]-x0, ncx+2)
	slabs(core.Min[0], core.Max[0], func(z0, z1 int) {
		buf := make([]uint16, 18*L+nv)
		var rows, planes, planes1, planes2 [9][]uint16
		for k := range rows {
			rows[k] = buf[k*L:][:L]
			planes[k] = buf[(9+k)*L:][:L]
			planes1[k] = planes[k][1:]
			planes2[k] = planes[k][2:]
		}
		out := buf[18*L:][:nv]
		var v [9]archsimd.Uint16x16
		for z := z0; z < z1; z++ {
			for y := core.Min[1]; y < core.Max[1]; y++ {
				k := 0
				for dz := -1; dz <= 1; dz++ {
					zz := clamp(z+dz, ib.Min[0], ib.Max[0]) - ib.Min[0]
					for dy := -1; dy <= 1; dy++ {
						yy := clamp(y+dy, ib.Min[1], ib.Max[1]) - ib.Min[1]
						src := pix[(zz*s[1]+yy)*s[2]:][:s[2]]
						r := rows[k]
						copy(r[jlo:jhi], src[x0+jlo-ib.Min[2]:])
						for j := 0; j < jlo; j++ {
							r[j] = src[0]
						}
						for j := jhi; j < ncx+2; j++ {
							r[j] = src[s[2]-1]
						}
						k++
					}
				}
				for j := 0; j < ncx+2; j += 16 {
					for k := range v {
						v[k] = archsimd.LoadUint16x16Slice(rows[k][j:])
					}
					sort9Vec(&v)
					for k := range v {
						v[k].StoreSlice(planes[k][j:])
					}
				}
				for i := 0; i < ncx; i += 16 {
					median27Vec(&planes, &planes1, &planes2, i).StoreSlice(out[i:])
				}
				archsimd.ClearAVXUpperBits() // the caller's scalar code follows (see rowF64F32)
				em(z, y, out[:ncx])
			}
		}
	})
	return true
}

// rowF32F64512 sums the first whole 16-voxel blocks of rowF32F64 on two
// Float64x8 (AVX-512), in the same per-lane order; it returns where it
// stopped.
func rowF32F64512(dst []float64, w []float64, base []float32, at []int) int {
	r := len(w) - 1
	n := len(dst)
	w0 := archsimd.BroadcastFloat64x8(w[0])
	c := at[r]
	i := 0
	for ; i+16 <= n; i += 16 {
		p := base[c+i:][:16]
		s0, s1 := w0.Mul(archsimd.LoadFloat32x8Slice(p[0:]).ConvertToFloat64()), w0.Mul(archsimd.LoadFloat32x8Slice(p[8:]).ConvertToFloat64())
		for j := 1; j <= r; j++ {
			wj := archsimd.BroadcastFloat64x8(w[j])
			pa, pb := base[at[r-j]+i:][:16], base[at[r+j]+i:][:16]
			s0 = s0.Add(wj.Mul(archsimd.LoadFloat32x8Slice(pa[0:]).ConvertToFloat64().Add(archsimd.LoadFloat32x8Slice(pb[0:]).ConvertToFloat64())))
			s1 = s1.Add(wj.Mul(archsimd.LoadFloat32x8Slice(pa[8:]).ConvertToFloat64().Add(archsimd.LoadFloat32x8Slice(pb[8:]).ConvertToFloat64())))
		}
		d := dst[i:][:16]
		s0.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[0:])
		s1.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[8:])
	}
	return i
}

// rowF64F64512 sums the first whole 16-voxel blocks of rowF64F64 on two
// Float64x8 (AVX-512), in the same per-lane order; it returns where it
// stopped.
func rowF64F64512(dst []float64, w []float64, base []float64, at []int) int {
	r := len(w) - 1
	n := len(dst)
	w0 := archsimd.BroadcastFloat64x8(w[0])
	c := at[r]
	i := 0
	for ; i+16 <= n; i += 16 {
		p := base[c+i:][:16]
		s0, s1 := w0.Mul(archsimd.LoadFloat64x8Slice(p[0:])), w0.Mul(archsimd.LoadFloat64x8Slice(p[8:]))
		for j := 1; j <= r; j++ {
			wj := archsimd.BroadcastFloat64x8(w[j])
			pa, pb := base[at[r-j]+i:][:16], base[at[r+j]+i:][:16]
			s0 = s0.Add(wj.Mul(archsimd.LoadFloat64x8Slice(pa[0:]).Add(archsimd.LoadFloat64x8Slice(pb[0:]))))
			s1 = s1.Add(wj.Mul(archsimd.LoadFloat64x8Slice(pa[8:]).Add(archsimd.LoadFloat64x8Slice(pb[8:]))))
		}
		d := dst[i:][:16]
		s0.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[0:])
		s1.ConvertToFloat32().ConvertToFloat64().StoreSlice(d[8:])
	}
	return i
}

// rowF64F32512 sums the first whole 16-voxel blocks of rowF64F32 on two
// Float64x8 (AVX-512), in the same per-lane order; it returns where it
// stopped.
func rowF64F32512(dst []float32, w []float64, base []float64, at []int) int {
	r := len(w) - 1
	n := len(dst)
	w0 := archsimd.BroadcastFloat64x8(w[0])
	c := at[r]
	i := 0
	for ; i+16 <= n; i += 16 {
		p := base[c+i:][:16]
		s0, s1 := w0.Mul(archsimd.LoadFloat64x8Slice(p[0:])), w0.Mul(archsimd.LoadFloat64x8Slice(p[8:]))
		for j := 1; j <= r; j++ {
			wj := archsimd.BroadcastFloat64x8(w[j])
			pa, pb := base[at[r-j]+i:][:16], base[at[r+j]+i:][:16]
			s0 = s0.Add(wj.Mul(archsimd.LoadFloat64x8Slice(pa[0:]).Add(archsimd.LoadFloat64x8Slice(pb[0:]))))
			s1 = s1.Add(wj.Mul(archsimd.LoadFloat64x8Slice(pa[8:]).Add(archsimd.LoadFloat64x8Slice(pb[8:]))))
		}
		d := dst[i:][:16]
		s0.ConvertToFloat32().StoreSlice(d[0:])
		s1.ConvertToFloat32().StoreSlice(d[8:])
	}
	return i
}
