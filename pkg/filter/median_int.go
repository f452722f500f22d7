package filter

import (
	"sync"

	"sluice/pkg/volume"
)

// Integer is the set of integer voxel types the integer median accepts.
type Integer interface {
	~uint8 | ~uint16
}

// Median3Integer returns the 3×3×3 median of an integer volume over core
// (scipy.ndimage median_filter(size=3, mode='nearest') on uint8/uint16).
// The median of integers is one of them, so the result is exact, and
// converting it to float32 gives the bits Median3 gives on the converted
// input: the histogram and the thresholds see the same values either way.
func Median3Integer[T Integer](in *volume.Volume[T], core volume.Box) (*volume.Volume[T], error) {
	if err := check(in, core); err != nil {
		return nil, err
	}
	out := volume.New[T](core, in.VoxelSize)
	nx := core.Max[2] - core.Min[2]
	median3Rows(in, core, func(z, y int, row []T) {
		copy(out.Pix[out.Index(z, y, core.Min[2]):][:nx], row)
	})
	return out, nil
}

// Median3Rows computes the 3×3×3 median of an integer volume over core and
// hands each output row to emit(z, y, row): row[i] is the median at
// (z, y, core.Min[2]+i). emit runs on several goroutines at once, each call
// for a different row; row is reused once emit returns. It lets a caller
// consume the filtered grey row by row (classify, bin, convert) without
// storing the filtered volume.
func Median3Rows[T Integer](in *volume.Volume[T], core volume.Box, emit func(z, y int, row []T)) error {
	if err := check(in, core); err != nil {
		return err
	}
	median3Rows(in, core, emit)
	return nil
}

// medianScratch holds the per-goroutine rows of the integer median; pooled
// so that a worker filtering tile after tile does not allocate them again.
type medianScratch struct {
	tri    [3][][3]int32
	planes [][9]int32
}

var medianPool = sync.Pool{New: func() any { return new(medianScratch) }}

func (s *medianScratch) size(nTri, nPlanes int) {
	for i := range s.tri {
		if cap(s.tri[i]) < nTri {
			s.tri[i] = make([][3]int32, nTri)
		}
		s.tri[i] = s.tri[i][:nTri]
	}
	if cap(s.planes) < nPlanes {
		s.planes = make([][9]int32, nPlanes)
	}
	s.planes = s.planes[:nPlanes]
}

// median3Rows is the method of Median3 (z-triples, 3×3 planes, pairs of
// outputs sharing a merge, selection of the 14th value) with the voxel
// values themselves as keys: integers have a total order, so the special
// path for NaN and −0 is not needed.
//
// Memory per slab goroutine (pooled): three rows of sorted triples
// ([3]int32 per input x), one row of sorted planes ([9]int32 for each x of
// core.Min[2]−1 … core.Max[2], the edge planes taken from the clamped
// column) and one output row.
func median3Rows[T Integer](in *volume.Volume[T], core volume.Box, emit func(z, y int, row []T)) {
	if useVector && median3RowsVector(in, core, emit) {
		return
	}
	ib := in.Box
	s := ib.Size()
	nyx := s[1] * s[2]
	xa := max(core.Min[2]-1, ib.Min[2])
	xb := min(core.Max[2]+1, ib.Max[2])
	ya := max(core.Min[1]-1, ib.Min[1])
	nx := xb - xa
	ncx := core.Max[2] - core.Min[2]
	// Plane j is the plane at x = core.Min[2]−1+j, built from the triples of
	// input column src[j] − xa.
	src := make([]int, ncx+2)
	for j := range src {
		src[j] = clamp(core.Min[2]-1+j, ib.Min[2], ib.Max[2]) - xa
	}
	slabs(core.Min[0], core.Max[0], func(z0, z1 int) {
		sc := medianPool.Get().(*medianScratch)
		defer medianPool.Put(sc)
		sc.size(nx, ncx+2)
		tri, planes := sc.tri, sc.planes
		row := make([]T, ncx)
		var triY [3]int
		for z := z0; z < z1; z++ {
			zm := clamp(z-1, ib.Min[0], ib.Max[0]) - ib.Min[0]
			zc := z - ib.Min[0]
			zp := clamp(z+1, ib.Min[0], ib.Max[0]) - ib.Min[0]
			triY = [3]int{-1 << 62, -1 << 62, -1 << 62}
			slot := func(yy int) [][3]int32 {
				k := (yy - ya) % 3
				if triY[k] != yy {
					triY[k] = yy
					o := (yy-ib.Min[1])*s[2] + xa - ib.Min[2]
					sortTriplesInt(tri[k], in.Pix[zm*nyx+o:][:nx], in.Pix[zc*nyx+o:][:nx], in.Pix[zp*nyx+o:][:nx])
				}
				return tri[k]
			}
			for y := core.Min[1]; y < core.Max[1]; y++ {
				t0 := slot(clamp(y-1, ib.Min[1], ib.Max[1]))
				t1 := slot(y)
				t2 := slot(clamp(y+1, ib.Min[1], ib.Max[1]))
				for j, c := range src {
					sortPlane(&planes[j], &t0[c], &t1[c], &t2[c])
				}
				var m [10]int32
				x := 0
				for ; x+1 < ncx; x += 2 {
					// Outputs x and x+1 are planes j = x+1, x+2 (centre).
					mergePair(&m, &planes[x+1], &planes[x+2])
					row[x] = T(select14(&m, &planes[x]))
					row[x+1] = T(select14(&m, &planes[x+3]))
				}
				if x < ncx {
					mergePair(&m, &planes[x+1], &planes[x+2])
					row[x] = T(select14(&m, &planes[x]))
				}
				emit(z, y, row)
			}
		}
	})
}

// sortTriplesInt writes (lo[i], mid[i], hi[i]) sorted into t[i].
func sortTriplesInt[T Integer](t [][3]int32, lo, mid, hi []T) {
	lo, mid, hi = lo[:len(t)], mid[:len(t)], hi[:len(t)]
	for i := range t {
		a, b, c := int32(lo[i]), int32(mid[i]), int32(hi[i])
		a, b = min(a, b), max(a, b)
		b, c = min(b, c), max(b, c)
		a, b = min(a, b), max(a, b)
		t[i] = [3]int32{a, b, c}
	}
}
