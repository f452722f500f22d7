package filter

import (
	"fmt"
	"math/bits"

	"sluice/pkg/volume"
)

// MaxLevels is the largest number of cuts Median3Levels takes.
const MaxLevels = 4

// Median3Levels tells, for every voxel of core, how many of the cuts its
// 3×3×3 median (mode 'nearest', as Median3Integer) lies above, without
// computing the median: emit(z, y, above) receives above[i] = the number of
// cuts c with median(z, y, core.Min[2]+i) > c. emit runs on several
// goroutines at once, each call for a different row; above is reused once
// emit returns. At most MaxLevels cuts.
//
// Method: threshold decomposition of the median (Fitch, Coyle & Gallagher
// 1984, "Median filtering by threshold decomposition", IEEE Trans. ASSP
// 32:1183–1188): the median of 27 values exceeds c exactly when at least
// 14 of them exceed c, ties included (sort the values: the 14th is above c
// iff the 14 largest are). So each cut needs only a count, and the count of
// a 3×3×3 window is a box sum of the indicator v > c, separable into three
// sums of three along x, y and z (with the clamped indices of mode
// 'nearest' on each axis, which is the clamped 27-voxel window). The counts
// of all cuts travel packed in one uint32, one byte per cut (a count is at
// most 27, so the bytes never carry into each other).
//
// Memory per slab goroutine: a ring of three (y, x) planes of packed
// x-and-y sums over the core (uint32), one row of packed indicators and one
// output row.
func Median3Levels[T Integer](in *volume.Volume[T], core volume.Box, cuts []int, emit func(z, y int, above []uint8)) error {
	if err := check(in, core); err != nil {
		return err
	}
	if len(cuts) > MaxLevels {
		return fmt.Errorf("filter: %d median levels, at most %d", len(cuts), MaxLevels)
	}
	// Indicator cuts as int32, clamped to [−1, max T]: v > c is the same
	// for every v of type T.
	var cs [MaxLevels]int32
	for k, c := range cuts {
		cs[k] = int32(max(min(c, int(^T(0))), -1))
	}
	nc := len(cuts)
	ib := in.Box
	s := ib.Size()
	nyx := s[1] * s[2]
	xa := max(core.Min[2]-1, ib.Min[2])
	xb := min(core.Max[2]+1, ib.Max[2])
	ncx := core.Max[2] - core.Min[2]
	ncy := core.Max[1] - core.Min[1]
	// Input rows y of the y sums: ya..yb−1.
	ya := max(core.Min[1]-1, ib.Min[1])
	yb := min(core.Max[1]+1, ib.Max[1])
	// x neighbours of output i, as indices into an indicator row from xa.
	xl := clamp(core.Min[2]-1, ib.Min[2], ib.Max[2]) - xa
	xr := clamp(core.Max[2], ib.Min[2], ib.Max[2]) - xa
	slabs(core.Min[0], core.Max[0], func(z0, z1 int) {
		wrow := make([]uint32, xb-xa)
		xs := make([]uint32, (yb-ya)*ncx) // x sums of the input rows of one plane
		var ring [3][]uint32
		ringZ := [3]int{-1 << 62, -1 << 62, -1 << 62}
		for i := range ring {
			ring[i] = make([]uint32, ncy*ncx)
		}
		above := make([]uint8, ncx)
		// plane returns the packed x-and-y sums of input plane zz.
		plane := func(zz int) []uint32 {
			k := ((zz % 3) + 3) % 3
			if ringZ[k] == zz {
				return ring[k]
			}
			ringZ[k] = zz
			for yy := ya; yy < yb; yy++ {
				src := in.Pix[(zz-ib.Min[0])*nyx+(yy-ib.Min[1])*s[2]+xa-ib.Min[2]:][:len(wrow)]
				indicators(wrow, src, &cs, nc)
				d := xs[(yy-ya)*ncx:][:ncx]
				o := core.Min[2] - xa // index in wrow of output 0
				if ncx == 1 {
					d[0] = wrow[xl] + wrow[o] + wrow[xr]
				} else {
					d[0] = wrow[xl] + wrow[o] + wrow[o+1]
					for i := 1; i < ncx-1; i++ {
						d[i] = wrow[o+i-1] + wrow[o+i] + wrow[o+i+1]
					}
					d[ncx-1] = wrow[o+ncx-2] + wrow[o+ncx-1] + wrow[xr]
				}
			}
			p := ring[k]
			for j := 0; j < ncy; j++ {
				y := core.Min[1] + j
				r0 := xs[(clamp(y-1, ib.Min[1], ib.Max[1])-ya)*ncx:][:ncx]
				r1 := xs[(y-ya)*ncx:][:ncx]
				r2 := xs[(clamp(y+1, ib.Min[1], ib.Max[1])-ya)*ncx:][:ncx]
				d := p[j*ncx:][:ncx]
				for i := range d {
					d[i] = r0[i] + r1[i] + r2[i]
				}
			}
			return p
		}
		for z := z0; z < z1; z++ {
			p0 := plane(clamp(z-1, ib.Min[0], ib.Max[0]))
			p1 := plane(z)
			p2 := plane(clamp(z+1, ib.Min[0], ib.Max[0]))
			for j := 0; j < ncy; j++ {
				a, b, c := p0[j*ncx:][:ncx], p1[j*ncx:][:ncx], p2[j*ncx:][:ncx]
				for i := range above {
					// Byte k of t has its top bit set iff count k >= 14
					// (count + 114 <= 141 never carries).
					t := (a[i] + b[i] + c[i] + 0x72727272) & 0x80808080
					above[i] = uint8(bits.OnesCount32(t))
				}
				emit(z, core.Min[1]+j, above)
			}
		}
	})
	return nil
}

// indicators writes the packed indicators of a row: byte k of w[i] is 1
// when v[i] > cut k (cs[k] − v < 0), else 0.
func indicators[T Integer](w []uint32, v []T, cs *[MaxLevels]int32, nc int) {
	w = w[:len(v)]
	switch nc {
	case 1:
		c0 := cs[0]
		for i, x := range v {
			w[i] = uint32((c0 - int32(x)) >> 31 & 1)
		}
	case 2:
		c0, c1 := cs[0], cs[1]
		for i, x := range v {
			xi := int32(x)
			w[i] = uint32((c0-xi)>>31&1) | uint32((c1-xi)>>31&1)<<8
		}
	default:
		for i, x := range v {
			xi := int32(x)
			var u uint32
			for c := 0; c < nc; c++ {
				u |= uint32((cs[c]-xi)>>31&1) << (8 * c)
			}
			w[i] = u
		}
	}
}
