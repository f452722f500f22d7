// Package levelset builds smoothed indicator fields of label phases on a tile
// and their derivatives: the level-set description of fluid interfaces that
// the curvature and contact-angle measurements share.
//
// # Smoothing
//
// An indicator χ_A (1 on voxels whose label is in the set A, 0 elsewhere) is
// convolved with a sampled 3-D Gaussian of standard deviation σ voxels,
// truncated at radius r = ceil(Truncate·σ) and normalised to unit sum. The
// Gaussian is separable, so the convolution is three 1-D passes (x, then y,
// then z) with the same 2r+1 tap kernel (common practice; e.g. Gonzalez &
// Woods, Digital Image Processing, §3.4).
//
// # Missing voxels and tiles
//
// Voxels outside lab.Box are missing: they contribute nothing to a sum. A
// tile's labels cover its core plus a halo, clipped to the scan, so beyond the
// tile they are missing only where the scan itself ends. Every value this
// package returns for a voxel depends only on labels within r of it, summed
// in a fixed order relative to that voxel. Hence a field evaluated on a tile
// whose halo is at least r (plus the derivative stencil) is bit-for-bit the
// field of the whole scan there, which is what makes tile partials additive.
//
// # Normalised convolution
//
// Fraction returns φ = G∗χ_A / G∗χ_D with A ⊂ D (Knutsson & Westin 1993,
// "Normalized and differential convolution", CVPR, for the general method;
// applying it to the pore space is our own use). With A the nonwetting phase
// and D the pore space (nonwetting ∪ wetting), φ is the local nonwetting
// fraction of the pore: at a wall between nonwetting phase and solid, both
// sums lose the same solid voxels, so φ stays 1 and the wall creates no
// gradient; only the wetting–nonwetting interface does. Derivation: inside a
// region of pure nonwetting phase next to solid, χ_A = χ_D on every voxel the
// kernel sees, so the ratio is exactly 1; likewise 0 in pure wetting phase.
// The same ratio also treats missing voxels (beyond the scan) as "not seen",
// the normalised-convolution answer to incomplete data.
//
// # Derivatives
//
// Gradient, Hessian and TotalCurvature use second-order central differences
// on the smoothed field (step 1 voxel); GradientAt evaluates the derivative of
// the Gaussian analytically at one voxel, for sparse sample points.
//
// # Narrow band
//
// Where the cube of radius r = Radius(σ) around a voxel holds no voxel of
// num, G∗χ_num is exactly 0 there; where it holds no voxel of den∖num,
// χ_num and χ_den agree on every tap, the two sums are computed by the same
// operations and φ is exactly 1 (or NaN below MinWeight). Only voxels whose
// cube holds both (Mixed) can take a value strictly between 0 and 1, so a
// measurement that keeps a band inside (0, 1) needs φ only on those voxels
// and the few neighbours its derivatives read. FractionOn computes φ on
// such a mask, bit for bit as Fraction does.
//
// Fields are volume.Volume[float32]: Pix[((z-Min0)*NY+(y-Min1))*NX+(x-Min2)];
// sums are accumulated in float64 and stored as float32.
package levelset

import (
	"math"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Truncate is the Gaussian kernel radius in standard deviations.
const Truncate = 3.0

// Radius returns the kernel radius ceil(Truncate·σ) in voxels (0 for σ <= 0).
func Radius(sigma float64) int {
	if sigma <= 0 {
		return 0
	}
	return int(math.Ceil(Truncate*sigma - 1e-9))
}

// Kernel returns the 2r+1 taps of the sampled Gaussian of standard deviation
// sigma, normalised to unit sum; tap i is offset i − r.
func Kernel(sigma float64) []float64 {
	r := Radius(sigma)
	k := make([]float64, 2*r+1)
	if r == 0 {
		k[0] = 1
		return k
	}
	s := 0.0
	for i := range k {
		d := float64(i - r)
		k[i] = math.Exp(-d * d / (2 * sigma * sigma))
		s += k[i]
	}
	for i := range k {
		k[i] /= s
	}
	return k
}

// Smooth returns G_σ∗χ_set on box ∩ lab.Box. Voxels beyond lab.Box are
// missing and contribute nothing.
func Smooth(lab *volume.Labels, set *phase.Set, box volume.Box, sigma float64) *volume.Volume[float32] {
	box = box.Intersect(lab.Box)
	r := Radius(sigma)
	k := Kernel(sigma)
	// b0 holds the indicator on box grown by r, clipped to lab.
	b0 := box.Grow(r).Intersect(lab.Box)
	ind := volume.New[float32](b0, lab.VoxelSize)
	i := 0
	for z := b0.Min[0]; z < b0.Max[0]; z++ {
		for y := b0.Min[1]; y < b0.Max[1]; y++ {
			row := lab.Pix[lab.Index(z, y, b0.Min[2]):][:b0.Max[2]-b0.Min[2]]
			for _, l := range row {
				if set[l] {
					ind.Pix[i] = 1
				}
				i++
			}
		}
	}
	f := ind
	for axis := 2; axis >= 0; axis-- {
		nb := f.Box
		nb.Min[axis], nb.Max[axis] = box.Min[axis], box.Max[axis]
		f = pass(f, nb, axis, k, r)
	}
	return f
}

// pass convolves src along axis with k, producing dst on box (box ⊂ src.Box
// on the other two axes); taps outside src.Box along axis are skipped. Each
// output voxel sums its taps in increasing offset order starting from 0, so
// the result does not depend on how far src extends beyond the taps.
func pass(src *volume.Volume[float32], box volume.Box, axis int, k []float64, r int) *volume.Volume[float32] {
	dst := volume.New[float32](box, src.VoxelSize)
	ss := src.Box.Size()
	nx := box.Max[2] - box.Min[2]
	lo, hi := src.Box.Min[axis], src.Box.Max[axis]
	acc := make([]float64, nx)
	i := 0
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			out := dst.Pix[i : i+nx]
			i += nx
			if axis == 2 {
				row := src.Pix[src.Index(z, y, src.Box.Min[2]):][:ss[2]]
				for x := box.Min[2]; x < box.Max[2]; x++ {
					a, b := max(x-r, lo), min(x+r, hi-1)
					taps := k[a-x+r : b-x+r+1]
					v := row[a-lo:]
					s := 0.0
					for t, w := range taps {
						s += w * float64(v[t])
					}
					out[x-box.Min[2]] = float32(s)
				}
				continue
			}
			// y or z: whole rows at once, tap range fixed by the row.
			c := [2]int{z, y}[axis]
			a, b := max(c-r, lo), min(c+r, hi-1)
			for x := range acc {
				acc[x] = 0
			}
			for t := a; t <= b; t++ {
				w := k[t-c+r]
				var row []float32
				if axis == 0 {
					row = src.Pix[src.Index(t, y, box.Min[2]):][:nx]
				} else {
					row = src.Pix[src.Index(z, t, box.Min[2]):][:nx]
				}
				for x, v := range row {
					acc[x] += w * float64(v)
				}
			}
			for x, v := range acc {
				out[x] = float32(v)
			}
		}
	}
	return dst
}

// MinWeight is the smallest G∗χ_D for which Fraction defines φ; below it the
// pore space is out of the kernel's reach and φ is NaN.
const MinWeight = 1e-6

// Fraction returns the normalised convolution φ = G∗χ_num / G∗χ_den on
// box ∩ lab.Box (num should be a subset of den), NaN where G∗χ_den <
// MinWeight.
func Fraction(lab *volume.Labels, num, den *phase.Set, box volume.Box, sigma float64) *volume.Volume[float32] {
	n := Smooth(lab, num, box, sigma)
	d := Smooth(lab, den, box, sigma)
	nan := float32(math.NaN())
	for i, w := range d.Pix {
		if w < MinWeight {
			n.Pix[i] = nan
		} else {
			n.Pix[i] = float32(float64(n.Pix[i]) / float64(w))
		}
	}
	return n
}

// Union returns the set of labels in a or b.
func Union(a, b *phase.Set) *phase.Set {
	var u phase.Set
	for i := range u {
		u[i] = a[i] || b[i]
	}
	return &u
}

// Gradient returns (∂z, ∂y, ∂x) of f at global voxel (z, y, x) by central
// differences. ok is false when a neighbour lies outside f.Box or is NaN.
func Gradient(f *volume.Volume[float32], z, y, x int) (g [3]float64, ok bool) {
	if !f.Box.Contains(z-1, y-1, x-1) || !f.Box.Contains(z+1, y+1, x+1) {
		return g, false
	}
	s := f.Box.Size()
	sz, sy := s[1]*s[2], s[2]
	i := f.Index(z, y, x)
	p := f.Pix
	g[0] = 0.5 * (float64(p[i+sz]) - float64(p[i-sz]))
	g[1] = 0.5 * (float64(p[i+sy]) - float64(p[i-sy]))
	g[2] = 0.5 * (float64(p[i+1]) - float64(p[i-1]))
	ok = !math.IsNaN(g[0] + g[1] + g[2])
	return g, ok
}

// Hessian returns the second derivatives (zz, yy, xx, zy, zx, yx) of f at
// global voxel (z, y, x) by central differences over the 3×3×3
// neighbourhood. ok is false when a neighbour lies outside f.Box or is NaN.
func Hessian(f *volume.Volume[float32], z, y, x int) (h [6]float64, ok bool) {
	if !f.Box.Contains(z-1, y-1, x-1) || !f.Box.Contains(z+1, y+1, x+1) {
		return h, false
	}
	s := f.Box.Size()
	sz, sy := s[1]*s[2], s[2]
	i := f.Index(z, y, x)
	v := func(o int) float64 { return float64(f.Pix[i+o]) }
	c := v(0)
	h[0] = v(sz) - 2*c + v(-sz)
	h[1] = v(sy) - 2*c + v(-sy)
	h[2] = v(1) - 2*c + v(-1)
	h[3] = 0.25 * (v(sz+sy) - v(sz-sy) - v(-sz+sy) + v(-sz-sy))
	h[4] = 0.25 * (v(sz+1) - v(sz-1) - v(-sz+1) + v(-sz-1))
	h[5] = 0.25 * (v(sy+1) - v(sy-1) - v(-sy+1) + v(-sy-1))
	ok = !math.IsNaN(h[0] + h[1] + h[2] + h[3] + h[4] + h[5])
	return h, ok
}

// TotalCurvature returns κ = −∇·(∇φ/|∇φ|) from the gradient g and Hessian h
// of φ (order as in Gradient and Hessian):
//
//	κ = −(|g|² tr H − gᵀ H g) / |g|³,
//
// the sum of the principal curvatures of the level set through the point,
// positive where the set {φ > level} is convex (the divergence of the unit
// normal, Osher & Fedkiw 2003, Level Set Methods and Dynamic Implicit
// Surfaces, ch. 1, with the normal taken as −∇φ/|∇φ|, out of the set). It returns NaN where g = 0.
func TotalCurvature(g [3]float64, h [6]float64) float64 {
	g2 := g[0]*g[0] + g[1]*g[1] + g[2]*g[2]
	if g2 == 0 {
		return math.NaN()
	}
	tr := h[0] + h[1] + h[2]
	gHg := g[0]*g[0]*h[0] + g[1]*g[1]*h[1] + g[2]*g[2]*h[2] +
		2*(g[0]*g[1]*h[3]+g[0]*g[2]*h[4]+g[1]*g[2]*h[5])
	return -(g2*tr - gHg) / (g2 * math.Sqrt(g2))
}

// GradientAt returns ∇(G_σ∗χ_set) at global voxel p, evaluated directly with
// the analytic derivative of the (unnormalised) Gaussian over the cube of
// radius Radius(sigma) around p, in (z, y, x) order. Voxels beyond lab.Box
// are missing. The result's direction points from the complement into the
// set; its length is in arbitrary units.
func GradientAt(lab *volume.Labels, set *phase.Set, p [3]int, sigma float64) [3]float64 {
	r := Radius(sigma)
	var buf [64]float64 // no allocation for σ up to 10
	var w []float64
	if 2*r+1 <= len(buf) {
		w = buf[:2*r+1]
	} else {
		w = make([]float64, 2*r+1)
	}
	gaussTaps(w, sigma)
	return gradientAt(lab, set, p, sigma, w)
}

// gaussTaps fills w (2r+1 taps) with the unnormalised Gaussian exp(−d²/2σ²)
// at offsets d = i − r.
func gaussTaps(w []float64, sigma float64) {
	r := (len(w) - 1) / 2
	for i := range w {
		d := float64(i - r)
		w[i] = math.Exp(-d * d / (2 * sigma * sigma))
	}
}

// GradientKernel is GradientAt for one σ with the Gaussian taps computed
// once, for callers that evaluate many points: At returns GradientAt's
// value bit for bit.
type GradientKernel struct {
	sigma float64
	w     []float64
}

// NewGradientKernel returns the kernel of GradientAt for sigma.
func NewGradientKernel(sigma float64) *GradientKernel {
	k := &GradientKernel{sigma: sigma, w: make([]float64, 2*Radius(sigma)+1)}
	gaussTaps(k.w, sigma)
	return k
}

// At returns GradientAt(lab, set, p, σ).
func (k *GradientKernel) At(lab *volume.Labels, set *phase.Set, p [3]int) [3]float64 {
	return gradientAt(lab, set, p, k.sigma, k.w)
}

func gradientAt(lab *volume.Labels, set *phase.Set, p [3]int, sigma float64, w []float64) [3]float64 {
	r := (len(w) - 1) / 2
	nb := volume.Box{Min: p, Max: [3]int{p[0] + 1, p[1] + 1, p[2] + 1}}.Grow(r).Intersect(lab.Box)
	var g [3]float64
	for z := nb.Min[0]; z < nb.Max[0]; z++ {
		dz := z - p[0]
		for y := nb.Min[1]; y < nb.Max[1]; y++ {
			dy := y - p[1]
			wzy := w[dz+r] * w[dy+r]
			row := lab.Pix[lab.Index(z, y, nb.Min[2]):][:nb.Max[2]-nb.Min[2]]
			for k, l := range row {
				if set[l] {
					dx := nb.Min[2] + k - p[2]
					c := wzy * w[dx+r]
					// ∇_p G(p − q) = −(p − q)/σ² G = (q − p)/σ² G.
					g[0] += c * float64(dz)
					g[1] += c * float64(dy)
					g[2] += c * float64(dx)
				}
			}
		}
	}
	s := 1 / (sigma * sigma)
	return [3]float64{g[0] * s, g[1] * s, g[2] * s}
}

// Near returns, on box ∩ lab.Box, 1 where a voxel of set lies within
// Euclidean distance e (centre to centre, the voxel itself included) and 0
// elsewhere; voxels beyond lab.Box are missing. The squared distance,
// truncated at radius r = floor(e), is separable (min over dz of dz² + min
// over dy of dy² + min over dx of dx²; Saito & Toriwaki 1994, Pattern
// Recognition 27:1551, brute force over the 2r+1 window instead of their
// envelope), so the cost is 3·(2r+1) per voxel.
func Near(lab *volume.Labels, set *phase.Set, box volume.Box, e float64) *volume.Volume[uint8] {
	box = box.Intersect(lab.Box)
	out := volume.New[uint8](box, lab.VoxelSize)
	if e < 0 || box.Empty() {
		return out
	}
	r := int(math.Floor(e))
	const far = math.MaxInt32
	b := box.Grow(r).Intersect(lab.Box)
	// d holds squared distances on b, then narrows axis by axis to box.
	d := make([]int32, b.Voxels())
	i := 0
	for z := b.Min[0]; z < b.Max[0]; z++ {
		for y := b.Min[1]; y < b.Max[1]; y++ {
			row := lab.Pix[lab.Index(z, y, b.Min[2]):][:b.Max[2]-b.Min[2]]
			for _, l := range row {
				d[i] = far
				if set[l] {
					d[i] = 0
				}
				i++
			}
		}
	}
	for axis := 2; axis >= 0; axis-- {
		nb := b
		nb.Min[axis], nb.Max[axis] = box.Min[axis], box.Max[axis]
		s := b.Size()
		nd := make([]int32, nb.Voxels())
		nx := nb.Max[2] - nb.Min[2]
		j := 0
		for z := nb.Min[0]; z < nb.Max[0]; z++ {
			for y := nb.Min[1]; y < nb.Max[1]; y++ {
				out := nd[j : j+nx]
				j += nx
				for x := range out {
					out[x] = far
				}
				c := [3]int{z, y, nb.Min[2]}[axis]
				if axis == 2 {
					row := d[((z-b.Min[0])*s[1]+(y-b.Min[1]))*s[2]:][:s[2]]
					for x := nb.Min[2]; x < nb.Max[2]; x++ {
						best := int32(far)
						for t := max(x-r, b.Min[2]); t <= min(x+r, b.Max[2]-1); t++ {
							if v := row[t-b.Min[2]]; v != far {
								if q := v + int32((t-x)*(t-x)); q < best {
									best = q
								}
							}
						}
						out[x-nb.Min[2]] = best
					}
					continue
				}
				for t := max(c-r, b.Min[axis]); t <= min(c+r, b.Max[axis]-1); t++ {
					zz, yy := z, y
					if axis == 0 {
						zz = t
					} else {
						yy = t
					}
					row := d[((zz-b.Min[0])*s[1]+(yy-b.Min[1]))*s[2]+(nb.Min[2]-b.Min[2]):][:nx]
					dd := int32((t - c) * (t - c))
					for x, v := range row {
						if v != far && v+dd < out[x] {
							out[x] = v + dd
						}
					}
				}
			}
		}
		d, b = nd, nb
	}
	lim := int32(math.Floor(e*e + 1e-9))
	for i, v := range d {
		if v <= lim {
			out.Pix[i] = 1
		}
	}
	return out
}
