package filter

import (
	"fmt"
	"math"

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
// truncate=truncate) on float32 data. sigma = 0 copies the core.
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
	slabs(core.Min[0], core.Max[0], func(z0, z1 int) {
		// Pass 1 (z) over y, x grown by r (within in.Box).
		b1 := volume.Box{Min: [3]int{z0, max(core.Min[1]-r, ib.Min[1]), max(core.Min[2]-r, ib.Min[2])},
			Max: [3]int{z1, min(core.Max[1]+r, ib.Max[1]), min(core.Max[2]+r, ib.Max[2])}}
		t1 := volume.New[float32](b1, 0)
		n1 := b1.Size()
		for z := z0; z < z1; z++ {
			var zo [64]int
			zoff := zo[:0]
			if 2*r+1 > len(zo) {
				zoff = make([]int, 0, 2*r+1)
			}
			for k := -r; k <= r; k++ {
				zoff = append(zoff, (clamp(z+k, ib.Min[0], ib.Max[0])-ib.Min[0])*s[1]*s[2])
			}
			for y := b1.Min[1]; y < b1.Max[1]; y++ {
				row := (y-ib.Min[1])*s[2] - ib.Min[2]
				o := t1.Index(z, y, b1.Min[2])
				for x := b1.Min[2]; x < b1.Max[2]; x++ {
					p := row + x
					acc := w[0] * float64(in.Pix[zoff[r]+p])
					for j := 1; j <= r; j++ {
						acc += w[j] * (float64(in.Pix[zoff[r-j]+p]) + float64(in.Pix[zoff[r+j]+p]))
					}
					t1.Pix[o] = float32(acc)
					o++
				}
			}
		}
		// Pass 2 (y) over x grown by r: the rows y−j and y+j (clamped to
		// b1) are looked up once per output row.
		b2 := volume.Box{Min: [3]int{z0, core.Min[1], b1.Min[2]}, Max: [3]int{z1, core.Max[1], b1.Max[2]}}
		t2 := volume.New[float32](b2, 0)
		nx2 := b2.Max[2] - b2.Min[2]
		rowsY := make([][]float32, 2*r+1)
		for z := z0; z < z1; z++ {
			base := (z - z0) * n1[1] * n1[2]
			for y := b2.Min[1]; y < b2.Max[1]; y++ {
				for k := -r; k <= r; k++ {
					yy := clamp(y+k, b1.Min[1], b1.Max[1]) - b1.Min[1]
					rowsY[k+r] = t1.Pix[base+yy*n1[2]:][:nx2]
				}
				dst := t2.Pix[t2.Index(z, y, b2.Min[2]):][:nx2]
				mid := rowsY[r]
				for xi := range dst {
					acc := w[0] * float64(mid[xi])
					for j := 1; j <= r; j++ {
						acc += w[j] * (float64(rowsY[r-j][xi]) + float64(rowsY[r+j][xi]))
					}
					dst[xi] = float32(acc)
				}
			}
		}
		// Pass 3 (x) over the core, from a copy of each row padded by r
		// clamped values on both sides.
		ncx := core.Max[2] - core.Min[2]
		pad := make([]float32, ncx+2*r)
		for z := z0; z < z1; z++ {
			for y := core.Min[1]; y < core.Max[1]; y++ {
				row := t2.Pix[t2.Index(z, y, b2.Min[2]):][:nx2]
				for i := range pad {
					pad[i] = row[clamp(core.Min[2]-r+i, b2.Min[2], b2.Max[2])-b2.Min[2]]
				}
				dst := out.Pix[out.Index(z, y, core.Min[2]):][:ncx]
				for i := range dst {
					c := i + r
					acc := w[0] * float64(pad[c])
					for j := 1; j <= r; j++ {
						acc += w[j] * (float64(pad[c-j]) + float64(pad[c+j]))
					}
					dst[i] = float32(acc)
				}
			}
		}
	})
	return out, nil
}
