package segment

import (
	"fmt"
	"math"

	"sluice/pkg/filter"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// plainLabels filters grey over box out and labels every voxel of out by
// the class of its filtered grey: phase.Outside outside the sample
// cylinder, the reference mask's code outside the pore space (reference
// mode), else the code of the grey class. With keepGrey it also returns the
// filtered grey over out (hysteresis needs it).
//
// uint8 and uint16 grey with the median (or no) filter never become
// float32. Without hysteresis only the class of the median matters, and
// filter.Median3Levels gives it by threshold decomposition (counts of
// voxels above each threshold, no sorting); with hysteresis the integer
// median (exact, the same values as the float median) is classified row by
// row through a table of the class code of every grey value. Both run on
// the goroutines of the filter. Other inputs are filtered as float32 first.
func plainLabels(grey volume.Any, out volume.Box, p Params, c *classes, mask *volume.Labels, keepGrey bool) (*volume.Labels, *volume.Volume[float32], error) {
	rl := &rowLabeller{p: p, c: c, mask: mask, out: out, lab: volume.New[uint8](out, grey.EdgeLength())}
	rl.span = sampleSpans(p.Sample, out)
	if keepGrey {
		rl.g = volume.New[float32](out, 0)
	}
	integer := p.Filter.Method == "median" || p.Filter.Method == "none"
	var err error
	switch v := grey.(type) {
	case *volume.Volume[uint16]:
		if integer {
			err = intLabels(v, rl, p.Filter.Method == "median")
			return rl.lab, rl.g, err
		}
	case *volume.Volume[uint8]:
		if integer {
			err = intLabels(v, rl, p.Filter.Method == "median")
			return rl.lab, rl.g, err
		}
	}
	f, err := filtered(grey, out, p)
	if err != nil {
		return nil, nil, err
	}
	nx := out.Max[2] - out.Min[2]
	for z := out.Min[0]; z < out.Max[0]; z++ {
		for y := out.Min[1]; y < out.Max[1]; y++ {
			row := f.Pix[f.Index(z, y, out.Min[2]):][:nx]
			dst, x0, x1 := rl.row(z, y)
			for i := x0; i < x1; i++ {
				dst[i] = c.codes[c.class(float64(row[i]))]
			}
			rl.masked(z, y, dst, x0, x1)
		}
	}
	if keepGrey {
		rl.g = f
	}
	return rl.lab, rl.g, nil
}

// rowLabeller writes the labels (and grey) of box out row by row; rows are
// independent, so several goroutines may fill different rows at once.
type rowLabeller struct {
	p    Params
	c    *classes
	mask *volume.Labels
	out  volume.Box
	lab  *volume.Labels
	g    *volume.Volume[float32]
	// span[y−out.Min[1]] is the x range [x0, x1), relative to out.Min[2],
	// of row y inside the sample cylinder.
	span [][2]int
}

// row returns the label row (z, y) with its part outside the sample set to
// phase.Outside, and the x range inside the sample.
func (r *rowLabeller) row(z, y int) ([]uint8, int, int) {
	nx := r.out.Max[2] - r.out.Min[2]
	dst := r.lab.Pix[r.lab.Index(z, y, r.out.Min[2]):][:nx]
	s := r.span[y-r.out.Min[1]]
	for i := 0; i < s[0]; i++ {
		dst[i] = phase.Outside
	}
	for i := s[1]; i < nx; i++ {
		dst[i] = phase.Outside
	}
	return dst, s[0], s[1]
}

// masked applies the reference mask to the sample part [x0, x1) of a label
// row (reference mode only).
func (r *rowLabeller) masked(z, y int, dst []uint8, x0, x1 int) {
	if !r.p.Reference {
		return
	}
	for i := x0; i < x1; i++ {
		x := r.out.Min[2] + i
		if !poreMask(r.mask, r.p, z, y, x) {
			dst[i] = maskCode(r.mask, r.p, z, y, x)
		}
	}
}

// sampleSpans returns, for each row y of box, the x range [x0, x1) (relative
// to box.Min[2]) of the voxels Sample.Inside accepts. The disc of a row is
// one interval: dy² + dx² grows with |dx| under rounding too.
func sampleSpans(s Sample, box volume.Box) [][2]int {
	ny, nx := box.Max[1]-box.Min[1], box.Max[2]-box.Min[2]
	span := make([][2]int, ny)
	for j := range span {
		y := box.Min[1] + j
		x0, x1 := 0, 0
		for i := 0; i < nx; i++ {
			if s.Inside(y, box.Min[2]+i) {
				if x1 == 0 {
					x0 = i
				}
				x1 = i + 1
			}
		}
		span[j] = [2]int{x0, x1}
	}
	return span
}

// intLabels labels rl.out from integer grey, through the median rows or
// the raw rows.
func intLabels[T filter.Integer](v *volume.Volume[T], rl *rowLabeller, median bool) error {
	if err := v.Validate(); err != nil {
		return fmt.Errorf("segment: grey: %w", err)
	}
	// lut[v] is the code of the class of grey v.
	lut := make([]uint8, int(^T(0))+1)
	for i := range lut {
		lut[i] = rl.c.codes[rl.c.class(float64(i))]
	}
	out := rl.out
	nx := out.Max[2] - out.Min[2]
	if median && rl.g == nil && len(rl.c.t) <= filter.MaxLevels {
		// Only the class of the median is needed: count, do not sort. For
		// integer v, v > t ⇔ v > ⌊t⌋ (cuts clamped to the int range).
		cuts := make([]int, len(rl.c.t))
		for k, t := range rl.c.t {
			cuts[k] = int(math.Max(math.Min(math.Floor(t), 1<<20), -1))
		}
		return filter.Median3Levels(v, out, cuts, func(z, y int, above []uint8) {
			dst, x0, x1 := rl.row(z, y)
			for i, k := range above[x0:x1] {
				dst[x0+i] = rl.c.codes[k]
			}
			rl.masked(z, y, dst, x0, x1)
		})
	}
	emit := func(z, y int, row []T) {
		dst, x0, x1 := rl.row(z, y)
		for i, gv := range row[x0:x1] {
			dst[x0+i] = lut[gv]
		}
		rl.masked(z, y, dst, x0, x1)
		if rl.g != nil {
			gr := rl.g.Pix[rl.g.Index(z, y, out.Min[2]):][:nx]
			for i, gv := range row {
				gr[i] = float32(gv)
			}
		}
	}
	if median {
		return filter.Median3Rows(v, out, emit)
	}
	for z := out.Min[0]; z < out.Max[0]; z++ {
		for y := out.Min[1]; y < out.Max[1]; y++ {
			emit(z, y, v.Pix[v.Index(z, y, out.Min[2]):][:nx])
		}
	}
	return nil
}

// medianFloat is the 3×3×3 median of integer grey over out, as float32.
func medianFloat[T filter.Integer](v *volume.Volume[T], out volume.Box) (*volume.Volume[float32], error) {
	f := volume.New[float32](out, v.VoxelSize)
	nx := out.Max[2] - out.Min[2]
	err := filter.Median3Rows(v, out, func(z, y int, row []T) {
		d := f.Pix[f.Index(z, y, out.Min[2]):][:nx]
		for i, r := range row {
			d[i] = float32(r)
		}
	})
	return f, err
}
