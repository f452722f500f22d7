package register

import (
	"fmt"
	"math"

	"sluice/pkg/volume"
)

// split returns the whole-voxel part and the fraction in [0, 1) of each
// component of s.
func split(s Shift) (off [3]int, frac [3]float64) {
	for a := 0; a < 3; a++ {
		f := math.Floor(s[a])
		off[a], frac[a] = int(f), s[a]-f
	}
	return
}

func clamp(v, lo, hi int) int { return max(lo, min(v, hi)) }

// Taps of the cubic convolution kernel along an axis with a fractional
// shift: source voxels off−1 … off+2 around the integer part off.
const (
	tapsBelow = 1
	tapsAbove = 2
)

// SourceBox returns the box of the scan (inside whole, the scan's box) that
// Resample reads to fill box on the reference grid: box moved by the whole
// part of s and, along an axis with a fraction, grown by the reach of the
// cubic kernel (one voxel below, two above), clamped to whole.
func SourceBox(whole, box volume.Box, s Shift) volume.Box {
	off, frac := split(s)
	var b volume.Box
	for a := 0; a < 3; a++ {
		lo, hi := off[a], off[a]
		if frac[a] != 0 {
			lo, hi = off[a]-tapsBelow, off[a]+tapsAbove
		}
		b.Min[a] = clamp(box.Min[a]+lo, whole.Min[a], whole.Max[a]-1)
		b.Max[a] = clamp(box.Max[a]-1+hi, whole.Min[a], whole.Max[a]-1) + 1
	}
	return b
}

// keys is the cubic convolution kernel of Keys (1981, IEEE Trans. Acoust.
// Speech Signal Process. 29:1153) with a = −½: interpolating (1 at 0, 0 at
// the other integers), exact for quadratics.
func keys(x float64) float64 {
	const a = -0.5
	x = math.Abs(x)
	switch {
	case x <= 1:
		return ((a+2)*x-(a+3))*x*x + 1
	case x < 2:
		return ((a*x-5*a)*x+8*a)*x - 4*a
	}
	return 0
}

// Resample returns box of the scan put onto the reference grid,
// out(p) = scan(p + s), from src, which must cover SourceBox(whole, box, s);
// whole is the scan's box. The result has src's voxel type.
func Resample(src volume.Any, whole, box volume.Box, s Shift) (volume.Any, error) {
	if box.Empty() {
		return nil, fmt.Errorf("register: empty box %v", box)
	}
	if need := SourceBox(whole, box, s); !src.Bounds().ContainsBox(need) {
		return nil, fmt.Errorf("register: source %v does not cover %v, which box %v shifted by %v needs", src.Bounds(), need, box, s)
	}
	switch v := src.(type) {
	case *volume.Volume[uint8]:
		return resample(v, whole, box, s, func(f float64) uint8 { return uint8(math.Round(max(0, min(f, 255)))) }), nil
	case *volume.Volume[uint16]:
		return resample(v, whole, box, s, func(f float64) uint16 { return uint16(math.Round(max(0, min(f, 65535)))) }), nil
	case *volume.Volume[float32]:
		return resample(v, whole, box, s, func(f float64) float32 { return float32(f) }), nil
	}
	return nil, fmt.Errorf("register: unsupported volume %T", src)
}

// axisTaps are, for each output coordinate along one axis, the source
// indices (clamped to the scan, relative to the source box) and weights.
type axisTaps struct {
	n   int       // taps per output coordinate
	idx []int     // len(out)·n
	w   []float64 // n weights, the same for every output coordinate
}

func taps(a int, whole, box, srcBox volume.Box, off int, frac float64) axisTaps {
	out := box.Max[a] - box.Min[a]
	t := axisTaps{n: 1, w: []float64{1}}
	first := 0
	if frac != 0 {
		t.n, first = tapsBelow+1+tapsAbove, -tapsBelow
		t.w = make([]float64, t.n)
		for j := range t.w {
			t.w[j] = keys(float64(first+j) - frac)
		}
	}
	t.idx = make([]int, out*t.n)
	for i := 0; i < out; i++ {
		q := box.Min[a] + i + off
		for j := 0; j < t.n; j++ {
			t.idx[i*t.n+j] = clamp(q+first+j, whole.Min[a], whole.Max[a]-1) - srcBox.Min[a]
		}
	}
	return t
}

func resample[T volume.Voxel](src *volume.Volume[T], whole, box volume.Box, s Shift, conv func(float64) T) *volume.Volume[T] {
	off, frac := split(s)
	out := volume.New[T](box, src.VoxelSize)
	sb := src.Box
	ss := sb.Size()
	var tp [3]axisTaps
	for a := 0; a < 3; a++ {
		tp[a] = taps(a, whole, box, sb, off[a], frac[a])
	}
	o := box.Size()
	if frac == [3]float64{} {
		i := 0
		for z := 0; z < o[0]; z++ {
			for y := 0; y < o[1]; y++ {
				row := (tp[0].idx[z]*ss[1] + tp[1].idx[y]) * ss[2]
				for x := 0; x < o[2]; x++ {
					out.Pix[i] = src.Pix[row+tp[2].idx[x]]
					i++
				}
			}
		}
		return out
	}
	// Separable passes in a fixed order (x, then y, then z): every
	// intermediate value depends only on source voxels and the weights, so
	// a voxel comes out the same whatever box it is computed in.
	// t1[sz][sy][ox] over the whole source box along z and y.
	t1 := make([]float64, ss[0]*ss[1]*o[2])
	tx := tp[2]
	for zy := 0; zy < ss[0]*ss[1]; zy++ {
		row := src.Pix[zy*ss[2] : (zy+1)*ss[2]]
		dst := t1[zy*o[2] : (zy+1)*o[2]]
		for x := range dst {
			var v float64
			for j, w := range tx.w {
				v += w * float64(row[tx.idx[x*tx.n+j]])
			}
			dst[x] = v
		}
	}
	// t2[sz][oy][ox].
	t2 := make([]float64, ss[0]*o[1]*o[2])
	ty := tp[1]
	for z := 0; z < ss[0]; z++ {
		for y := 0; y < o[1]; y++ {
			dst := t2[(z*o[1]+y)*o[2] : (z*o[1]+y+1)*o[2]]
			for j, w := range ty.w {
				srow := t1[(z*ss[1]+ty.idx[y*ty.n+j])*o[2]:][:o[2]]
				for x, v := range srow {
					dst[x] += w * v
				}
			}
		}
	}
	// out[oz][oy][ox].
	tz := tp[0]
	plane := o[1] * o[2]
	acc := make([]float64, plane)
	for z := 0; z < o[0]; z++ {
		clear(acc)
		for j, w := range tz.w {
			sp := t2[tz.idx[z*tz.n+j]*plane:][:plane]
			for i, v := range sp {
				acc[i] += w * v
			}
		}
		for i, v := range acc {
			out.Pix[z*plane+i] = conv(v)
		}
	}
	return out
}

// coveredRange returns, along axis a, the reference-grid coordinates p
// whose source p + s lies inside the scan: [lo, hi).
func coveredRange(whole volume.Box, s Shift, a int) (int, int) {
	lo := int(math.Ceil(float64(whole.Min[a]) - s[a]))
	hi := int(math.Floor(float64(whole.Max[a]-1)-s[a])) + 1
	return lo, hi
}

// Covered returns the box of reference-grid voxels whose source p + s lies
// inside the scan along every axis: those Resample interpolates rather than
// extends from the scan's edge. It may be empty.
func Covered(whole volume.Box, s Shift) volume.Box {
	var b volume.Box
	for a := 0; a < 3; a++ {
		b.Min[a], b.Max[a] = coveredRange(whole, s, a)
	}
	return b.Intersect(whole)
}

// MarkUncovered sets every voxel of m outside Covered(whole, s) to code
// (phase.Outside for a solid mask): those voxels were not seen by the scan.
func MarkUncovered(m *volume.Labels, whole volume.Box, s Shift, code uint8) {
	c := Covered(whole, s)
	b := m.Box
	i := 0
	for z := b.Min[0]; z < b.Max[0]; z++ {
		for y := b.Min[1]; y < b.Max[1]; y++ {
			if z < c.Min[0] || z >= c.Max[0] || y < c.Min[1] || y >= c.Max[1] {
				for x := b.Min[2]; x < b.Max[2]; x++ {
					m.Pix[i] = code
					i++
				}
				continue
			}
			for x := b.Min[2]; x < b.Max[2]; x++ {
				if x < c.Min[2] || x >= c.Max[2] {
					m.Pix[i] = code
				}
				i++
			}
		}
	}
}
