package filter

import (
	"fmt"
	"math"
	"sync"

	"sluice/pkg/volume"
)

// DefaultTruncate is the kernel half-width in standard deviations, as in
// scipy.ndimage.gaussian_filter (truncate=4.0).
const DefaultTruncate = 4.0

// GaussianRadius returns the kernel radius int(truncate·σ + 0.5) used by
// scipy.ndimage; it is also the halo Gaussian needs.
func GaussianRadius(sigma, truncate float64) int {
	if sigma <= 0 {
		return 0
	}
	return int(truncate*sigma + 0.5)
}

// GaussianKernel returns the weights w[j], j = 0..r, of the symmetric kernel:
// exp(−j²/2σ²) normalised so that w[0] + 2Σ_{j≥1} w[j] = 1.
func GaussianKernel(sigma, truncate float64) []float64 {
	r := GaussianRadius(sigma, truncate)
	w := make([]float64, r+1)
	sum := 0.0
	for j := 0; j <= r; j++ {
		w[j] = math.Exp(-0.5 * float64(j*j) / (sigma * sigma))
		if j == 0 {
			sum += w[j]
		} else {
			sum += 2 * w[j]
		}
	}
	for j := range w {
		w[j] /= sum
	}
	return w
}

// Gaussian returns in smoothed by a Gaussian of standard deviation sigma
// voxels (separable: z, then y, then x; boundary mode 'nearest'), over core.
// It matches scipy.ndimage.gaussian_filter(in, sigma, mode='nearest',
// truncate=truncate) on float32 data to float32 rounding. sigma = 0 copies
// the core.
//
// Arithmetic. Each pass stores float32; each output voxel of a pass is the
// float64 sum w[0]·c + Σ_{j=1..r} w[j]·(float64(a₋ⱼ) + float64(a₊ⱼ)), taken
// in increasing j. scipy's correlate1d also pairs the taps of a symmetric
// kernel (from memory of its C source; the order of the pairs may differ);
// float64 sums rounded to float32 hide such differences almost always, and
// TestGaussianMatchesScipy logs how many voxels are not bit-identical (none
// on its data). Any change of this order may change bits:
// TestGaussianBitIdentical pins it against a whole-box reference.
//
// Loop order. The sums run "row at a time": for one group of taps, the
// partial sums of a whole row are updated in a float64 row buffer from the
// source rows shifted by ±j, so every inner loop is a contiguous sweep over
// x with no index arithmetic and no bounds checks, while each voxel still
// receives its terms in the order above. Per z-slice of the core the z pass
// fills one plane (y and x grown by r within in.Box); each core row of that
// plane then goes through the y pass into a row padded by r clamped values on
// both sides, and the x pass writes the output row from it. Scratch per
// goroutine is therefore one plane, one float64 row and one
// padded row (plane and padded row in float64 holding float32-rounded
// values, so that the y and x passes read them without conversion), reused
// through a sync.Pool.
func Gaussian(in *volume.Volume[float32], core volume.Box, sigma, truncate float64) (*volume.Volume[float32], error) {
	if err := check(in, core); err != nil {
		return nil, err
	}
	if sigma < 0 || truncate <= 0 || math.IsNaN(sigma) || math.IsNaN(truncate) {
		return nil, fmt.Errorf("filter: bad Gaussian sigma %g or truncate %g", sigma, truncate)
	}
	if sigma == 0 {
		return in.Crop(core, 0), nil
	}
	w := GaussianKernel(sigma, truncate)
	r := len(w) - 1
	out := volume.New[float32](core, in.VoxelSize)
	ib := in.Box
	s := ib.Size()
	// b1: the y, x extent of the z pass (core grown by r, within in.Box).
	y1a, y1b := max(core.Min[1]-r, ib.Min[1]), min(core.Max[1]+r, ib.Max[1])
	x1a, x1b := max(core.Min[2]-r, ib.Min[2]), min(core.Max[2]+r, ib.Max[2])
	ny1, nx1 := y1b-y1a, x1b-x1a
	ncx := core.Max[2] - core.Min[2]
	// Offset in the padded row of x1a (the padded row starts at core x − r).
	off := x1a - (core.Min[2] - r)
	slabs(core.Min[0], core.Max[0], func(z0, z1 int) {
		sc := gaussScratchPool.Get().(*gaussScratch)
		defer gaussScratchPool.Put(sc)
		plane := grow(&sc.plane, ny1*nx1)
		acc := grow(&sc.acc, max(nx1, ncx))
		pad := grow(&sc.pad, ncx+2*r)
		at := make([]int, 2*r+1) // offset of the row shifted by k, at[k+r]
		for z := z0; z < z1; z++ {
			// Pass 1 (z): plane[y][x] over y1a..y1b, x1a..x1b, straight
			// from the input rows.
			for y := y1a; y < y1b; y++ {
				for k := -r; k <= r; k++ {
					zz := clamp(z+k, ib.Min[0], ib.Max[0]) - ib.Min[0]
					at[k+r] = (zz*s[1]+y-ib.Min[1])*s[2] + x1a - ib.Min[2]
				}
				symmetricRow(plane[(y-y1a)*nx1:][:nx1], acc[:nx1], w, in.Pix, at)
			}
			for y := core.Min[1]; y < core.Max[1]; y++ {
				// Pass 2 (y): rows y+k of the plane, clamped to y1a..y1b,
				// into the padded row.
				for k := -r; k <= r; k++ {
					yy := clamp(y+k, y1a, y1b) - y1a
					at[k+r] = yy * nx1
				}
				symmetricRow(pad[off:][:nx1], acc[:nx1], w, plane, at)
				lo, hi := pad[off], pad[off+nx1-1]
				for i := range pad[:off] {
					pad[i] = lo
				}
				for i := off + nx1; i < len(pad); i++ {
					pad[i] = hi
				}
				// Pass 3 (x): the output row from the padded row shifted by k.
				for k := -r; k <= r; k++ {
					at[k+r] = r + k
				}
				symmetricRow(out.Pix[out.Index(z, y, core.Min[2]):][:ncx], acc[:ncx], w, pad, at)
			}
		}
	})
	return out, nil
}

// gaussScratch is the per-goroutine working memory of Gaussian.
type gaussScratch struct {
	plane []float64 // one z-pass plane, [y][x] row-major, float32 values
	acc   []float64 // partial sums of one row
	pad   []float64 // one y-pass row padded by r on both sides, float32 values
}

var gaussScratchPool = sync.Pool{New: func() any { return new(gaussScratch) }}

// grow returns (*buf)[:n], reallocating when the capacity is short.
func grow[T real](buf *[]T, n int) []T {
	if cap(*buf) < n {
		*buf = make([]T, n)
	}
	return (*buf)[:n]
}

// real is the storage of a pass's rows: float32, or float64 holding values
// already rounded to float32 (so that reading them needs no conversion).
type real interface{ float32 | float64 }

// symmetricRow sets dst[i] = float32(w[0]·c[i] + Σ_{j=1..r} w[j]·(a₋ⱼ[i] +
// a₊ⱼ[i])) with the sum taken in increasing j, where the source row shifted
// by k (k = −r..r) is base[at[k+r]:][:len(dst)], and acc is a float64 row of
// len(dst). (Offsets rather than a slice of rows: no pointer stores, so no
// write barriers, per row.) A sweep over the row applies up to three tap
// pairs (for radius 5, the curvature smoothing: two sweeps); the last sweep
// writes dst.
func symmetricRow[S, D real](dst []D, acc []float64, w []float64, base []S, at []int) {
	r := len(w) - 1
	n := len(dst)
	if useVector && r > 0 && symmetricRowVector(dst, w, base, at) {
		return
	}
	row := func(k int) []S { return base[at[r+k]:][:n] }
	switch r {
	case 0:
		c := row(0)
		for i := range dst {
			dst[i] = D(float32(w[0] * float64(c[i])))
		}
		return
	case 1:
		tapsHead1(acc, w[0], row(0), w[1], row(-1), row(1))
		store(dst, acc)
		return
	case 2:
		tapsHead1(acc, w[0], row(0), w[1], row(-1), row(1))
		tapsTail1(dst, acc, w[2], row(-2), row(2))
		return
	}
	tapsHead2(acc, w[0], row(0), w[1], row(-1), row(1), w[2], row(-2), row(2))
	j := 3
	for ; r-j+1 > 3; j += 2 {
		tapsMid2(acc, w[j], row(-j), row(j), w[j+1], row(-j-1), row(j+1))
	}
	switch r - j + 1 {
	case 1:
		tapsTail1(dst, acc, w[j], row(-j), row(j))
	case 2:
		tapsTail2(dst, acc, w[j], row(-j), row(j), w[j+1], row(-j-1), row(j+1))
	case 3:
		tapsTail3(dst, acc, w[j], row(-j), row(j), w[j+1], row(-j-1), row(j+1), w[j+2], row(-j-2), row(j+2))
	}
}

// tapsHead1: acc[i] = w0·c[i] + w1·(a[i] + b[i]).
func tapsHead1[S real](acc []float64, w0 float64, c []S, w1 float64, a, b []S) {
	c, a, b = c[:len(acc)], a[:len(acc)], b[:len(acc)]
	for i := range acc {
		s := w0 * float64(c[i])
		s += w1 * (float64(a[i]) + float64(b[i]))
		acc[i] = s
	}
}

// tapsHead2: acc[i] = w0·c[i] + w1·(a[i] + b[i]) + w2·(d[i] + e[i]).
func tapsHead2[S real](acc []float64, w0 float64, c []S, w1 float64, a, b []S, w2 float64, d, e []S) {
	c, a, b, d, e = c[:len(acc)], a[:len(acc)], b[:len(acc)], d[:len(acc)], e[:len(acc)]
	for i := range acc {
		s := w0 * float64(c[i])
		s += w1 * (float64(a[i]) + float64(b[i]))
		s += w2 * (float64(d[i]) + float64(e[i]))
		acc[i] = s
	}
}

// tapsMid2: acc[i] += wj·(a[i] + b[i]), then += wk·(c[i] + d[i]).
func tapsMid2[S real](acc []float64, wj float64, a, b []S, wk float64, c, d []S) {
	a, b, c, d = a[:len(acc)], b[:len(acc)], c[:len(acc)], d[:len(acc)]
	for i := range acc {
		s := acc[i]
		s += wj * (float64(a[i]) + float64(b[i]))
		s += wk * (float64(c[i]) + float64(d[i]))
		acc[i] = s
	}
}

// tapsTail1: dst[i] = float32(acc[i] + wj·(a[i] + b[i])).
func tapsTail1[S, D real](dst []D, acc []float64, wj float64, a, b []S) {
	acc = acc[:len(dst)]
	a, b = a[:len(dst)], b[:len(dst)]
	for i := range dst {
		s := acc[i]
		s += wj * (float64(a[i]) + float64(b[i]))
		dst[i] = D(float32(s))
	}
}

// tapsTail2: dst[i] = float32(acc[i] + wj·(a[i] + b[i]) + wk·(c[i] + d[i])).
func tapsTail2[S, D real](dst []D, acc []float64, wj float64, a, b []S, wk float64, c, d []S) {
	acc = acc[:len(dst)]
	a, b, c, d = a[:len(dst)], b[:len(dst)], c[:len(dst)], d[:len(dst)]
	for i := range dst {
		s := acc[i]
		s += wj * (float64(a[i]) + float64(b[i]))
		s += wk * (float64(c[i]) + float64(d[i]))
		dst[i] = D(float32(s))
	}
}

// tapsTail3: dst[i] = float32(acc[i] + wj·(a[i] + b[i]) + wk·(c[i] + d[i]) +
// wl·(e[i] + f[i])).
func tapsTail3[S, D real](dst []D, acc []float64, wj float64, a, b []S, wk float64, c, d []S, wl float64, e, f []S) {
	acc = acc[:len(dst)]
	a, b, c, d, e, f = a[:len(dst)], b[:len(dst)], c[:len(dst)], d[:len(dst)], e[:len(dst)], f[:len(dst)]
	for i := range dst {
		s := acc[i]
		s += wj * (float64(a[i]) + float64(b[i]))
		s += wk * (float64(c[i]) + float64(d[i]))
		s += wl * (float64(e[i]) + float64(f[i]))
		dst[i] = D(float32(s))
	}
}

// store: dst[i] = float32(acc[i]).
func store[D real](dst []D, acc []float64) {
	acc = acc[:len(dst)]
	for i := range dst {
		dst[i] = D(float32(acc[i]))
	}
}
