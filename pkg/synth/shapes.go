// Package synth builds label volumes with known geometry: analytic shapes
// (balls, tori, shells, spherical caps on a wall, tilted planes) for checking
// the measurements against closed-form values, and random porous media
// (Boolean model of balls) for checking them against the Miles formulas.
//
// Voxel (z, y, x) is taken to be the unit cube centred on (z, y, x); a shape
// covers a voxel when it covers the voxel centre. All coordinates are in
// voxel units.
package synth

import (
	"math"
	"math/rand/v2"

	"sluice/pkg/volume"
)

// Fill sets every voxel of lab whose centre satisfies inside to code.
func Fill(lab *volume.Labels, code uint8, inside func(z, y, x float64) bool) {
	b := lab.Box
	i := 0
	for z := b.Min[0]; z < b.Max[0]; z++ {
		for y := b.Min[1]; y < b.Max[1]; y++ {
			for x := b.Min[2]; x < b.Max[2]; x++ {
				if inside(float64(z), float64(y), float64(x)) {
					lab.Pix[i] = code
				}
				i++
			}
		}
	}
}

// Ball sets the voxels within radius r of c (z, y, x) to code. Only the
// bounding box of the ball is visited.
func Ball(lab *volume.Labels, c [3]float64, r float64, code uint8) {
	var bb volume.Box
	for a := 0; a < 3; a++ {
		bb.Min[a] = int(math.Floor(c[a] - r))
		bb.Max[a] = int(math.Ceil(c[a]+r)) + 1
	}
	bb = bb.Intersect(lab.Box)
	r2 := r * r
	for z := bb.Min[0]; z < bb.Max[0]; z++ {
		dz := float64(z) - c[0]
		for y := bb.Min[1]; y < bb.Max[1]; y++ {
			dy := float64(y) - c[1]
			row := lab.Index(z, y, 0)
			for x := bb.Min[2]; x < bb.Max[2]; x++ {
				dx := float64(x) - c[2]
				if dz*dz+dy*dy+dx*dx <= r2 {
					lab.Pix[row+x-lab.Box.Min[2]] = code
				}
			}
		}
	}
}

// Torus sets the voxels of a solid torus to code: centre c, axis along z,
// major radius R, minor radius r (R > r).
func Torus(lab *volume.Labels, c [3]float64, R, r float64, code uint8) {
	Fill(lab, code, func(z, y, x float64) bool {
		q := math.Hypot(y-c[1], x-c[2]) - R
		dz := z - c[0]
		return q*q+dz*dz <= r*r
	})
}

// Shell sets the voxels with rin < |p - c| <= rout to code: a hollow ball
// with one cavity (Euler characteristic 2).
func Shell(lab *volume.Labels, c [3]float64, rin, rout float64, code uint8) {
	Fill(lab, code, func(z, y, x float64) bool {
		d := math.Sqrt((z-c[0])*(z-c[0]) + (y-c[1])*(y-c[1]) + (x-c[2])*(x-c[2]))
		return d > rin && d <= rout
	})
}

// CapScene describes a drop of one phase sitting on a flat solid wall: the
// solid fills z < Wall, the drop is the part of the ball of radius R above the
// wall whose angle through the drop is DropAngle (degrees), and the other
// fluid fills the rest. The contact angle through the surrounding phase is
// 180° − DropAngle (science.md, spherical cap).
type CapScene struct {
	Wall      float64    // z of the wall plane
	R         float64    // sphere radius, voxels
	DropAngle float64    // angle through the drop, degrees, in (0, 180)
	Centre    [2]float64 // (y, x) of the drop axis
}

// SphereCentreZ returns the z of the sphere centre: the cap has height
// R(1 − cos θ) above the wall.
func (c CapScene) SphereCentreZ() float64 {
	return c.Wall - c.R*math.Cos(c.DropAngle*math.Pi/180)
}

// BaseRadius returns the radius of the drop's footprint on the wall, R sin θ.
func (c CapScene) BaseRadius() float64 { return c.R * math.Sin(c.DropAngle*math.Pi/180) }

// Volume returns the drop volume (πR³/3)(1−cos θ)²(2+cos θ).
func (c CapScene) Volume() float64 {
	ct := math.Cos(c.DropAngle * math.Pi / 180)
	return math.Pi * c.R * c.R * c.R / 3 * (1 - ct) * (1 - ct) * (2 + ct)
}

// CapArea returns the area of the curved drop surface, 2πR²(1−cos θ).
func (c CapScene) CapArea() float64 {
	return 2 * math.Pi * c.R * c.R * (1 - math.Cos(c.DropAngle*math.Pi/180))
}

// Draw fills lab: solid below the wall, drop inside the cap, surround
// elsewhere.
func (c CapScene) Draw(lab *volume.Labels, solid, drop, surround uint8) {
	zc := c.SphereCentreZ()
	r2 := c.R * c.R
	Fill(lab, surround, func(z, y, x float64) bool { return true })
	Fill(lab, drop, func(z, y, x float64) bool {
		dz, dy, dx := z-zc, y-c.Centre[0], x-c.Centre[1]
		return z >= c.Wall && dz*dz+dy*dy+dx*dx <= r2
	})
	Fill(lab, solid, func(z, y, x float64) bool { return z < c.Wall })
}

// WedgeScene is a flat solid wall and a flat fluid–fluid interface meeting it
// along a straight contact line at a known angle: the solid is the half-space
// n_s·(p − P) < 0 and, in the pore space, phase A is where n_f·(p − P) > 0.
// Both planes may be tilted against the grid. Angle is the angle between the
// wall and the fluid interface measured through phase B (degrees).
type WedgeScene struct {
	Point [3]float64 // a point on the contact line (z, y, x)
	// Solid is the wall normal pointing into the pore space; Line the
	// direction of the contact line (perpendicular to Solid).
	Solid, Line [3]float64
	Angle       float64
}

// Draw fills lab with solid, phase A and phase B.
func (w WedgeScene) Draw(lab *volume.Labels, solid, a, b uint8) {
	ns := unit(w.Solid)
	// t lies in the wall, perpendicular to the contact line; phase B sits on
	// its side. In the plane spanned by t and ns the interface leaves the
	// line along cos θ·t + sin θ·ns, so B is a wedge of opening θ; the
	// interface normal pointing into A is cos θ·ns − sin θ·t.
	t := unit(cross(w.Line, ns))
	th := w.Angle * math.Pi / 180
	nf := unit(sub(scale(ns, math.Cos(th)), scale(t, math.Sin(th))))
	Fill(lab, b, func(z, y, x float64) bool { return true })
	Fill(lab, a, func(z, y, x float64) bool {
		p := [3]float64{z - w.Point[0], y - w.Point[1], x - w.Point[2]}
		return dot(nf, p) > 0
	})
	Fill(lab, solid, func(z, y, x float64) bool {
		p := [3]float64{z - w.Point[0], y - w.Point[1], x - w.Point[2]}
		return dot(ns, p) < 0
	})
}

// Boolean draws a Boolean model of balls: centres from a Poisson process of
// intensity lambda (per voxel³) in the box grown by r, each ball of radius r
// set to code. The expected volume fraction is 1 − exp(−λ·4πr³/3).
func Boolean(lab *volume.Labels, lambda, r float64, code uint8, seed uint64) {
	rng := rand.New(rand.NewPCG(seed, seed^0x9e3779b97f4a7c15))
	g := lab.Box.Grow(int(math.Ceil(r)) + 1)
	s := g.Size()
	vol := float64(s[0]) * float64(s[1]) * float64(s[2])
	n := poisson(rng, lambda*vol)
	for i := 0; i < n; i++ {
		c := [3]float64{
			float64(g.Min[0]) + rng.Float64()*float64(s[0]) - 0.5,
			float64(g.Min[1]) + rng.Float64()*float64(s[1]) - 0.5,
			float64(g.Min[2]) + rng.Float64()*float64(s[2]) - 0.5,
		}
		Ball(lab, c, r, code)
	}
}

// BooleanIntensity returns λ for a target volume fraction η-parameterisation:
// η = λ·4πr³/3.
func BooleanIntensity(eta, r float64) float64 { return eta / (4 * math.Pi * r * r * r / 3) }

func poisson(rng *rand.Rand, mean float64) int {
	if mean > 500 {
		// Normal approximation, adequate for the counts used here.
		v := int(math.Round(mean + math.Sqrt(mean)*rng.NormFloat64()))
		return max(v, 0)
	}
	l := math.Exp(-mean)
	k, p := 0, 1.0
	for {
		p *= rng.Float64()
		if p <= l {
			return k
		}
		k++
	}
}

func dot(a, b [3]float64) float64 { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }
func sub(a, b [3]float64) [3]float64 {
	return [3]float64{a[0] - b[0], a[1] - b[1], a[2] - b[2]}
}
func scale(a [3]float64, s float64) [3]float64 { return [3]float64{a[0] * s, a[1] * s, a[2] * s} }
func cross(a, b [3]float64) [3]float64 {
	return [3]float64{a[1]*b[2] - a[2]*b[1], a[2]*b[0] - a[0]*b[2], a[0]*b[1] - a[1]*b[0]}
}
func unit(a [3]float64) [3]float64 {
	n := math.Sqrt(dot(a, a))
	return scale(a, 1/n)
}
