package filter

// Vector instructions. Built with GOEXPERIMENT=simd on amd64 (see
// vector_amd64.go) and run on a CPU with AVX2, two loops use 256-bit lanes
// of simd/archsimd; otherwise, and in a plain build, the scalar loops run.
//
//   - The Gaussian's row sums, on four float64 lanes (eight where the CPU
//     has AVX-512, for whole blocks of 16 voxels). Both paths give the
//     same bits: every lane performs the same float64 multiplies and adds,
//     in the same order, as the scalar loop (no fused multiply–add on
//     either side; GOAMD64=v1, the default, never fuses, and the vector
//     code uses separate Mul and Add). TestGaussianVectorIdentical.
//   - The exact 3×3×3 median of uint16 volumes (Median3Integer,
//     Median3Rows), on sixteen uint16 lanes: a sorting network per column
//     of 9 and a pruned merge network selecting the 14th of 27, both
//     generated and checked by the 0–1 principle in mediannet_test.go.
//     Integer min and max are exact: TestMedianVectorIdentical.

// VectorPath names the code the Gaussian and the uint16 median use in this
// process: "AVX-512 …", "AVX2 (simd/archsimd)", or "scalar" with the
// reason.
func VectorPath() string {
	switch {
	case !vectorBuilt:
		return "scalar (built without GOEXPERIMENT=simd)"
	case !vectorCPU:
		return "scalar (CPU without AVX2)"
	case !useVector:
		return "scalar (vector path switched off)"
	case use512:
		return "AVX-512 (simd/archsimd; the median on AVX2 lanes)"
	}
	return "AVX2 (simd/archsimd)"
}

// UseVector switches the vector path on or off (it stays off where it is
// not built or the CPU lacks AVX2) and returns the previous setting. It is
// for benchmarks and checks that compare the two paths in one process; it
// must not be called while a filter runs.
func UseVector(on bool) bool {
	was := useVector
	useVector = on && vectorBuilt && vectorCPU
	return was
}

// useVector: the Gaussian takes the vector path.
var useVector = vectorBuilt && vectorCPU

// symmetricRowTail finishes dst[from:] of symmetricRow in the scalar
// order: w[0]·c, then + w[j]·(a₋ⱼ + a₊ⱼ) for j = 1..r, rounded to float32.
func symmetricRowTail[S, D real](dst []D, w []float64, base []S, at []int, from int) {
	r := len(w) - 1
	for i := from; i < len(dst); i++ {
		s := w[0] * float64(base[at[r]+i])
		for j := 1; j <= r; j++ {
			s += w[j] * (float64(base[at[r-j]+i]) + float64(base[at[r+j]+i]))
		}
		dst[i] = D(float32(s))
	}
}
