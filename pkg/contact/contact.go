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
// Samples
// whose fit is under-determined (fewer than MinFaces interface faces, no
// wall faces, singular system, no crossing with the wall within Radius) are
// skipped.
//
// # Tiles
//
// A sample's angle depends only on labels within Halo() of it, gathered in a
// fixed order relative to the sample, so a tile with that halo computes
// bit-identical angles for the samples its core owns; N and Hist add
// exactly, Sum and SumSq to rounding.
package contact

import (
	"math"

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
}

// Measure returns the angles at the contact-line samples owned by core
// (clipped to lab.Box). lab must cover core plus Halo() voxels on every
// side, clipped to the scan.
func Measure(lab *volume.Labels, solid, wetting, nonwetting *phase.Set, core volume.Box, opt Options) Partial {
	opt = opt.norm()
	var p Partial
	core = core.Intersect(lab.Box)
	f := fitter{lab: lab, solid: solid, wet: wetting, non: nonwetting, pore: levelset.Union(wetting, nonwetting), opt: opt}
	f.classify(core.Grow(int(math.Ceil(opt.Radius))))
	for z := core.Min[0]; z < core.Max[0]; z++ {
		for y := core.Min[1]; y < core.Max[1]; y++ {
			for x := core.Min[2]; x < core.Max[2]; x++ {
				if !nonwetting[lab.At(z, y, x)] || !f.onLine(z, y, x) {
					continue
				}
				th, ok := f.angle([3]int{z, y, x})
				if !ok {
					continue
				}
				p.addAngle(th)
			}
		}
	}
	return p
}

// Angle returns the contact angle (degrees, through the wetting phase) at
// the contact-line voxel p, or false when p is not on the line or its fit is
// under-determined.
func Angle(lab *volume.Labels, solid, wetting, nonwetting *phase.Set, p [3]int, opt Options) (float64, bool) {
	f := fitter{lab: lab, solid: solid, wet: wetting, non: nonwetting, pore: levelset.Union(wetting, nonwetting), opt: opt.norm()}
	if !lab.Box.Contains(p[0], p[1], p[2]) || !nonwetting[lab.At(p[0], p[1], p[2])] || !f.onLine(p[0], p[1], p[2]) {
		return 0, false
	}
	f.classify(volume.Box{Min: p, Max: [3]int{p[0] + 1, p[1] + 1, p[2] + 1}}.Grow(int(math.Ceil(f.opt.Radius))))
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

var axes = [6][3]int{{1, 0, 0}, {-1, 0, 0}, {0, 1, 0}, {0, -1, 0}, {0, 0, 1}, {0, 0, -1}}

type fitter struct {
	lab                   *volume.Labels
	solid, wet, non, pore *phase.Set
	opt                   Options
	faces                 []face // scratch, reused between samples
	// faceCodes holds, per voxel a, 3 bits per axis (x: bits 0–2, y: 3–5,
	// z: 6–8; the axis index ax of [z, y, x] uses bits 3·ax…3·ax+2) for
	// the face between a and its +axis neighbour: facePresent, faceWall
	// (solid–pore rather than wetting–nonwetting) and faceNeg (the normal,
	// wetting → nonwetting or solid → pore, points along −axis).
	faceCodes *volume.Volume[uint16]
}

// Face code bits, per axis.
const (
	facePresent = 1
	faceWall    = 2
	faceNeg     = 4
)

// classify fills f.faceCodes on box ∩ lab.Box.
func (f *fitter) classify(box volume.Box) {
	lab := f.lab
	box = box.Intersect(lab.Box)
	fc := &volume.Volume[uint16]{Pix: make([]uint16, box.Voxels()), Box: box}
	s := lab.Box.Size()
	strides := [3]int{s[1] * s[2], s[2], 1}
	i := 0
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			j := lab.Index(z, y, box.Min[2])
			for x := box.Min[2]; x < box.Max[2]; x, i, j = x+1, i+1, j+1 {
				a := lab.Pix[j]
				var code uint16
				for ax, c := range [3]int{z, y, x} {
					if c+1 >= lab.Box.Max[ax] {
						continue
					}
					b := lab.Pix[j+strides[ax]]
					var v uint16
					switch {
					case f.wet[a] && f.non[b]:
						v = facePresent
					case f.non[a] && f.wet[b]:
						v = facePresent | faceNeg
					case f.solid[a] && f.pore[b]:
						v = facePresent | faceWall
					case f.pore[a] && f.solid[b]:
						v = facePresent | faceWall | faceNeg
					}
					code |= v << (3 * ax)
				}
				fc.Pix[i] = code
			}
		}
	}
	f.faceCodes = fc
}

// onLine reports whether voxel (z, y, x) lies on the contact line: it
// touches the solid (a solid face-neighbour) and one of its 26 neighbours is
// a wetting voxel that touches the solid too. The second condition keeps the
// boundary between the wetting-covered and nonwetting-covered parts of the
// wall and drops the inside of a one-voxel nonwetting film (solid below,
// wetting above), which lies away from the line.
func (f *fitter) onLine(z, y, x int) bool {
	if !f.touches(z, y, x, f.solid) {
		return false
	}
	for dz := -1; dz <= 1; dz++ {
		for dy := -1; dy <= 1; dy++ {
			for dx := -1; dx <= 1; dx++ {
				q := [3]int{z + dz, y + dy, x + dx}
				if f.lab.Box.Contains(q[0], q[1], q[2]) && f.wet[f.lab.At(q[0], q[1], q[2])] && f.touches(q[0], q[1], q[2], f.solid) {
					return true
				}
			}
		}
	}
	return false
}

// touches reports whether a face-neighbour of (z, y, x) inside lab is in s.
func (f *fitter) touches(z, y, x int, s *phase.Set) bool {
	for _, a := range axes {
		q := [3]int{z + a[0], y + a[1], x + a[2]}
		if f.lab.Box.Contains(q[0], q[1], q[2]) && s[f.lab.At(q[0], q[1], q[2])] {
			return true
		}
	}
	return false
}

type face struct {
	q [3]float64 // centre relative to the sample
	e [3]float64 // axis normal (wetting → nonwetting, or solid → pore)
	t float64    // taper
}

// angle computes the contact angle at sample p (see the package doc).
func (f *fitter) angle(p [3]int) (float64, bool) {
	lab, R, hw := f.lab, f.opt.Radius, f.opt.LineHalfWidth
	g := levelset.GradientAt(lab, f.solid, p, f.opt.SolidSigma)
	ns, ok := unit([3]float64{-g[0], -g[1], -g[2]})
	if !ok {
		return 0, false
	}
	// Gather the faces within R of p, in a fixed order relative to p.
	f.faces = f.faces[:0]
	var wallW, wallD float64
	rc := int(math.Ceil(R))
	fc := f.faceCodes
	nb := volume.Box{Min: p, Max: [3]int{p[0] + 1, p[1] + 1, p[2] + 1}}.Grow(rc).Intersect(fc.Box)
	for z := nb.Min[0]; z < nb.Max[0]; z++ {
		for y := nb.Min[1]; y < nb.Max[1]; y++ {
			row := fc.Pix[fc.Index(z, y, nb.Min[2]):][:nb.Max[2]-nb.Min[2]]
			for k, code := range row {
				if code == 0 {
					continue
				}
				x := nb.Min[2] + k
				for ax := 0; ax < 3; ax++ {
					c := code >> (3 * ax) & 7
					if c == 0 {
						continue
					}
					var d [3]int
					d[ax] = 1
					q := [3]float64{float64(z-p[0]) + 0.5*float64(d[0]), float64(y-p[1]) + 0.5*float64(d[1]), float64(x-p[2]) + 0.5*float64(d[2])}
					r2 := dot(q, q)
					if r2 >= R*R {
						continue
					}
					sign := 1.0
					if c&faceNeg != 0 {
						sign = -1
					}
					t := (1 - r2/(R*R)) * (1 - r2/(R*R))
					e := [3]float64{sign * float64(d[0]), sign * float64(d[1]), sign * float64(d[2])}
					if c&faceWall != 0 {
						w := t * math.Abs(dot(e, ns))
						wallW += w
						wallD += w * dot(ns, q)
					} else {
						f.faces = append(f.faces, face{q: q, e: e, t: t})
					}
				}
			}
		}
	}
	if len(f.faces) < f.opt.MinFaces || wallW == 0 {
		return 0, false
	}
	wallD /= wallW
	// Frame: e_w from the area vector of the interface patch.
	var sum [3]float64
	for _, fc := range f.faces {
		sum = add(sum, scale(fc.e, fc.t))
	}
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
	for _, fc := range f.faces {
		xi, et, w := dot(fc.q, exi), dot(fc.q, eeta), dot(fc.q, ew)
		rho := (xi*xi+w*w)/(R*R) + et*et/(hw*hw)
		if rho >= 1 {
			continue
		}
		wt := (1 - rho) * (1 - rho) * math.Abs(dot(fc.e, ew))
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
	p.Sum += q.Sum
	p.SumSq += q.SumSq
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
func add(a, b [3]float64) [3]float64 {
	return [3]float64{a[0] + b[0], a[1] + b[1], a[2] + b[2]}
}
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
