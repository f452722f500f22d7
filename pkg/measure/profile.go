package measure

import (
	"fmt"
	"math"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// The saturation profile along the flow axis.
//
// Every tile counts, per global slice index along the flow axis (a slice is
// one voxel thick, normal to the axis), its wetting, nonwetting and
// in-sample voxels (everything but phase.Outside). The counts of the tiles
// add, so the profile is exactly the same whatever the tiling. Combine
// coarsens the slices into at most MaxProfileBins bins of whole slices:
// with n slices the bin width is ceil(n/MaxProfileBins) slices and the last
// bin holds what is left (it may be thinner). Per bin:
//
//	S_n = n / (n + w)          (pore voxels only; null without pore)
//	φ   = (n + w) / inside     (null when the bin lies outside the sample)
//
// Positions are distances from the inlet face (the low end of the flow
// axis, campaign flow_axis) in metres: a bin covering slices [a, b) has
// its centre at (a+b)/2 · h.
//
// Front position (our definition): the far edge, measured from the inlet
// face, of the farthest bin whose S_n exceeds the front threshold
// (Options.FrontThreshold, default DefaultFrontThreshold). A sharp front
// with nonwetting in slices [0, k) and bins of one slice gives exactly k·h.
// Null when no bin exceeds the threshold. The front velocity between two
// steps is the change of the front position over the change of step time
// (pkg/series).

// MaxProfileBins is the largest number of bins of the saturation profile.
const MaxProfileBins = 256

// DefaultFrontThreshold is the S_n a bin must exceed to count as invaded.
const DefaultFrontThreshold = 0.05

// ProfilePartial holds the per-slice voxel counts of one tile (or of the
// sum of several) along the flow axis: index i is global slice Start+i.
type ProfilePartial struct {
	Axis       int     `json:"axis"`
	Start      int     `json:"start"`
	Wetting    []int64 `json:"wetting"`
	Nonwetting []int64 `json:"nonwetting"`
	Inside     []int64 `json:"inside"`
}

// measureProfile counts the core's voxels per slice along axis.
func measureProfile(lab *volume.Labels, core volume.Box, axis int, wet, non *phase.Set) *ProfilePartial {
	n := core.Max[axis] - core.Min[axis]
	p := &ProfilePartial{Axis: axis, Start: core.Min[axis], Wetting: make([]int64, n), Nonwetting: make([]int64, n), Inside: make([]int64, n)}
	// class: 0 outside the sample, 1 solid, 2 wetting, 3 nonwetting.
	var class [256]uint8
	for v := range class {
		switch {
		case uint8(v) == phase.Outside:
		case wet[v]:
			class[v] = 2
		case non[v]:
			class[v] = 3
		default:
			class[v] = 1
		}
	}
	var c [4][]int64
	c[1], c[2], c[3] = p.Inside, p.Wetting, p.Nonwetting
	for z := core.Min[0]; z < core.Max[0]; z++ {
		for y := core.Min[1]; y < core.Max[1]; y++ {
			row := lab.Pix[lab.Index(z, y, core.Min[2]):][:core.Max[2]-core.Min[2]]
			if axis == 2 {
				for i, v := range row {
					k := class[v]
					if k != 0 {
						p.Inside[i]++
						if k >= 2 {
							c[k][i]++
						}
					}
				}
				continue
			}
			var k [4]int64
			for _, v := range row {
				k[class[v]]++
			}
			s := z - p.Start
			if axis == 1 {
				s = y - p.Start
			}
			p.Inside[s] += k[1] + k[2] + k[3]
			p.Wetting[s] += k[2]
			p.Nonwetting[s] += k[3]
		}
	}
	return p
}

// Add adds q's counts, growing p's slice range to cover q's.
func (p *ProfilePartial) Add(q *ProfilePartial) {
	if len(p.Inside) == 0 && len(p.Wetting) == 0 {
		p.Axis, p.Start = q.Axis, q.Start
	}
	lo, hi := min(p.Start, q.Start), max(p.Start+len(p.Inside), q.Start+len(q.Inside))
	if lo != p.Start || hi != p.Start+len(p.Inside) {
		grow := func(a []int64) []int64 {
			b := make([]int64, hi-lo)
			copy(b[p.Start-lo:], a)
			return b
		}
		p.Wetting, p.Nonwetting, p.Inside = grow(p.Wetting), grow(p.Nonwetting), grow(p.Inside)
		p.Start = lo
	}
	o := q.Start - p.Start
	for i := range q.Inside {
		p.Wetting[o+i] += q.Wetting[i]
		p.Nonwetting[o+i] += q.Nonwetting[i]
		p.Inside[o+i] += q.Inside[i]
	}
}

// Profile is the saturation profile of a step along the flow axis (see the
// package comment of profile.go for the definitions).
type Profile struct {
	// Axis is the flow axis (z, y or x); the inlet is at its low end.
	Axis string `json:"axis"`
	// Slices is the number of voxel slices along the axis, BinSlices the
	// slices per bin (the last bin may hold fewer), BinWidth that in m.
	Slices    int     `json:"slices"`
	BinSlices int     `json:"bin_slices"`
	BinWidth  float64 `json:"bin_width_m"`
	// Position is the centre of each bin, from the inlet face (m).
	Position []float64 `json:"position_m"`
	// SatNonwetting and Porosity per bin; null where not computable.
	SatNonwetting []*float64 `json:"saturation_nonwetting"`
	Porosity      []*float64 `json:"porosity"`
	// FrontThreshold is the S_n a bin must exceed to count for the front.
	FrontThreshold float64 `json:"front_threshold"`
}

// finishProfile bins the summed counts of the whole scan and returns the
// profile and the front position (nil when there is no front).
func finishProfile(p *ProfilePartial, whole volume.Box, h float64, opt Options) (*Profile, *float64, error) {
	a := opt.FlowAxis
	n := whole.Max[a] - whole.Min[a]
	if p == nil {
		return nil, nil, nil
	}
	if p.Axis != a || p.Start != whole.Min[a] || len(p.Inside) != n || len(p.Wetting) != n || len(p.Nonwetting) != n {
		return nil, nil, fmt.Errorf("measure: saturation-profile counts cover slices %d..%d of axis %d, the scan has %d..%d of axis %d",
			p.Start, p.Start+len(p.Inside), p.Axis, whole.Min[a], whole.Max[a], a)
	}
	thr := opt.frontThreshold()
	width := (n + MaxProfileBins - 1) / MaxProfileBins
	pr := &Profile{Axis: [3]string{"z", "y", "x"}[a], Slices: n, BinSlices: width, BinWidth: float64(width) * h, FrontThreshold: thr}
	var front *float64
	for lo := 0; lo < n; lo += width {
		hi := min(lo+width, n)
		var w, nw, in int64
		for i := lo; i < hi; i++ {
			w += p.Wetting[i]
			nw += p.Nonwetting[i]
			in += p.Inside[i]
		}
		pr.Position = append(pr.Position, float64(lo+hi)/2*h)
		s := ratio(float64(nw), float64(nw+w))
		pr.SatNonwetting = append(pr.SatNonwetting, s)
		pr.Porosity = append(pr.Porosity, ratio(float64(nw+w), float64(in)))
		if s != nil && *s > thr {
			front = ptr(float64(hi) * h)
		}
	}
	return pr, front, nil
}

func (o Options) frontThreshold() float64 {
	if o.FrontThreshold == 0 {
		return DefaultFrontThreshold
	}
	return o.FrontThreshold
}

func validFrontThreshold(t float64) error {
	if math.IsNaN(t) || t < 0 || t >= 1 {
		return fmt.Errorf("measure: front threshold must be in [0, 1) (0 = default %g), not %g", DefaultFrontThreshold, t)
	}
	return nil
}
