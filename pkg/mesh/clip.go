package mesh

import (
	"cmp"
	"math"
	"slices"

	"sluice/pkg/volume"
)

// clipEps is the smallest |keep| ClipTurning takes as is.
const clipEps = 1e-6

// ClipTurning clips the mesh to the part where keep > 0 (keep given at the
// vertices, linearly interpolated along the edges it cuts) and calls fn for
// every point where the cut crosses a mesh edge, with the point and the
// turning there: π − Σ (angles at the point of the kept pieces of the
// triangles sharing that edge). It is the discrete geodesic curvature of
// the kept part's boundary at the point, integrated over the point's share
// of the boundary; the turnings of a closed cut add up to ∮κ_g ds, which
// by the discrete Gauss–Bonnet theorem equals 2π·χ − Σ(angle deficits of
// the kept interior vertices) of the kept part (Meyer, Desbrun, Schröder &
// Barr 2003 for the deficits; the boundary form is the standard discrete
// theorem: Σ interior deficits + Σ boundary (π − angles) = 2π(V − E + F)).
// A cut through a triangle leaves a convex piece, so its angle at a cut
// point does not depend on how the piece is triangulated.
//
// A vertex within clipEps of the cut counts as kept, clipEps inside, so
// that the cut passes beside it: several edges would otherwise put cut
// points at one place, with pieces too thin for their angles. An edge with
// one triangle (an open mesh) gives its cut point one piece's angle only:
// such points are the caller's to discard. Points come in a fixed order
// (by the mesh ids of the cut edge), so sums over them are reproducible.
func (m *Mesh) ClipTurning(keep []float64, fn func(p [3]float64, kept int32, turning float64)) {
	kv := func(i int32) float64 {
		if math.Abs(keep[i]) < clipEps {
			return clipEps
		}
		return keep[i]
	}
	type ek struct{ a, b int32 } // a kept, b not
	type cut struct {
		e     ek
		p     [3]float64
		angle float64
	}
	cuts := map[ek]*cut{}
	cutAt := func(a, b int32) *cut {
		k := ek{a, b}
		if c := cuts[k]; c != nil {
			return c
		}
		t := kv(a) / (kv(a) - kv(b))
		pa, pb := m.Vertices[a], m.Vertices[b]
		c := &cut{e: k}
		for j := range c.p {
			c.p[j] = pa[j] + t*(pb[j]-pa[j])
		}
		cuts[k] = c
		return c
	}
	angle := func(p, q, r [3]float64) float64 {
		u, w := sub(q, p), sub(r, p)
		nu, nw := math.Sqrt(dot(u, u)), math.Sqrt(dot(w, w))
		if nu == 0 || nw == 0 {
			return 0
		}
		return math.Acos(math.Max(-1, math.Min(1, dot(u, w)/(nu*nw))))
	}
	type pv struct {
		p [3]float64
		c *cut // nil for a mesh vertex
	}
	var poly []pv
	for _, t := range m.Triangles {
		poly = poly[:0]
		for k := 0; k < 3; k++ {
			a, b := t[k], t[(k+1)%3]
			ka, kb := kv(a) > 0, kv(b) > 0
			if ka {
				poly = append(poly, pv{p: m.Vertices[a]})
			}
			if ka != kb {
				var c *cut
				if ka {
					c = cutAt(a, b)
				} else {
					c = cutAt(b, a)
				}
				poly = append(poly, pv{p: c.p, c: c})
			}
		}
		n := len(poly)
		if n < 3 {
			continue
		}
		for i, v := range poly {
			if v.c != nil {
				v.c.angle += angle(v.p, poly[(i+1)%n].p, poly[(i+n-1)%n].p)
			}
		}
	}
	list := make([]*cut, 0, len(cuts))
	for _, c := range cuts {
		list = append(list, c)
	}
	slices.SortFunc(list, func(x, y *cut) int {
		if c := cmp.Compare(x.e.a, y.e.a); c != 0 {
			return c
		}
		return cmp.Compare(x.e.b, y.e.b)
	})
	for _, c := range list {
		fn(c.p, c.e.a, math.Pi-c.angle)
	}
}

// Sample returns f at p (global (z, y, x) voxel coordinates) by trilinear
// interpolation of the samples around p; samples outside f count as 0.
func Sample(f *volume.Volume[float32], p [3]float64) float64 {
	lo := [3]int{int(math.Floor(p[0])), int(math.Floor(p[1])), int(math.Floor(p[2]))}
	var s float64
	for b := 0; b < 8; b++ {
		w := 1.0
		var c [3]int
		for j := 0; j < 3; j++ {
			bit := b >> (2 - j) & 1
			c[j] = lo[j] + bit
			fr := p[j] - float64(lo[j])
			if bit == 1 {
				w *= fr
			} else {
				w *= 1 - fr
			}
		}
		if w == 0 || !f.Box.Contains(c[0], c[1], c[2]) {
			continue
		}
		s += w * float64(f.At(c[0], c[1], c[2]))
	}
	return s
}
