package filter

import (
	"math"

	"sluice/pkg/volume"
)

// MedianHalo is the halo Median3 needs: one voxel.
const MedianHalo = 1

// Median3 returns the 3×3×3 median of in over core (scipy.ndimage
// median_filter(size=3, mode='nearest')).
//
// Method: along each row the nine values of every (dz, dy) column are sorted
// once; the median of a voxel is then the 14th smallest of the three sorted
// columns at x−1, x, x+1, found by a three-way merge.
func Median3(in *volume.Volume[float32], core volume.Box) (*volume.Volume[float32], error) {
	if err := check(in, core); err != nil {
		return nil, err
	}
	out := volume.New[float32](core, in.VoxelSize)
	ib := in.Box
	s := ib.Size()
	nyx := s[1] * s[2]
	slabs(core.Min[0], core.Max[0], func(z0, z1 int) {
		// Sorted columns for x in [xa, xb).
		xa := max(core.Min[2]-1, ib.Min[2])
		xb := min(core.Max[2]+1, ib.Max[2])
		cols := make([][9]float32, xb-xa)
		var rows [9]int
		for z := z0; z < z1; z++ {
			for y := core.Min[1]; y < core.Max[1]; y++ {
				k := 0
				for dz := -1; dz <= 1; dz++ {
					zz := clamp(z+dz, ib.Min[0], ib.Max[0]) - ib.Min[0]
					for dy := -1; dy <= 1; dy++ {
						yy := clamp(y+dy, ib.Min[1], ib.Max[1]) - ib.Min[1]
						rows[k] = zz*nyx + yy*s[2] - ib.Min[2]
						k++
					}
				}
				for x := xa; x < xb; x++ {
					c := &cols[x-xa]
					for k := 0; k < 9; k++ {
						c[k] = in.Pix[rows[k]+x]
					}
					sort9(c)
				}
				o := out.Index(z, y, core.Min[2])
				for x := core.Min[2]; x < core.Max[2]; x++ {
					a := &cols[clamp(x-1, ib.Min[2], ib.Max[2])-xa]
					b := &cols[x-xa]
					c := &cols[clamp(x+1, ib.Min[2], ib.Max[2])-xa]
					out.Pix[o] = median27(a, b, c)
					o++
				}
			}
		}
	})
	return out, nil
}

func sort9(c *[9]float32) {
	for i := 1; i < 9; i++ {
		v := c[i]
		j := i - 1
		for j >= 0 && c[j] > v {
			c[j+1] = c[j]
			j--
		}
		c[j+1] = v
	}
}

// median27 returns the 14th smallest value of three sorted 9-lists.
func median27(a, b, c *[9]float32) float32 {
	inf := float32(math.Inf(1))
	i, j, k := 0, 0, 0
	var v float32
	for n := 0; n < 14; n++ {
		va, vb, vc := inf, inf, inf
		if i < 9 {
			va = a[i]
		}
		if j < 9 {
			vb = b[j]
		}
		if k < 9 {
			vc = c[k]
		}
		switch {
		case va <= vb && va <= vc:
			v = va
			i++
		case vb <= vc:
			v = vb
			j++
		default:
			v = vc
			k++
		}
	}
	return v
}
