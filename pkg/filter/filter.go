// Package filter holds the denoising filters sluice applies to grey-scale
// reconstructions before segmentation:
//
//   - Median3: the 3×3×3 median (Tukey's running median in 3-D; common
//     practice for speckle and ring residue in micro-CT); Median3Integer and
//     Median3Rows compute it exactly on uint8/uint16 voxels (same networks,
//     no float copy), and Median3Levels tells only how many given grey
//     levels the median exceeds, by threshold decomposition (Fitch, Coyle &
//     Gallagher 1984, IEEE Trans. ASSP 32:1183): a box count per level,
//     no sorting;
//   - Gaussian: a separable Gaussian with the kernel of scipy.ndimage
//     (weights exp(−x²/2σ²) normalised to sum 1, radius int(truncate·σ + 0.5),
//     truncate 4 by default), applied along z, then y, then x;
//   - NLM: non-local means (Buades, Coll & Morel 2005, "A non-local algorithm
//     for image denoising", CVPR, vol. 2, pp. 60–65), with uniform cubic
//     patches, a cubic search window, the noise-corrected distance
//     max(d² − 2σ², 0) and the centre weight set to the largest other weight
//     (Buades, Coll & Morel 2011, "Non-Local Means Denoising", Image Processing
//     On Line 1:208–212). Patch distances are evaluated one search offset at a
//     time over the whole slab, a reordering of the sums also used by Darbon
//     et al. 2008 (ISBI), but with fixed 3-term sums instead of running sums so
//     that every output voxel is computed by the same arithmetic whatever the
//     tiling.
//
// Memory layout and tiles. Every filter reads a float32 volume `in` whose Box
// covers a tile core plus a halo, in global coordinates, and writes a new
// volume over the box `core` only (core ⊆ in.Box). Where a stencil reaches
// past in.Box the nearest voxel of in.Box is used (scipy mode 'nearest': index
// clamping along each axis). A tile cut with a halo of at least Halo() voxels
// (clipped only at the edges of the scan) therefore gives exactly the voxels
// the whole-volume filter gives: the clamping happens only at the scan edges,
// and each output voxel is computed by the same sequence of float operations.
//
// Work is split into z-slabs of the core (median, Gaussian: one per
// goroutine; NLM: slabs of 8 slices handed out in turn), with
// runtime.GOMAXPROCS(0) goroutines. All arithmetic is float32 storage with
// float64 accumulation (as scipy.ndimage does for float32 arrays).
package filter

import (
	"fmt"
	"runtime"
	"sync"

	"sluice/pkg/volume"
)

func check[T volume.Voxel](in *volume.Volume[T], core volume.Box) error {
	if in == nil {
		return fmt.Errorf("filter: nil input volume")
	}
	if err := in.Validate(); err != nil {
		return fmt.Errorf("filter: input: %w", err)
	}
	if core.Empty() || !in.Box.ContainsBox(core) {
		return fmt.Errorf("filter: core %v is empty or not inside input box %v", core, in.Box)
	}
	return nil
}

// slabs runs fn over disjoint z ranges [z0, z1) covering [lo, hi), in
// parallel. The split never changes results: each voxel is computed alone.
func slabs(lo, hi int, fn func(z0, z1 int)) {
	n := hi - lo
	w := min(runtime.GOMAXPROCS(0), n)
	if w <= 1 {
		fn(lo, hi)
		return
	}
	var wg sync.WaitGroup
	for i := 0; i < w; i++ {
		z0, z1 := lo+i*n/w, lo+(i+1)*n/w
		if z0 == z1 {
			continue
		}
		wg.Add(1)
		go func() {
			defer wg.Done()
			fn(z0, z1)
		}()
	}
	wg.Wait()
}

func clamp(v, lo, hi int) int {
	if v < lo {
		return lo
	}
	if v >= hi {
		return hi - 1
	}
	return v
}

// chunks runs fn over consecutive z ranges of at most size slices, handed
// to runtime.GOMAXPROCS(0) goroutines: small ranges keep a filter's
// per-range buffers in cache. Results do not depend on the split.
func chunks(lo, hi, size int, fn func(z0, z1 int)) {
	next := make(chan int, (hi-lo)/size+1)
	for z := lo; z < hi; z += size {
		next <- z
	}
	close(next)
	w := min(runtime.GOMAXPROCS(0), (hi-lo+size-1)/size)
	var wg sync.WaitGroup
	for i := 0; i < w; i++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for z0 := range next {
				fn(z0, min(z0+size, hi))
			}
		}()
	}
	wg.Wait()
}
