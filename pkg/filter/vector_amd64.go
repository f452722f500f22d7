//go:build goexperiment.simd && amd64

package filter

import "simd/archsimd"

const vectorBuilt = true

// vectorCPU: the CPU runs the AVX2 instructions of the vector path.
var vectorCPU = archsimd.X86.AVX2()

// symmetricRowVector computes what symmetricRow computes, four voxels at a
// time: per lane w[0]·c, then + w[j]·(a₋ⱼ + a₊ⱼ) for j = 1..r (float64,
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

// rowF32F64: float32 source rows, float64 destination holding
// float32-rounded values (the z pass).
func rowF32F64(dst []float64, w []float64, base []float32, at []int) {
	r := len(w) - 1
	n := len(dst)
	w0 := archsimd.BroadcastFloat64x4(w[0])
	c := at[r]
	i := 0
	for ; i+4 <= n; i += 4 {
		s := w0.Mul(archsimd.LoadFloat32x4Slice(base[c+i:]).ConvertToFloat64())
		for j := 1; j <= r; j++ {
			a := archsimd.LoadFloat32x4Slice(base[at[r-j]+i:]).ConvertToFloat64()
			b := archsimd.LoadFloat32x4Slice(base[at[r+j]+i:]).ConvertToFloat64()
			s = s.Add(archsimd.BroadcastFloat64x4(w[j]).Mul(a.Add(b)))
		}
		s.ConvertToFloat32().ConvertToFloat64().StoreSlice(dst[i:])
	}
	symmetricRowTail(dst, w, base, at, i)
}

// rowF64F64: float64 rows of float32 values in and out (the y pass).
func rowF64F64(dst []float64, w []float64, base []float64, at []int) {
	r := len(w) - 1
	n := len(dst)
	w0 := archsimd.BroadcastFloat64x4(w[0])
	c := at[r]
	i := 0
	for ; i+4 <= n; i += 4 {
		s := w0.Mul(archsimd.LoadFloat64x4Slice(base[c+i:]))
		for j := 1; j <= r; j++ {
			a := archsimd.LoadFloat64x4Slice(base[at[r-j]+i:])
			b := archsimd.LoadFloat64x4Slice(base[at[r+j]+i:])
			s = s.Add(archsimd.BroadcastFloat64x4(w[j]).Mul(a.Add(b)))
		}
		s.ConvertToFloat32().ConvertToFloat64().StoreSlice(dst[i:])
	}
	symmetricRowTail(dst, w, base, at, i)
}

// rowF64F32: float64 rows in, float32 out (the x pass into the output).
func rowF64F32(dst []float32, w []float64, base []float64, at []int) {
	r := len(w) - 1
	n := len(dst)
	w0 := archsimd.BroadcastFloat64x4(w[0])
	c := at[r]
	i := 0
	for ; i+4 <= n; i += 4 {
		s := w0.Mul(archsimd.LoadFloat64x4Slice(base[c+i:]))
		for j := 1; j <= r; j++ {
			a := archsimd.LoadFloat64x4Slice(base[at[r-j]+i:])
			b := archsimd.LoadFloat64x4Slice(base[at[r+j]+i:])
			s = s.Add(archsimd.BroadcastFloat64x4(w[j]).Mul(a.Add(b)))
		}
		s.ConvertToFloat32().StoreSlice(dst[i:])
	}
	symmetricRowTail(dst, w, base, at, i)
}
