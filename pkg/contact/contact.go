// Package contact measures the in-situ contact angle at the three-phase
// contact line of a segmented image, through the wetting phase, as a
// distribution over sample points of the line.
//
// # Definition
//
// With n_s the unit normal of the solid surface pointing into the pore space
// and n_f the unit normal of the wetting–nonwetting interface pointing out of
// the wetting phase, both taken where the interface meets the solid, the
// contact angle through the wetting phase is θ = arccos(n_f·n_s)
// (science.md §4; the same construction underlies AlRatrout et al. 2017, Adv.
// Water Resour. 109:158, and Scanziani et al. 2017, J. Colloid Interface Sci.
// 496:51). θ → 0 when wetting phase spreads on the wall (n_f → n_s).
//
// # Why not the gradient at the wall
//
// The gradient of a smoothed indicator at the contact line mixes the solid
// into the fluid normal: science.md records 130° (or 50°) for a 110° cap with
// plain smoothing and 99.7…105.3° with a pore-normalised convolution in the
// first three voxels from the wall, while the true normal turns only ~2° per
// voxel there. Any kernel that reaches across the wall is biased, so this
// package smooths nothing on the fluid side.
//
// # Our estimator: a local quadric fit carried to the wall
//
// Sample points are the nonwetting voxels of the core that touch the solid
// (a solid face-neighbour) and have, among their 26 neighbours, a wetting
// voxel that touches the solid too: the boundary on the wall between the
// part wetted by each fluid, i.e. the digital contact line. (Merely having a
// wetting neighbour would also take the inside of a one-voxel nonwetting
// film, away from the line.) For each sample p (our own derivation, in the spirit of the circle/quadric
// fits cited above; the digital-surface points and the area weighting are
// ours):
//
//  1. Solid normal: n_s = −∇(G_σs∗χ_solid)(p)/|…|, the Gaussian-derivative
//     gradient of the solid indicator (levelset.GradientAt, σs = SolidSigma).
//     By the divergence theorem this is the Gaussian-weighted mean of the
//     solid's digital surface normals, accurate to a fraction of a degree on
//     planes at any tilt.
//  2. Interface points: every voxel face separating a wetting from a
//     nonwetting voxel within Radius of p, at the face centre q, with the
//     axis normal e pointing from wetting to nonwetting. The faces of the
//     raw labels are an unbiased, unsmoothed sampling of the interface;
//     their staircase scatter (±½ voxel) averages out in a least-squares
//     fit. Wall points likewise: faces between solid and pore voxels.
//  3. Frame: e_w = Σ τ e / |…| over the interface faces (the area vector of
//     the digital interface patch, a first normal), e_η ∝ n_s × e_w along
//     the contact line, e_ξ = e_η × e_w, with taper τ = (1 − |q|²/R²)².
//  4. Fit the interface as a graph w = c0 + c1 ξ + c2 η + c3 ξ² + c4 ξη +
//     c5 η² by weighted least squares over the slab |η| < LineHalfWidth
//     about the plane normal to the contact line (weights (1 − ρ)²|e·e_w|
//     with ρ = (ξ² + w²)/R² + η²/LineHalfWidth², each face standing for its
//     projected area); the η terms absorb the curvature of the contact line
//     itself. The wall is the plane n_s·x = d with d the weighted mean of
//     n_s·q over wall faces (weights τ|e·n_s|).
//  5. Carry the fitted interface to the wall: in the plane normal to the
//     contact line through p (η = 0) solve n_s·(ξ e_ξ + w(ξ,0) e_w) = d for
//     the root ξ* nearest p. The fitted normal there is
//     n_f ∝ e_w − w_ξ e_ξ − w_η e_η (w_ξ = c1 + 2c3ξ*, w_η = c2 + c4ξ*),
//     and θ = arccos(n_f·n_s).
//
// Interface points a few voxels from the wall thus fix the shape, and the
// quadric carries the normal to the wall, as science.md §4 asks.
//
// # Digitisation error and the fit radius
//
// The error of one sample is dominated by how the fit window cuts the voxel
// staircase of the interface, not by smoothing. We tried (tests, R = 22
// caps, 30…150°): radius 6 gave mean errors up to 4° on caps but up to 17°
// on a wedge whose contact line runs along a lattice axis (a single staircase
// repeated along the line, so nothing averages); smoothing the face centres
// first (Gaussian or local-linear, σ = 0.7…1.5) traded one bias for another.
// Radius 12 with the slab brings tilted wedges within 2° and lattice-aligned
// lines within about 5.5°. Over caps of R = 20 and 25 placed at six sub-voxel
// positions the mean errors were −4.1…+2.1° for 30…120° and −0.6…+7.4° for
// 150°; part of that is the scene itself: a wall plane at z = 7.2 or 7.9
// digitises like one at 7.5, which moves the true angle by up to ~2°. The
// 150° caps are thin (height 0.13 R), so the window spans most of the cap
// and the quadric's missing fourth-order terms tilt the rim normal. Adding
// a ξ³ term or a general implicit quadric (w², ξw, ηw) made things worse.
// Pores narrower than the fit window bring other interfaces and grains
// into it: use a smaller Radius for such images and expect larger errors.
//
// # Grey scans: the first layer on the wall
//
// On labels segmented from a blurred grey scan the first voxel layers on
// the wall are the least reliable part of the interface: there the point
// spread mixes all three phases, and whichever phase the segmentation gives
// those voxels tilts the fit (one nonwetting voxel less at the line in the
// first layer moved a sample by 12–18° on a 120° cap). Options.WallGap
// leaves the interface faces within that distance of the fitted wall plane
// out of the quadric fit, which then carries the interface from farther out
// to the wall. Measured 2026-12-05 on the forward-model caps of
// pkg/segment (R 28, PSF σ 0.7, CNR 5, median filter, watershed
// assignment), mean grey − mean labels:
//
//	cap      gap 0     gap 2    gap 3    gap 4
//	 60°    −10.3°    −4.7°    −0.9°    −0.1°
//	 90°    −23.9°    −2.6°    −0.1°    −2.0°
//	120°    −29.0°    −4.6°    −3.5°    −4.5°
//
// The price: fewer faces, so a wider spread per sample (labels of the 60°
// cap: sd 2.4° → 7.5° at gap 3), and where the interface lies within the
// gap over the whole window — angles near 0° or 180°, thin caps — no sample
// is left (the 150° analytic cap) or the fit is poor (wedges of 30° and
// 150° on tilted walls: errors up to 12°). So the gap is off by default
// and is the campaign's choice (measure.contact_wall_gap, 3 recommended for
// grey-segmented scans with angles between about 45° and 135°).
//
// Samples
// whose fit is under-determined (fewer than MinFaces interface faces, no
// wall faces, singular system, no crossing with the wall within Radius) are
// skipped.
//
// # Thinning
//
// Neighbouring line voxels share most of their fit faces, so their angles
// are strongly correlated and fitting every one buys little. Measure keeps
// at most one sample per cell of a fixed global lattice of 2×2×2 voxel
// cells (cells start at even coordinates): the first line voxel of the cell
// in z, y, x order. Kept samples are thus about two voxels apart along the
// line (two may still be face neighbours across a cell boundary), and which
// ones are kept depends only on the labels and global coordinates, not on
// the tiling or the order of the work. Options.AllLineVoxels keeps every
// line voxel. The tests hold the change of mean, median and standard
// deviation to below 0.5° on the cap, wedge and tube checks; Partial.N and
// Partial.Line count the thinned samples.
//
// # Tiles
//
// A sample's angle depends only on labels within Halo() of it, gathered in a
// fixed order relative to the sample, so a tile with that halo computes
// bit-identical angles for the samples its core owns; N and Hist add
// exactly, Sum and SumSq to rounding.
//
// # Uncertainty
//
// Partial.Blocks holds the count and the sum of angles per block of
// package blockse, by the sample's voxel; blockse.Ratio gives the
// standard error of the mean angle from the spread between blocks (batch
// means in space, with one blocking step to twice the edge;
// docs/capillary-pressure-uncertainty.md).
//
// # Cost
//
// The faces of the tile (plus Radius) are listed once, per row and in
// increasing x, split into interface faces and wall faces per axis; a
// sample visits only the rows its ball crosses and binary-searches the
// first face inside it. The wall enters the fit only through two sums,
// Σ τ|e·n_s| and Σ τ|e·n_s| n_s·q, which follow from per-axis sums of τ
// and τq, so wall faces are never stored. Samples are independent and are
// fitted on Options.Workers goroutines; their angles are summed in voxel
// order, so the partial does not depend on the number of workers.
package contact

import (
	"math"
	"runtime"
	"sync"
	"sync/atomic"

	"sluice/pkg/blockse"
	"sluice/pkg/levelset"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Options sets the fit neighbourhood and the solid-normal smoothing.
type Options struct {
	// Radius of the fit neighbourhood in voxels (default 12).
	Radius float64 `json:"radius"`
	// LineHalfWidth is the half-thickness (voxels) of the slab about the
	// plane normal to the contact line that the fit uses (default 3).
	LineHalfWidth float64 `json:"line_half_width"`
	// SolidSigma is the Gaussian σ (voxels) of the solid normal
	// (default 2).
	SolidSigma float64 `json:"solid_sigma"`
	// MinFaces is the fewest interface faces a fit accepts (default 12).
	MinFaces int `json:"min_faces"`
	// WallGap (voxels, default 0 = off): interface faces nearer the fitted
	// wall plane than this are left out of the fit, which then carries the
	// interface from farther out to the wall (see the package doc, "Grey
	// scans: the first layer on the wall"). 3 suits scans segmented from
	// grey with angles of about 45…135°; near 0° or 180° it leaves too few
	// faces.
	WallGap float64 `json:"wall_gap,omitempty"`
	// AllLineVoxels makes every contact-line voxel a sample. Off (the
	// default), samples are thinned to at most one per cell of a global
	// lattice of 2×2×2 cells (see the package doc, "Thinning"); the
	// unthinned set is for checks of the thinning.
	AllLineVoxels bool `json:"-"`
	// Workers is the number of goroutines Measure fits samples on
	// (0 = runtime.GOMAXPROCS). The result does not depend on it.
	Workers int `json:"-"`
}

// Defaults.
const (
	DefaultRadius     = 12.0
	DefaultHalfWidth  = 3.0
	DefaultSolidSigma = 2.0
	DefaultMinFaces   = 12
)

// Histogram layout: HistBins bins of 0.1° over [0°, 180°].
const HistBins = 1800

func (o Options) norm() Options {
	if o.Radius <= 0 {
		o.Radius = DefaultRadius
	}
	if o.LineHalfWidth <= 0 {
		o.LineHalfWidth = DefaultHalfWidth
	}
	if o.SolidSigma <= 0 {
		o.SolidSigma = DefaultSolidSigma
	}
	if o.MinFaces <= 0 {
		o.MinFaces = DefaultMinFaces
	}
	return o
}

// Halo returns the halo a tile needs: the fit neighbourhood plus the face
// partner, or the solid kernel radius, whichever is wider.
func (o Options) Halo() int {
	o = o.norm()
	return max(int(math.Ceil(o.Radius))+1, levelset.Radius(o.SolidSigma))
}

// Partial is one tile's contribution; partials add. Angles are in degrees.
type Partial struct {
	N     int64   `json:"n"`
	Sum   float64 `json:"sum"`
	SumSq float64 `json:"sum_sq"`
	// Hist counts samples per 0.1° bin over [0°, 180°] (bin i holds
	// [i/10, (i+1)/10), 180° goes to the last bin); nil when empty.
	Hist []int64 `json:"hist,omitempty"`
	// Line counts the contact-line sample points found, fitted or not, and
	// NonwettingOnSolid the nonwetting voxels with a solid face-neighbour:
	// with N they say why a step has no angle (no nonwetting on the solid,
	// no line, or a line whose points could not be fitted).
	Line              int64 `json:"line,omitempty"`
	NonwettingOnSolid int64 `json:"nonwetting_on_solid,omitempty"`
	// Blocks holds the sample count and the sum of angles per block of
	// the fixed lattice of package blockse, by the sample's voxel: the
	// standard error of the mean angle (package doc, "Uncertainty").
	// Absent in results written before it existed.
	Blocks blockse.Sums `json:"blocks,omitempty"`
}

// Measure returns the angles at the contact-line samples owned by core
// (clipped to lab.Box). lab must cover core plus Halo() voxels on every
// side, clipped to the scan. The samples are fitted on opt.Workers
// goroutines and summed in voxel order, so the result does not depend on
// the worker count.
func Measure(lab *volume.Labels, solid, wetting, nonwetting *phase.Set, core volume.Box, opt Options) Partial {
	opt = opt.norm()
	var p Partial
	core = core.Intersect(lab.Box)
	if core.Empty() {
		return p
	}
	f := newFitter(lab, solid, wetting, nonwetting, opt)
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	f.classify(core.Grow(int(math.Ceil(opt.Radius))), workers)
	samples, onSolid := f.line(core, !opt.AllLineVoxels)
	p.Line, p.NonwettingOnSolid = int64(len(samples)), onSolid
	if len(samples) == 0 {
		return p
	}
	angles := make([]float64, len(samples))
	ok := make([]bool, len(samples))
	const chunk = 16
	var next atomic.Int64
	var wg sync.WaitGroup
	for w := 0; w < min(workers, (len(samples)+chunk-1)/chunk); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			g := f.clone()
			for {
				a := int(next.Add(chunk)) - chunk
				if a >= len(samples) {
					return
				}
				for i := a; i < min(a+chunk, len(samples)); i++ {
					angles[i], ok[i] = g.angle(samples[i])
				}
			}
		}()
	}
	wg.Wait()
	blocks := blockse.Acc{}
	for i, th := range angles {
		if ok[i] {
			p.addAngle(th)
			q := samples[i]
			blocks.Add(blockse.KeyOf(q[0], q[1], q[2]), 1, th)
		}
	}
	p.Blocks = blocks.Sums()
	return p
}

// Angle returns the contact angle (degrees, through the wetting phase) at
// the contact-line voxel p, or false when p is not on the line or its fit is
// under-determined.
func Angle(lab *volume.Labels, solid, wetting, nonwetting *phase.Set, p [3]int, opt Options) (float64, bool) {
	f := newFitter(lab, solid, wetting, nonwetting, opt.norm())
	at := volume.Box{Min: p, Max: [3]int{p[0] + 1, p[1] + 1, p[2] + 1}}
	if line, _ := f.line(at, false); !lab.Box.Contains(p[0], p[1], p[2]) || len(line) == 0 {
		return 0, false
	}
	f.classify(at.Grow(int(math.Ceil(f.opt.Radius))), 1)
	return f.angle(p)
}

func (p *Partial) addAngle(th float64) {
	p.N++
	p.Sum += th
	p.SumSq += th * th
	if p.Hist == nil {
		p.Hist = make([]int64, HistBins)
	}
	p.Hist[min(max(int(th*10), 0), HistBins-1)]++
}

// Phase classes of a label, for the face and contact-line tables.
const (
	classOther = iota // outside the sample or not in any set
	classWet
	classNon
	classSolid
)

type fitter struct {
	lab                   *volume.Labels
	solid, wet, non, pore *phase.Set
	opt                   Options
	class                 [256]uint8 // label → class
	faces                 []face     // scratch, reused between samples
	grad                  *levelset.GradientKernel
	// box is the classified box; planes[z − box.Min[0]] lists its faces.
	box    volume.Box
	planes []facePlane
}

// facePlane lists the faces of one z plane row by row (j = y − box.Min[1]),
// each list in increasing x (global x of the voxel owning the face, i.e.
// the face between it and its +axis neighbour).
//
// Interface (wetting–nonwetting) faces: entries iStart[j] … iStart[j+1]−1
// of iX and iCode. A code holds 3 bits per axis (z: bits 0–2, y: 3–5, x:
// 6–8, i.e. axis ax of [z, y, x] uses bits 3·ax…3·ax+2): facePresent and
// faceNeg (the normal, wetting → nonwetting, points along −axis).
//
// Wall (solid–pore) faces normal to axis a: entries wStart[a][j] …
// wStart[a][j+1]−1 of wX[a]; their orientation does not enter the fit.
type facePlane struct {
	iStart []int32
	iX     []int32
	iCode  []uint16
	wStart [3][]int32
	wX     [3][]int32
}

func newFitter(lab *volume.Labels, solid, wet, non *phase.Set, opt Options) *fitter {
	f := &fitter{lab: lab, solid: solid, wet: wet, non: non, pore: levelset.Union(wet, non), opt: opt,
		grad: levelset.NewGradientKernel(opt.SolidSigma)}
	for v := range f.class {
		switch {
		case wet[v]:
			f.class[v] = classWet
		case non[v]:
			f.class[v] = classNon
		case solid[v]:
			f.class[v] = classSolid
		}
	}
	return f
}

// clone returns a fitter sharing the read-only tables with its own scratch.
func (f *fitter) clone() *fitter {
	g := *f
	g.faces = nil
	return &g
}

// Face code bits, per axis.
const (
	facePresent = 1
	faceWall    = 2
	faceNeg     = 4
)

// faceTable[ca*4+cb] is the 3-bit face code between a voxel of class ca and
// its +axis neighbour of class cb. The classes are exclusive in the order
// wetting, nonwetting, solid, matching the set tests of the definition.
var faceTable = func() (t [16]uint16) {
	for ca := 0; ca < 4; ca++ {
		for cb := 0; cb < 4; cb++ {
			pa, pb := ca == classWet || ca == classNon, cb == classWet || cb == classNon
			var v uint16
			switch {
			case ca == classWet && cb == classNon:
				v = facePresent
			case ca == classNon && cb == classWet:
				v = facePresent | faceNeg
			case ca == classSolid && pb:
				v = facePresent | faceWall
			case pa && cb == classSolid:
				v = facePresent | faceWall | faceNeg
			}
			t[ca*4+cb] = v
		}
	}
	return t
}()

// classify lists the faces of box ∩ lab.Box, one z plane per task on
// `workers` goroutines.
func (f *fitter) classify(box volume.Box, workers int) {
	lab := f.lab
	box = box.Intersect(lab.Box)
	f.box = box
	n := box.Size()
	f.planes = make([]facePlane, n[0])
	s := lab.Box.Size()
	strides := [3]int{s[1] * s[2], s[2], 1}
	plane := func(z int) {
		fp := &f.planes[z-box.Min[0]]
		fp.iStart = make([]int32, n[1]+1)
		for a := range fp.wStart {
			fp.wStart[a] = make([]int32, n[1]+1)
		}
		hasZ := z+1 < lab.Box.Max[0]
		for y := box.Min[1]; y < box.Max[1]; y++ {
			jr := y - box.Min[1]
			fp.iStart[jr] = int32(len(fp.iX))
			for a := range fp.wStart {
				fp.wStart[a][jr] = int32(len(fp.wX[a]))
			}
			hasY := y+1 < lab.Box.Max[1]
			j := lab.Index(z, y, box.Min[2])
			for x := box.Min[2]; x < box.Max[2]; x, j = x+1, j+1 {
				ca := uint16(f.class[lab.Pix[j]]) * 4
				var c [3]uint16
				if hasZ {
					c[0] = faceTable[ca+uint16(f.class[lab.Pix[j+strides[0]]])]
				}
				if hasY {
					c[1] = faceTable[ca+uint16(f.class[lab.Pix[j+strides[1]]])]
				}
				if x+1 < lab.Box.Max[2] {
					c[2] = faceTable[ca+uint16(f.class[lab.Pix[j+1]])]
				}
				if c == [3]uint16{} {
					continue
				}
				var code uint16
				for a, v := range c {
					switch {
					case v == 0:
					case v&faceWall != 0:
						fp.wX[a] = append(fp.wX[a], int32(x))
					default:
						code |= v << (3 * a)
					}
				}
				if code != 0 {
					fp.iX = append(fp.iX, int32(x))
					fp.iCode = append(fp.iCode, code)
				}
			}
		}
		fp.iStart[n[1]] = int32(len(fp.iX))
		for a := range fp.wStart {
			fp.wStart[a][n[1]] = int32(len(fp.wX[a]))
		}
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	for w := 0; w < max(1, min(workers, n[0])); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				k := int(next.Add(1)) - 1
				if k >= n[0] {
					return
				}
				plane(box.Min[0] + k)
			}
		}()
	}
	wg.Wait()
}

// line returns the contact-line voxels in box ∩ lab.Box in z, y, x
// order: the nonwetting voxels that touch the solid (a solid
// face-neighbour) and have among their 26 neighbours a wetting voxel that
// touches the solid too. The second condition keeps the boundary between
// the wetting-covered and nonwetting-covered parts of the wall and drops
// the inside of a one-voxel nonwetting film (solid below, wetting above),
// which lies away from the line. It also returns how many nonwetting
// voxels of box touch the solid.
//
// With thin, only the line voxel of smallest thinRank of each cell of the
// global lattice of 2×2×2 cells (cells start at even coordinates) is
// returned; the line is then evaluated on box widened to whole cells, so
// the choice depends on global coordinates only, never on the tiling.
func (f *fitter) line(box volume.Box, thin bool) ([][3]int, int64) {
	lab := f.lab
	box = box.Intersect(lab.Box)
	if box.Empty() {
		return nil, 0
	}
	ext := box
	if thin {
		for a := 0; a < 3; a++ {
			ext.Min[a] = floorDiv(box.Min[a], thinCell) * thinCell
			ext.Max[a] = (floorDiv(box.Max[a]-1, thinCell) + 1) * thinCell
		}
		ext = ext.Intersect(lab.Box)
	}
	// touch marks, on ext grown by one, the voxels touching the solid whose
	// class is wetting or nonwetting (the only ones asked about).
	tb := ext.Grow(1).Intersect(lab.Box)
	ts := tb.Size()
	touch := make([]uint8, tb.Voxels())
	s := lab.Box.Size()
	sz, sy := s[1]*s[2], s[2]
	i := 0
	for z := tb.Min[0]; z < tb.Max[0]; z++ {
		for y := tb.Min[1]; y < tb.Max[1]; y++ {
			j := lab.Index(z, y, tb.Min[2])
			for x := tb.Min[2]; x < tb.Max[2]; x, i, j = x+1, i+1, j+1 {
				c := f.class[lab.Pix[j]]
				if c != classWet && c != classNon {
					continue
				}
				if (x > lab.Box.Min[2] && f.solid[lab.Pix[j-1]]) || (x+1 < lab.Box.Max[2] && f.solid[lab.Pix[j+1]]) ||
					(y > lab.Box.Min[1] && f.solid[lab.Pix[j-sy]]) || (y+1 < lab.Box.Max[1] && f.solid[lab.Pix[j+sy]]) ||
					(z > lab.Box.Min[0] && f.solid[lab.Pix[j-sz]]) || (z+1 < lab.Box.Max[0] && f.solid[lab.Pix[j+sz]]) {
					touch[i] = c
				}
			}
		}
	}
	// isLine marks the line voxels of ext; with thin, best holds per
	// lattice cell of ext the smallest rank of its line voxels.
	var cells, cell0 [3]int
	for a := 0; a < 3; a++ {
		cell0[a] = floorDiv(ext.Min[a], thinCell)
		cells[a] = floorDiv(ext.Max[a]-1, thinCell) - cell0[a] + 1
	}
	cellOf := func(z, y, x int) int {
		return ((floorDiv(z, thinCell)-cell0[0])*cells[1]+floorDiv(y, thinCell)-cell0[1])*cells[2] + floorDiv(x, thinCell) - cell0[2]
	}
	var best []uint64
	if thin {
		best = make([]uint64, cells[0]*cells[1]*cells[2])
		for k := range best {
			best[k] = math.MaxUint64
		}
	}
	es := ext.Size()
	isLine := make([]bool, ext.Voxels())
	var onSolid int64
	var n int
	tsz, tsy := ts[1]*ts[2], ts[2]
	k := 0
	for z := ext.Min[0]; z < ext.Max[0]; z++ {
		for y := ext.Min[1]; y < ext.Max[1]; y++ {
			i := ((z-tb.Min[0])*ts[1]+(y-tb.Min[1]))*ts[2] + ext.Min[2] - tb.Min[2]
			for x := ext.Min[2]; x < ext.Max[2]; x, i, k = x+1, i+1, k+1 {
				if touch[i] != classNon {
					continue
				}
				inBox := box.Contains(z, y, x)
				if inBox {
					onSolid++
				}
				found := false
				for dz := max(z-1, tb.Min[0]) - z; dz <= min(z+1, tb.Max[0]-1)-z && !found; dz++ {
					for dy := max(y-1, tb.Min[1]) - y; dy <= min(y+1, tb.Max[1]-1)-y && !found; dy++ {
						for dx := max(x-1, tb.Min[2]) - x; dx <= min(x+1, tb.Max[2]-1)-x; dx++ {
							if touch[i+dz*tsz+dy*tsy+dx] == classWet {
								found = true
								break
							}
						}
					}
				}
				if !found {
					continue
				}
				isLine[k] = true
				if thin {
					c := cellOf(z, y, x)
					best[c] = min(best[c], thinRank(z, y, x))
				} else if inBox {
					n++
				}
			}
		}
	}
	out := make([][3]int, 0, n)
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			k := ((z-ext.Min[0])*es[1]+(y-ext.Min[1]))*es[2] + box.Min[2] - ext.Min[2]
			for x := box.Min[2]; x < box.Max[2]; x, k = x+1, k+1 {
				if isLine[k] && (!thin || best[cellOf(z, y, x)] == thinRank(z, y, x)) {
					out = append(out, [3]int{z, y, x})
				}
			}
		}
	}
	return out, onSolid
}

// thinCell is the edge (voxels) of the global lattice cells that hold at
// most one sample each (Options.AllLineVoxels off).
const thinCell = 2

// thinRank orders the line voxels of a lattice cell: the one of smallest
// rank is the cell's sample. A mix of the global coordinates (SplitMix64's
// finaliser, Steele, Lea & Flood 2014) rather than z, y, x order, so which
// voxel of a cell is kept does not follow the phase of a staircase: taking
// the first in z, y, x order kept the same step of a tilted wedge's line
// every time and moved its median by 1.3°. Distinct voxels have distinct
// ranks (the mix is a bijection of the packed coordinates).
func thinRank(z, y, x int) uint64 {
	v := uint64(uint32(z))<<42 ^ uint64(uint32(y)&0x1fffff)<<21 ^ uint64(uint32(x)&0x1fffff)
	v ^= v >> 30
	v *= 0xbf58476d1ce4e5b9
	v ^= v >> 27
	v *= 0x94d049bb133111eb
	v ^= v >> 31
	return v
}

// floorDiv returns ⌊a/b⌋ for b > 0.
func floorDiv(a, b int) int {
	q := a / b
	if a%b != 0 && a < 0 {
		q--
	}
	return q
}

// face is one wetting–nonwetting voxel face near a sample. Its axis normal
// e (wetting → nonwetting) is sign times the unit vector of axis ax.
type face struct {
	q    [3]float64 // centre relative to the sample
	t    float64    // taper
	sign float64    // ±1
	ax   int        // 0 z, 1 y, 2 x
}

// angle computes the contact angle at sample p (see the package doc).
func (f *fitter) angle(p [3]int) (float64, bool) {
	R, hw := f.opt.Radius, f.opt.LineHalfWidth
	g := f.grad.At(f.lab, f.solid, p)
	ns, ok := unit([3]float64{-g[0], -g[1], -g[2]})
	if !ok {
		return 0, false
	}
	// Gather the faces within R of p, in a fixed order relative to p
	// (z, y, x of the voxel, then axis).
	f.faces = f.faces[:0]
	var wallW, wallD float64
	rc := int(math.Ceil(R))
	nb := volume.Box{Min: p, Max: [3]int{p[0] + 1, p[1] + 1, p[2] + 1}}.Grow(rc).Intersect(f.box)
	// near returns a lower bound of |offset + ½d| over d ∈ {0, 1}.
	near := func(d int) float64 {
		if d >= 0 {
			return float64(d)
		}
		return -float64(d) - 0.5
	}
	// Wall faces enter the fit only through wallW = Σ τ|e·n_s| and
	// wallD = Σ τ|e·n_s| n_s·q. With e = ±(axis a), |e·n_s| = |n_s,a|, so
	// both follow from per-axis sums of τ and τq.
	var sum [3]float64 // Σ τ e over interface faces
	var tw [3]float64
	var tq [3][3]float64
	R2 := R * R
	xlo := int32(nb.Min[2])
	for z := nb.Min[0]; z < nb.Max[0]; z++ {
		fp := &f.planes[z-f.box.Min[0]]
		dz := float64(z - p[0])
		nz := near(z - p[0])
		for y := nb.Min[1]; y < nb.Max[1]; y++ {
			if ny := near(y - p[1]); nz*nz+ny*ny >= R2 {
				continue // every face of this row is at least R away
			}
			dy := float64(y - p[1])
			j := y - f.box.Min[1]
			// Wall faces, axis by axis (each axis has its own sums, so the
			// order within an axis is the z, y, x order).
			for ax := 0; ax < 3; ax++ {
				xs := fp.wX[ax][fp.wStart[ax][j]:fp.wStart[ax][j+1]]
				q := [3]float64{dz, dy, 0}
				q[ax] += 0.5
				a := q[0]*q[0] + q[1]*q[1]
				if a >= R2 {
					continue
				}
				xh := 0.0
				if ax == 2 {
					xh = 0.5
				}
				for _, x := range xs[firstAtLeast(xs, xlo):] {
					if int(x) >= nb.Max[2] {
						break
					}
					qx := float64(int(x)-p[2]) + xh
					r2 := a + qx*qx
					if r2 >= R2 {
						continue
					}
					u := 1 - r2/R2
					t := u * u
					tw[ax] += t
					tq[ax][0] += t * q[0]
					tq[ax][1] += t * q[1]
					tq[ax][2] += t * qx
				}
			}
			xs, cs := fp.iX[fp.iStart[j]:fp.iStart[j+1]], fp.iCode[fp.iStart[j]:fp.iStart[j+1]]
			for e := firstAtLeast(xs, xlo); e < len(xs); e++ {
				x := int(xs[e])
				if x >= nb.Max[2] {
					break
				}
				code := cs[e]
				dx := float64(x - p[2])
				for ax := 0; ax < 3; ax++ {
					c := code >> (3 * ax) & 7
					if c == 0 {
						continue
					}
					q := [3]float64{dz, dy, dx}
					q[ax] += 0.5
					r2 := q[0]*q[0] + q[1]*q[1] + q[2]*q[2]
					if r2 >= R2 {
						continue
					}
					u := 1 - r2/R2
					t := u * u
					sign := 1.0
					if c&faceNeg != 0 {
						sign = -1
					}
					sum[ax] += sign * t
					f.faces = append(f.faces, face{q: q, t: t, ax: ax, sign: sign})
				}
			}
		}
	}
	for ax := 0; ax < 3; ax++ {
		a := math.Abs(ns[ax])
		wallW += a * tw[ax]
		wallD += a * dot(ns, tq[ax])
	}
	if len(f.faces) < f.opt.MinFaces || wallW == 0 {
		return 0, false
	}
	wallD /= wallW
	// Frame: e_w from the area vector Σ τ e of the interface patch (summed
	// while gathering).
	ew, ok := unit(sum)
	if !ok {
		return 0, false
	}
	eeta, ok := unit(cross(ns, ew))
	if !ok {
		return 0, false // interface parallel to the wall: θ = 0° or 180°, no crossing
	}
	exi := cross(eeta, ew)
	// Weighted least squares for w(ξ, η) over 1, ξ, η, ξ², ξη, η², in the
	// slab |η| < LineHalfWidth about the plane normal to the contact line.
	var m [6][7]float64
	gap := f.opt.WallGap
	for _, fc := range f.faces {
		if gap > 0 && dot(ns, fc.q)-wallD < gap {
			continue
		}
		xi, et, w := dot(fc.q, exi), dot(fc.q, eeta), dot(fc.q, ew)
		rho := (xi*xi+w*w)/(R*R) + et*et/(hw*hw)
		if rho >= 1 {
			continue
		}
		wt := (1 - rho) * (1 - rho) * math.Abs(ew[fc.ax])
		if wt == 0 {
			continue
		}
		b := [6]float64{1, xi, et, xi * xi, xi * et, et * et}
		for i := 0; i < 6; i++ {
			for j := i; j < 6; j++ {
				m[i][j] += wt * b[i] * b[j]
			}
			m[i][6] += wt * b[i] * w
		}
	}
	for i := 0; i < 6; i++ {
		for j := 0; j < i; j++ {
			m[i][j] = m[j][i]
		}
	}
	c, ok := solve6(m)
	if !ok {
		return 0, false
	}
	// Crossing with the wall in the plane η = 0.
	nsw, nsx := dot(ns, ew), dot(ns, exi)
	A, B, C := c[0]*nsw-wallD, nsx+c[1]*nsw, c[3]*nsw
	xi, ok := nearestRoot(A, B, C)
	if !ok || math.Abs(xi) > R {
		return 0, false
	}
	wxi, weta := c[1]+2*c[3]*xi, c[2]+c[4]*xi
	nf, ok := unit(sub(sub(ew, scale(exi, wxi)), scale(eeta, weta)))
	if !ok {
		return 0, false
	}
	cos := math.Max(-1, math.Min(1, dot(nf, ns)))
	return math.Acos(cos) * 180 / math.Pi, true
}

// nearestRoot returns the real root of C ξ² + B ξ + A nearest 0.
func nearestRoot(A, B, C float64) (float64, bool) {
	if math.Abs(C) < 1e-12*math.Max(math.Abs(B), 1e-300) || C == 0 {
		if B == 0 {
			return 0, false
		}
		return -A / B, true
	}
	disc := B*B - 4*A*C
	if disc < 0 {
		return 0, false
	}
	// Stable form: q = −(B + sign(B)√disc)/2, roots q/C and A/q.
	sq := math.Sqrt(disc)
	if B < 0 {
		sq = -sq
	}
	q := -(B + sq) / 2
	r1 := q / C
	if q == 0 {
		return r1, true
	}
	r2 := A / q
	if math.Abs(r2) < math.Abs(r1) {
		return r2, true
	}
	return r1, true
}

// solve6 solves the 6×6 system [M | b] by Gaussian elimination with partial
// pivoting; false when it is (near) singular.
func solve6(m [6][7]float64) ([6]float64, bool) {
	var x [6]float64
	scale := 0.0
	for i := 0; i < 6; i++ {
		scale = math.Max(scale, math.Abs(m[i][i]))
	}
	for col := 0; col < 6; col++ {
		piv := col
		for r := col + 1; r < 6; r++ {
			if math.Abs(m[r][col]) > math.Abs(m[piv][col]) {
				piv = r
			}
		}
		if math.Abs(m[piv][col]) <= 1e-12*scale {
			return x, false
		}
		m[col], m[piv] = m[piv], m[col]
		for r := col + 1; r < 6; r++ {
			f := m[r][col] / m[col][col]
			for k := col; k < 7; k++ {
				m[r][k] -= f * m[col][k]
			}
		}
	}
	for i := 5; i >= 0; i-- {
		s := m[i][6]
		for k := i + 1; k < 6; k++ {
			s -= m[i][k] * x[k]
		}
		x[i] = s / m[i][i]
	}
	return x, true
}

// Add accumulates q into p.
func (p *Partial) Add(q *Partial) {
	p.N += q.N
	p.Line += q.Line
	p.NonwettingOnSolid += q.NonwettingOnSolid
	p.Sum += q.Sum
	p.SumSq += q.SumSq
	p.Blocks = blockse.Merge(p.Blocks, q.Blocks)
	if q.Hist != nil {
		if p.Hist == nil {
			p.Hist = make([]int64, len(q.Hist))
		}
		for i, v := range q.Hist {
			p.Hist[i] += v
		}
	}
}

// Mean returns the mean angle in degrees (NaN without samples).
func (p *Partial) Mean() float64 {
	if p.N == 0 {
		return math.NaN()
	}
	return p.Sum / float64(p.N)
}

// Std returns the sample standard deviation in degrees (NaN with fewer
// than two samples).
func (p *Partial) Std() float64 {
	if p.N < 2 {
		return math.NaN()
	}
	n := float64(p.N)
	v := (p.SumSq - p.Sum*p.Sum/n) / (n - 1)
	return math.Sqrt(math.Max(v, 0))
}

// Median returns the median angle in degrees from the 0.1° histogram,
// linearly interpolated inside its bin (NaN without samples).
func (p *Partial) Median() float64 {
	if p.N == 0 || p.Hist == nil {
		return math.NaN()
	}
	half := float64(p.N) / 2
	acc := 0.0
	for i, v := range p.Hist {
		if v > 0 && acc+float64(v) >= half {
			return (float64(i) + (half-acc)/float64(v)) * 180 / float64(len(p.Hist))
		}
		acc += float64(v)
	}
	return 180
}

// Histogram1Deg returns the sample counts per whole degree, bin i holding
// [i°, i+1°).
func (p *Partial) Histogram1Deg() [180]int64 {
	var h [180]int64
	per := len(p.Hist) / 180
	for i, v := range p.Hist {
		h[min(i/per, 179)] += v
	}
	return h
}

func dot(a, b [3]float64) float64 { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }
func sub(a, b [3]float64) [3]float64 {
	return [3]float64{a[0] - b[0], a[1] - b[1], a[2] - b[2]}
}
func scale(a [3]float64, s float64) [3]float64 { return [3]float64{a[0] * s, a[1] * s, a[2] * s} }
func cross(a, b [3]float64) [3]float64 {
	return [3]float64{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}
func unit(a [3]float64) ([3]float64, bool) {
	n := math.Sqrt(dot(a, a))
	if n < 1e-12 || math.IsNaN(n) {
		return a, false
	}
	return scale(a, 1/n), true
}

// firstAtLeast returns the index of the first element of the increasing
// list xs that is ≥ x (len(xs) when none is).
func firstAtLeast(xs []int32, x int32) int {
	lo, hi := 0, len(xs)
	for lo < hi {
		m := int(uint(lo+hi) >> 1)
		if xs[m] < x {
			lo = m + 1
		} else {
			hi = m
		}
	}
	return lo
}
