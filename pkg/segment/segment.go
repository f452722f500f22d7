package segment

import (
	"fmt"
	"strings"

	"sluice/pkg/filter"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Segment labels the core of a tile. grey covers the core plus a halo of at
// least p.Halo() voxels wherever the core is not at the edge of the scan (the
// grey box is the tile box grown by the halo and clipped to the scan); th
// are the step thresholds; solid is the reference mask (reference mode only,
// covering the same box as grey or at least core + Halo() − FilterHalo()).
// The result covers core and holds p.Codes and phase.Outside.
//
// Steps (each over a box that shrinks towards the core by the reach of the
// next step, see the package doc): filter; classify by thresholds, sample
// cylinder and reference mask; bounded hysteresis of the nonwetting phase;
// removal of small nonwetting islands.
func Segment(grey volume.Any, core volume.Box, th Thresholds, p Params, solid *volume.Labels) (*volume.Labels, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	order := presentOrder(p, th.Fluids())
	want := len(order) - 1
	if len(th.T) != want {
		return nil, fmt.Errorf("segment: %d thresholds given, want %d", len(th.T), want)
	}
	if want == 2 && !(th.T[0] < th.T[1]) {
		return nil, fmt.Errorf("segment: thresholds %v not ascending", th.T)
	}
	if grey == nil {
		return nil, fmt.Errorf("segment: nil grey volume")
	}
	gb := grey.Bounds()
	if core.Empty() || !gb.ContainsBox(core) {
		return nil, fmt.Errorf("segment: core %v is empty or not inside the grey volume %v", core, gb)
	}
	if p.PartialVolume.Blur > 0 && th.SolidGrey == 0 {
		return nil, fmt.Errorf("segment: partial-volume correction needs the solid grey in the thresholds")
	}
	isl := max(p.MinIsland-1, 0)
	steps := 0
	if p.Hysteresis.Band > 0 {
		steps = p.Hysteresis.Steps
	}
	if th.Fluids() != FluidsBoth {
		// One fluid: there is no other fluid to grow into or to turn
		// islands into.
		isl, steps = 0, 0
	}
	l2 := core.Grow(isl).Intersect(gb)
	l1 := l2.Grow(steps).Intersect(gb)
	// The watershed decides l1 from the classes over lw.
	ws := p.WatershedHalo()
	lw := l1.Grow(ws).Intersect(gb)
	// Each local-fluid pass needs the previous labels over its box grown by
	// the blur radius (local fluid grey) and its solid mask over that box
	// grown once more (blurred solid fraction): boxes[k] holds the labels of
	// pass k, boxes[0] those of the plain pass, boxes[passes] = lw.
	passes := p.PartialVolume.LocalFluid
	boxes := make([]volume.Box, passes+1)
	boxes[passes] = lw
	for k := passes - 1; k >= 0; k-- {
		boxes[k] = boxes[k+1].Grow(2 * p.PVHalo()).Intersect(gb)
	}
	l0 := boxes[0].Grow(p.PVHalo()).Intersect(gb)
	if p.Reference {
		if err := checkMask(solid, l0); err != nil {
			return nil, err
		}
	}
	c := classifier(p, th)
	var (
		lab  *volume.Labels
		g    *volume.Volume[float32]
		f    *volume.Volume[float32] // filtered grey (watershed)
		kind []uint8                 // hysteresis kinds, when the labelling gave them
		err  error
	)
	if p.PartialVolume.Blur == 0 && ws > 0 {
		// Plain pass for the watershed, which needs the filtered grey:
		// filter once, then classify the float32 grey.
		if f, err = filtered(grey, lw, p); err != nil {
			return nil, err
		}
		lab, g = classify(f, p, c, solid), f
	} else if p.PartialVolume.Blur == 0 {
		// Plain pass: l0 == l1; filter and classify row by row.
		if lab, g, kind, err = plainLabels(grey, l1, p, c, solid, steps > 0); err != nil {
			return nil, err
		}
	} else {
		if f, err = filtered(grey, l0, p); err != nil {
			return nil, err
		}
		if passes > 0 {
			// The corrected fluid grey is bimodal at μ_n and μ_w with the same
			// noise: split it at the midpoint (Ridler–Calvard's fixed point for
			// equal spreads) rather than at the 3-class Otsu threshold, which
			// the partial-volume voxels of the raw histogram pull aside.
			c.ft = (th.NonwettingGrey + th.WettingGrey) / 2
		}
		// Solid indicator of the plain pass over l0: the reference mask or
		// the solid class of the filtered grey.
		ind := volume.New[float32](l0, 0)
		i := 0
		for z := l0.Min[0]; z < l0.Max[0]; z++ {
			for y := l0.Min[1]; y < l0.Max[1]; y++ {
				for x := l0.Min[2]; x < l0.Max[2]; x++ {
					var isSolid bool
					if p.Reference {
						isSolid = solid.At(z, y, x) == p.Codes.Solid
					} else {
						isSolid = p.Sample.Inside(y, x) && c.codes[c.class(float64(f.Pix[i]))] == p.Codes.Solid
					}
					if isSolid {
						ind.Pix[i] = 1
					}
					i++
				}
			}
		}
		for k := 0; k <= passes; k++ {
			if k > 0 {
				if ind, err = localFluidSolid(f, lab, boxes[k].Grow(p.PVHalo()).Intersect(gb), th, p); err != nil {
					return nil, err
				}
			}
			if lab, g, err = pvLabels(f, ind, boxes[k], th, p, c, solid); err != nil {
				return nil, err
			}
		}
	}
	if ws > 0 {
		// Boxes inwards: the solid-layer pass on the threshold classes
		// (over lw) decides lp; the flood (pass 1 and, with the wall,
		// pass 2 over the box pass 1 decides) decides lf from lp; the
		// solid-layer pass on the flood's labels decides l1 from lf.
		reach := p.Watershed.Steps + 1
		layers := p.solidLayerPass() && len(c.codes) == 3 && !noSolidLayers
		lf, lp := l1, lw
		if layers {
			lf = l1.Grow(SolidLayerReach).Intersect(gb)
			lp = l1.Grow(ws - SolidLayerReach).Intersect(gb)
			lab = c.solidLayers(lab, f, lp, false)
		}
		p1 := lf.Grow(reach).Intersect(gb)
		if p.Watershed.Wall {
			lab = c.flood(lab, cropTo(f, lp), p1, p, false)
			lab = c.flood(lab, cropTo(f, p1), lf, p, true)
		} else {
			lab = c.flood(lab, cropTo(f, lp), lf, p, false)
		}
		if layers {
			lab = c.solidLayers(lab, cropTo(f, lf), l1, true)
		}
		if g != nil && steps > 0 {
			g = cropTo(g, l1)
		}
		kind = nil
	}
	lab.VoxelSize = grey.EdgeLength()
	if steps > 0 {
		if kind == nil {
			kind = c.kinds(lab, g)
		}
		c.grow(lab, kind, steps)
	}
	if isl > 0 {
		removeIslands(lab, l2, p.MinIsland, p.Codes)
	}
	if lab.Box == core {
		return lab, nil
	}
	return lab.Crop(core, 0), nil
}

// cropTo returns v cropped to box, or v itself when it covers box exactly.
func cropTo(v *volume.Volume[float32], box volume.Box) *volume.Volume[float32] {
	if v.Box == box {
		return v
	}
	return v.Crop(box, 0)
}

// classify labels the box of the filtered grey f by class, sample cylinder
// and reference mask, as plainLabels does.
func classify(f *volume.Volume[float32], p Params, c *classes, mask *volume.Labels) *volume.Labels {
	rl := &rowLabeller{p: p, c: c, mask: mask, out: f.Box, lab: volume.New[uint8](f.Box, f.VoxelSize)}
	rl.span = sampleSpans(p.Sample, f.Box)
	rl.floatLabels(f)
	return rl.lab
}

// maskCode is the label of a voxel the reference mask puts outside the pore
// space: phase.Outside or solid.
func maskCode(solid *volume.Labels, p Params, z, y, x int) uint8 {
	if solid.At(z, y, x) == phase.Outside {
		return phase.Outside
	}
	return p.Codes.Solid
}

// pvLabels labels box out with the partial-volume correction: ind is the
// solid indicator (1 solid, 0 not) over a box holding out grown by the blur
// radius (clipped to the scan); solid voxels of ind are labelled solid, the
// others take the fluid class of their corrected grey. It returns the labels
// and the corrected fluid grey over out.
func pvLabels(f, ind *volume.Volume[float32], out volume.Box, th Thresholds, p Params, c *classes, mask *volume.Labels) (*volume.Labels, *volume.Volume[float32], error) {
	b, err := filter.Gaussian(ind, out, p.PartialVolume.Blur, filter.DefaultTruncate)
	if err != nil {
		return nil, nil, err
	}
	g := f.Crop(out, 0)
	ms, bmax := float32(th.SolidGrey), float32(p.PartialVolume.MaxFraction)
	for i, v := range g.Pix {
		bf := min(b.Pix[i], bmax)
		g.Pix[i] = (v - ms*bf) / (1 - bf)
	}
	lab := volume.New[uint8](out, 0)
	i := 0
	for z := out.Min[0]; z < out.Max[0]; z++ {
		for y := out.Min[1]; y < out.Max[1]; y++ {
			for x := out.Min[2]; x < out.Max[2]; x++ {
				switch {
				case !p.Sample.Inside(y, x):
					lab.Pix[i] = phase.Outside
				case p.Reference && !poreMask(mask, p, z, y, x):
					lab.Pix[i] = maskCode(mask, p, z, y, x)
				case !p.Reference && ind.At(z, y, x) == 1:
					lab.Pix[i] = p.Codes.Solid
				default:
					lab.Pix[i] = c.fluid(float64(g.Pix[i]))
				}
				i++
			}
		}
	}
	return lab, g, nil
}

// localFluidSolid re-draws the solid mask over box out from the labels lab
// of the previous pass (covering out grown by the blur radius, clipped to the
// scan): with a_n and a_w the PSF-weighted amounts of nonwetting and wetting
// voxels around a voxel (its own label left out), the local fluid grey is
// m = (a_n·μ_n + a_w·μ_w)/(a_n + a_w), and the voxel is solid when its
// filtered grey lies nearer μ_s than m — the 50 % level of the blurred solid
// fraction in a local two-phase mixture v = b·μ_s + (1 − b)·m. Voxels with
// no fluid around them (a_n + a_w below 1e-3) keep the previous label.
func localFluidSolid(f *volume.Volume[float32], lab *volume.Labels, out volume.Box, th Thresholds, p Params) (*volume.Volume[float32], error) {
	cs := p.Codes
	nInd := volume.New[float32](lab.Box, 0)
	wInd := volume.New[float32](lab.Box, 0)
	for i, l := range lab.Pix {
		switch l {
		case cs.Nonwetting:
			nInd.Pix[i] = 1
		case cs.Wetting:
			wInd.Pix[i] = 1
		}
	}
	an, err := filter.Gaussian(nInd, out, p.PartialVolume.Blur, filter.DefaultTruncate)
	if err != nil {
		return nil, err
	}
	aw, err := filter.Gaussian(wInd, out, p.PartialVolume.Blur, filter.DefaultTruncate)
	if err != nil {
		return nil, err
	}
	k := filter.GaussianKernel(p.PartialVolume.Blur, filter.DefaultTruncate)
	w0 := float32(k[0] * k[0] * k[0])
	mn, mw, ms := float32(th.NonwettingGrey), float32(th.WettingGrey), float32(th.SolidGrey)
	ind := volume.New[float32](out, 0)
	i := 0
	for z := out.Min[0]; z < out.Max[0]; z++ {
		for y := out.Min[1]; y < out.Max[1]; y++ {
			for x := out.Min[2]; x < out.Max[2]; x++ {
				j := lab.Index(z, y, x)
				a, b := an.Pix[i]-w0*nInd.Pix[j], aw.Pix[i]-w0*wInd.Pix[j]
				v := f.At(z, y, x)
				switch {
				case lab.Pix[j] == phase.Outside:
				case a+b < 1e-3:
					if lab.Pix[j] == cs.Solid {
						ind.Pix[i] = 1
					}
				default:
					m := (a*mn + b*mw) / (a + b)
					if abs32(v-ms) < abs32(v-m) {
						ind.Pix[i] = 1
					}
				}
				i++
			}
		}
	}
	return ind, nil
}

func abs32(v float32) float32 {
	if v < 0 {
		return -v
	}
	return v
}

// classes maps grey values to phase codes.
type classes struct {
	t     []float64
	codes []uint8 // codes of the classes, darkest first
	// Fluid split on the corrected fluid grey: fluid voxels above ft are
	// fluidHi, the others fluidLo.
	ft               float64
	fluidLo, fluidHi uint8
	solid            uint8
	// Hysteresis: the nonwetting class bounds threshold tn; the nonwetting
	// side is v <= tn (darkSide) or v > tn; the class next to it is next.
	tn, band float64
	darkSide bool
	n, next  uint8
}

func classifier(p Params, th Thresholds) *classes {
	code := func(r byte) uint8 {
		switch r {
		case 'n':
			return p.Codes.Nonwetting
		case 'w':
			return p.Codes.Wetting
		}
		return p.Codes.Solid
	}
	order := presentOrder(p, th.Fluids())
	c := &classes{t: th.T, n: p.Codes.Nonwetting, band: p.Hysteresis.Band, solid: p.Codes.Solid}
	for i := 0; i < len(order); i++ {
		c.codes = append(c.codes, code(order[i]))
	}
	if f := strings.ReplaceAll(order, "s", ""); len(f) == 1 {
		// One fluid: every fluid voxel is that fluid; no hysteresis.
		c.fluidLo, c.fluidHi = code(f[0]), code(f[0])
		return c
	}
	switch {
	case p.Reference:
		c.ft, c.fluidLo, c.fluidHi = th.T[0], c.codes[0], c.codes[1]
	case order[2] == 's':
		c.ft, c.fluidLo, c.fluidHi = th.T[0], c.codes[0], c.codes[1]
	case order[0] == 's':
		c.ft, c.fluidLo, c.fluidHi = th.T[1], c.codes[1], c.codes[2]
	}
	if order[0] == 'n' {
		c.tn, c.darkSide, c.next = th.T[0], true, c.codes[1]
	} else if order[len(order)-1] == 'n' {
		c.tn, c.darkSide, c.next = th.T[len(th.T)-1], false, c.codes[len(order)-2]
	}
	return c
}

// class returns the index of the class of grey v.
func (c *classes) class(v float64) int {
	k := 0
	for _, t := range c.t {
		if v > t {
			k++
		}
	}
	return k
}

// fluid returns the fluid phase of corrected fluid grey g.
func (c *classes) fluid(g float64) uint8 {
	if g > c.ft {
		return c.fluidHi
	}
	return c.fluidLo
}

// Hysteresis kinds of voxels.
const (
	other = iota
	seed
	cand
)

// kindOf: seeds are nonwetting voxels beyond tn by more than band (strict);
// candidates are voxels of the nonwetting or the next class within band of
// tn (relaxed but not strict).
func (c *classes) kindOf(l uint8, strict, relaxed bool) uint8 {
	switch {
	case l != c.n && l != c.next:
		return other
	case strict && l == c.n:
		return seed
	case relaxed && !strict:
		return cand
	}
	return other
}

// kinds returns the hysteresis kind of every voxel of lab from the filtered
// grey f (same box).
func (c *classes) kinds(lab *volume.Labels, f *volume.Volume[float32]) []uint8 {
	kind := make([]uint8, len(lab.Pix))
	for i, l := range lab.Pix {
		if l != c.n && l != c.next {
			continue
		}
		v := float64(f.Pix[i])
		var strict, relaxed bool
		if c.darkSide {
			strict, relaxed = v <= c.tn-c.band, v <= c.tn+c.band
		} else {
			strict, relaxed = v > c.tn+c.band, v > c.tn-c.band
		}
		kind[i] = c.kindOf(l, strict, relaxed)
	}
	return kind
}

// grow is the hysteresis proper: candidates at most steps face moves from a
// seed through candidates become nonwetting; the other candidates become
// the next class.
//
// Breadth-first by layers from the candidates only: layer 1 holds the
// candidates with a seed among their face neighbours, layer d+1 the
// unreached candidates next to layer d, up to layer steps. Seeds are far
// more numerous than candidates and are never queued.
func (c *classes) grow(lab *volume.Labels, kind []uint8, steps int) {
	s := lab.Box.Size()
	nx, nyx := s[2], s[1]*s[2]
	// reached[i]: candidate i is at most steps moves from a seed.
	reached := make([]bool, len(kind))
	// visit calls f for each face neighbour of i inside the box.
	visit := func(i int, f func(j int)) {
		z, r := i/nyx, i%nyx
		y, x := r/nx, r%nx
		if x > 0 {
			f(i - 1)
		}
		if x+1 < nx {
			f(i + 1)
		}
		if y > 0 {
			f(i - nx)
		}
		if y+1 < s[1] {
			f(i + nx)
		}
		if z > 0 {
			f(i - nyx)
		}
		if z+1 < s[0] {
			f(i + nyx)
		}
	}
	var front, next []int32
	for i, k := range kind {
		if k != cand {
			continue
		}
		hit := false
		visit(i, func(j int) { hit = hit || kind[j] == seed })
		if hit {
			reached[i] = true
			front = append(front, int32(i))
		}
	}
	for layer := 1; layer < steps && len(front) > 0; layer++ {
		next = next[:0]
		for _, i := range front {
			visit(int(i), func(j int) {
				if kind[j] == cand && !reached[j] {
					reached[j] = true
					next = append(next, int32(j))
				}
			})
		}
		front, next = next, front
	}
	for i, k := range kind {
		if k != cand {
			continue
		}
		if reached[i] {
			lab.Pix[i] = c.n
		} else if lab.Pix[i] == c.n {
			lab.Pix[i] = c.next
		}
	}
}

// removeIslands relabels as wetting every 26-connected nonwetting component
// of lab restricted to box that has fewer than minSize voxels.
//
// Breadth-first search over box-local indices li = (z·NY + y)·NX + x, with
// lab's own strides for the label reads (no per-neighbour index arithmetic
// through the volume).
func removeIslands(lab *volume.Labels, box volume.Box, minSize int, codes phase.Codes) {
	s := box.Size()
	nyx := s[1] * s[2]
	ls := lab.Box.Size()
	lnx, lnyx := ls[2], ls[1]*ls[2]
	base := lab.Index(box.Min[0], box.Min[1], box.Min[2])
	// at(z, y, x) is the offset in lab.Pix of box-local voxel (z, y, x).
	at := func(z, y, x int) int { return base + z*lnyx + y*lnx + x }
	nw := codes.Nonwetting
	seen := make([]bool, box.Voxels())
	var comp []int32
	li := 0
	for z := 0; z < s[0]; z++ {
		for y := 0; y < s[1]; y++ {
			row := lab.Pix[at(z, y, 0):][:s[2]]
			for x, l := range row {
				li = (z*s[1]+y)*s[2] + x
				if l != nw || seen[li] {
					continue
				}
				seen[li] = true
				comp = append(comp[:0], int32(li))
				for head := 0; head < len(comp); head++ {
					j := int(comp[head])
					cz, r := j/nyx, j%nyx
					cy, cx := r/s[2], r%s[2]
					z0, z1 := max(cz-1, 0), min(cz+1, s[0]-1)
					y0, y1 := max(cy-1, 0), min(cy+1, s[1]-1)
					x0, x1 := max(cx-1, 0), min(cx+1, s[2]-1)
					for zz := z0; zz <= z1; zz++ {
						for yy := y0; yy <= y1; yy++ {
							k0 := (zz*s[1]+yy)*s[2] + x0
							lrow := lab.Pix[at(zz, yy, x0):][:x1-x0+1]
							sr := seen[k0:][:x1-x0+1]
							for dx, v := range lrow {
								if v == nw && !sr[dx] {
									sr[dx] = true
									comp = append(comp, int32(k0+dx))
								}
							}
						}
					}
				}
				if len(comp) < minSize {
					for _, j := range comp {
						j := int(j)
						cz, r := j/nyx, j%nyx
						lab.Pix[at(cz, r/s[2], r%s[2])] = codes.Wetting
					}
				}
			}
		}
	}
}
