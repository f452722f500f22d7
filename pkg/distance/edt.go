// Package distance computes exact Euclidean distance transforms of 3-D
// voxel sets by the separable lower-envelope-of-parabolas method of
// Felzenszwalb & Huttenlocher, "Distance Transforms of Sampled Functions",
// Theory of Computing 8:415–428 (2012).
//
// The squared distance transform of a sampled function f on a grid is
//
//	D(p) = min over q of ( |p − q|² + f(q) ).
//
// With f = 0 on a set and +Inf elsewhere, D is the squared Euclidean distance
// from each voxel centre to the nearest voxel centre of the set. The 3-D
// transform is the 1-D transform applied along x, then y, then z (the
// squared Euclidean norm separates over the axes). Along x the input is
// binary, so the first pass is a forward and backward scan for the nearest
// site; the y and z passes build the lower envelope of the parabolas
// (q − p)² + f(q) in one sweep and read it off in a second.
//
// All distances are in voxel units (voxels are cubic). Squared distances of
// voxel centres are integers, and every value here is an integer held
// exactly in a float64 (the envelope breakpoints are ratios of integers whose
// comparisons with grid positions are exact at any practical grid size), so
// the results equal the exact squared distances, not approximations.
//
// Work is split over runtime.GOMAXPROCS(0) goroutines, each taking blocks of
// neighbouring lines. Lines along y and z are strided in memory; a block of
// 16 lines that are neighbours in x is gathered into contiguous buffers,
// transformed, and scattered back, so each memory row read serves 16 lines.
package distance

import (
	"fmt"
	"math"
	"runtime"
	"sync"
	"sync/atomic"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// SquaredToSet returns, for every voxel of v.Box, the squared Euclidean
// distance (voxel units) from its centre to the centre of the nearest voxel
// of v whose label is in s. Voxels in s get 0. Only v is searched: voxels
// outside v.Box are treated as not in s. If no voxel of v is in s, every
// value is +Inf.
//
// The result has the layout of v.Pix: the value of global voxel (z, y, x) is
// at index v.Index(z, y, x).
//
// For the distance of pore voxels to the solid, pass the solid set; for the
// distance of solid voxels to the pore space, pass the pore set.
func SquaredToSet(v *volume.Labels, s *phase.Set) []float64 {
	return SquaredToSetInto(nil, v, s)
}

// SquaredToSetInto is SquaredToSet writing into dst when it has room (it is
// resliced to len(v.Pix)), else into a new slice; it returns the result.
// Reusing dst saves the allocation and first-touch page faults of a new
// result, which cost as much as a transform pass on large volumes.
func SquaredToSetInto(dst []float64, v *volume.Labels, s *phase.Set) []float64 {
	n := v.Box.Size()
	if len(v.Pix) != v.Box.Voxels() {
		panic(fmt.Sprintf("distance: %d voxels for box %v of %d", len(v.Pix), v.Box, v.Box.Voxels()))
	}
	f := dst[:0]
	if cap(f) < len(v.Pix) {
		f = make([]float64, len(v.Pix))
	}
	f = f[:len(v.Pix)]
	if len(f) == 0 {
		return f
	}
	rowsBinary(f, n, func(r int, row []float64) {
		inf := math.Inf(1)
		for x, p := range v.Pix[r*n[2] : (r+1)*n[2]] {
			if s[p] {
				row[x] = 0
			} else {
				row[x] = inf
			}
		}
	})
	along(f, n, 1)
	along(f, n, 0)
	return f
}

// SquaredToMask is SquaredToSet for a boolean mask of the given shape
// (nz, ny, nx) in C order: the squared distance from each voxel to the
// nearest voxel where mask is true.
func SquaredToMask(mask []bool, shape [3]int) []float64 {
	if len(mask) != shape[0]*shape[1]*shape[2] {
		panic(fmt.Sprintf("distance: mask of %d voxels for shape %v", len(mask), shape))
	}
	f := make([]float64, len(mask))
	if len(f) == 0 {
		return f
	}
	rowsBinary(f, shape, func(r int, row []float64) {
		inf := math.Inf(1)
		for x, m := range mask[r*shape[2] : (r+1)*shape[2]] {
			if m {
				row[x] = 0
			} else {
				row[x] = inf
			}
		}
	})
	along(f, shape, 1)
	along(f, shape, 0)
	return f
}

// Squared replaces f, a sampled function on a grid of the given shape
// (nz, ny, nx) in C order, by its squared distance transform
// D(p) = min_q (|p − q|² + f(q)). Samples equal to +Inf are not sites.
// Values of f must be non-negative or +Inf.
func Squared(f []float64, shape [3]int) {
	if len(f) != shape[0]*shape[1]*shape[2] {
		panic(fmt.Sprintf("distance: %d samples for shape %v", len(f), shape))
	}
	if len(f) == 0 {
		return
	}
	along(f, shape, 2)
	along(f, shape, 1)
	along(f, shape, 0)
}

// block is the number of neighbouring lines transformed together in the
// strided passes.
const block = 16

// workers returns the number of goroutines to use for units pieces of work.
func workers(units int) int {
	w := runtime.GOMAXPROCS(0)
	if w > units {
		w = units
	}
	if w < 1 {
		w = 1
	}
	return w
}

// parallel runs do(u) for u in [0, units) on a pool of goroutines; each
// goroutine gets its own scratch from mk.
func parallel[S any](units int, mk func() S, do func(u int, scratch S)) {
	w := workers(units)
	if w == 1 {
		s := mk()
		for u := 0; u < units; u++ {
			do(u, s)
		}
		return
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for g := 0; g < w; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s := mk()
			for {
				u := int(next.Add(1) - 1)
				if u >= units {
					return
				}
				do(u, s)
			}
		}()
	}
	wg.Wait()
}

// rowsBinary fills each row r of f (along x) by fill(r, row) with 0 on
// sites and +Inf elsewhere, then replaces it by the squared 1-D distance
// along x to the nearest site of the row (+Inf for rows without a site).
// Rows are processed in parallel chunks.
func rowsBinary(f []float64, n [3]int, fill func(r int, row []float64)) {
	nx := n[2]
	rows := n[0] * n[1]
	const chunk = 64
	units := (rows + chunk - 1) / chunk
	parallel(units, func() struct{} { return struct{}{} }, func(u int, _ struct{}) {
		for r := u * chunk; r < min(rows, (u+1)*chunk); r++ {
			row := f[r*nx : (r+1)*nx]
			fill(r, row)
			// Forward: distance to the nearest site at or left of x.
			last := -1
			for x, v := range row {
				if v == 0 {
					last = x
				} else if last >= 0 {
					d := float64(x - last)
					row[x] = d * d
				}
			}
			if last < 0 {
				continue // no site: the row stays +Inf
			}
			// Backward: nearest site at or right of x.
			last = -1
			for x := nx - 1; x >= 0; x-- {
				if row[x] == 0 {
					last = x
				} else if last >= 0 {
					if d := float64(last - x); d*d < row[x] {
						row[x] = d * d
					}
				}
			}
		}
	})
}

// scratch is one goroutine's working memory for the strided passes.
type scratch struct {
	g   []float64 // block lines, line b at g[b*n : (b+1)*n]
	out []float64 // one transformed line
	v   []int     // envelope parabola vertices
	z   []float64 // envelope breakpoints, len n+1
}

// along applies the 1-D squared distance transform to every line of f
// along axis (0 = z, 1 = y, 2 = x).
func along(f []float64, n [3]int, axis int) {
	length := n[axis]
	var stride, outer, outerStride, lines int
	switch axis {
	case 0:
		stride, outer, outerStride, lines = n[1]*n[2], 1, 0, n[1]*n[2]
	case 1:
		stride, outer, outerStride, lines = n[2], n[0], n[1]*n[2], n[2]
	case 2:
		stride, outer, outerStride, lines = 1, n[0]*n[1], n[2], 1
	}
	if length <= 1 {
		return
	}
	per := (lines + block - 1) / block
	units := outer * per
	parallel(units, func() *scratch {
		return &scratch{
			g:   make([]float64, block*length),
			out: make([]float64, length),
			v:   make([]int, length),
			z:   make([]float64, length+1),
		}
	}, func(u int, s *scratch) {
		o, p := u/per, u%per
		first := o*outerStride + p*block
		nb := min(block, lines-p*block)
		// Gather: element i of line b is f[first + b + i*stride] (for the x
		// pass, stride 1 and a single line per block).
		for i := 0; i < length; i++ {
			row := f[first+i*stride:]
			for b := 0; b < nb; b++ {
				s.g[b*length+i] = row[b]
			}
		}
		for b := 0; b < nb; b++ {
			line := s.g[b*length : (b+1)*length]
			envelope(line, s.out, s.v, s.z)
			copy(line, s.out)
		}
		for i := 0; i < length; i++ {
			row := f[first+i*stride:]
			for b := 0; b < nb; b++ {
				row[b] = s.g[b*length+i]
			}
		}
	})
}

// envelope computes d[q] = min_p ((q − p)² + f[p]) for one line by the lower
// envelope of parabolas (Felzenszwalb & Huttenlocher 2012, Algorithm
// DT(f)). Samples with f = +Inf are not sites; a line without sites gives
// +Inf everywhere. v and z are scratch of length len(f) and len(f)+1.
func envelope(f, d []float64, v []int, z []float64) {
	n := len(f)
	inf := math.Inf(1)
	k := -1
	for q := 0; q < n; q++ {
		fq := f[q]
		if math.IsInf(fq, 1) {
			continue
		}
		if k < 0 {
			k = 0
			v[0] = q
			z[0] = -inf
			z[1] = inf
			continue
		}
		qq := fq + float64(q*q)
		var s float64
		for {
			p := v[k]
			s = (qq - (f[p] + float64(p*p))) / float64(2*(q-p))
			// z[0] = −Inf and s is finite, so the loop stops at k = 0.
			if s > z[k] {
				break
			}
			k--
		}
		k++
		v[k] = q
		z[k] = s
		z[k+1] = inf
	}
	if k < 0 {
		for q := range d {
			d[q] = inf
		}
		return
	}
	j := 0
	for q := 0; q < n; q++ {
		for z[j+1] < float64(q) {
			j++
		}
		p := v[j]
		d[q] = float64((q-p)*(q-p)) + f[p]
	}
}
