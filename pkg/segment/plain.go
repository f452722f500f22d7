package segment

import (
	"fmt"
	"math"
	"slices"

	"sluice/pkg/filter"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// plainLabels filters grey over box out and labels every voxel of out by
// the class of its filtered grey: phase.Outside outside the sample
// cylinder, the reference mask's code outside the pore space (reference
// mode), else the code of the grey class. With hyst it also returns what
// the hysteresis needs: the hysteresis kind of every voxel, or else the
// filtered grey over out.
//
// uint8 and uint16 grey with the median (or no) filter never become
// float32. With the median, only comparisons of the median with fixed grey
// levels matter (class thresholds, hysteresis band edges), and
// filter.Median3Levels gives them by threshold decomposition (counts of
// voxels above each level, no sorting). Unfiltered integer grey is
// classified row by row through a table of the class code of every grey
// value. Other inputs are filtered as float32 first.
func plainLabels(grey volume.Any, out volume.Box, p Params, c *classes, mask *volume.Labels, hyst bool) (*volume.Labels, *volume.Volume[float32], []uint8, error) {
	rl := &rowLabeller{p: p, c: c, mask: mask, out: out, lab: volume.New[uint8](out, grey.EdgeLength()), hyst: hyst}
	rl.span = sampleSpans(p.Sample, out)
	integer := p.Filter.Method == "median" || p.Filter.Method == "none"
	var err error
	switch v := grey.(type) {
	case *volume.Volume[uint16]:
		if integer {
			err = intLabels(v, rl, p.Filter.Method == "median")
			return rl.lab, rl.g, rl.kind, err
		}
	case *volume.Volume[uint8]:
		if integer {
			err = intLabels(v, rl, p.Filter.Method == "median")
			return rl.lab, rl.g, rl.kind, err
		}
	}
	f, err := filtered(grey, out, p)
	if err != nil {
		return nil, nil, nil, err
	}
	rl.floatLabels(f)
	if hyst {
		rl.g = f
	}
	return rl.lab, rl.g, nil, nil
}

// floatLabels labels every row of r.out from the filtered grey f by class,
// then applies the sample cylinder and the reference mask.
func (r *rowLabeller) floatLabels(f *volume.Volume[float32]) {
	out, c := r.out, r.c
	nx := out.Max[2] - out.Min[2]
	for z := out.Min[0]; z < out.Max[0]; z++ {
		for y := out.Min[1]; y < out.Max[1]; y++ {
			row := f.Pix[f.Index(z, y, out.Min[2]):][:nx]
			dst, x0, x1 := r.row(z, y)
			for i := x0; i < x1; i++ {
				dst[i] = c.codes[c.class(float64(row[i]))]
			}
			r.masked(z, y, dst, x0, x1)
		}
	}
}

// rowLabeller writes the labels (and grey) of box out row by row; rows are
// independent, so several goroutines may fill different rows at once.
type rowLabeller struct {
	p    Params
	c    *classes
	mask *volume.Labels
	out  volume.Box
	lab  *volume.Labels
	hyst bool // hysteresis follows: keep g, or kind
	g    *volume.Volume[float32]
	kind []uint8 // hysteresis kinds over out, same layout as lab
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
	if median {
		// Threshold decomposition: the median is only compared with fixed
		// grey levels (the class thresholds and, with hysteresis, the band
		// edges tn ± band), and for integer v, v > t ⇔ v > ⌊t⌋. The count
		// of sorted distinct cuts below the median gives every comparison.
		var raw []float64
		raw = append(raw, rl.c.t...)
		if rl.hyst {
			raw = append(raw, rl.c.tn-rl.c.band, rl.c.tn+rl.c.band)
		}
		cuts := make([]int, 0, len(raw))
		for _, t := range raw {
			cuts = append(cuts, int(math.Max(math.Min(math.Floor(t), 1<<20), -1)))
		}
		slices.Sort(cuts)
		cuts = slices.Compact(cuts)
		// above(t, k): the median lies above t when k cuts lie below it.
		above := func(t float64, k int) bool {
			ct := int(math.Max(math.Min(math.Floor(t), 1<<20), -1))
			return slices.Index(cuts, ct) < k
		}
		if len(cuts) <= filter.MaxLevels {
			n := len(cuts) + 1
			code := make([]uint8, n)
			strict, relaxed := make([]bool, n), make([]bool, n)
			for k := range code {
				cls := 0
				for _, t := range rl.c.t {
					if above(t, k) {
						cls++
					}
				}
				code[k] = rl.c.codes[cls]
				lo, hi := above(rl.c.tn-rl.c.band, k), above(rl.c.tn+rl.c.band, k)
				if rl.c.darkSide {
					strict[k], relaxed[k] = !lo, !hi
				} else {
					strict[k], relaxed[k] = hi, lo
				}
			}
			if rl.hyst {
				rl.kind = make([]uint8, len(rl.lab.Pix))
			}
			return filter.Median3Levels(v, out, cuts, func(z, y int, ks []uint8) {
				dst, x0, x1 := rl.row(z, y)
				for i, k := range ks[x0:x1] {
					dst[x0+i] = code[k]
				}
				rl.masked(z, y, dst, x0, x1)
				if rl.kind != nil {
					kr := rl.kind[rl.lab.Index(z, y, out.Min[2]):][:nx]
					for i, k := range ks {
						kr[i] = rl.c.kindOf(dst[i], strict[k], relaxed[k])
					}
				}
			})
		}
	}
	if rl.hyst {
		rl.g = volume.New[float32](out, 0)
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
