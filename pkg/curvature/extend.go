package curvature

import (
	"math"

	"sluice/pkg/levelset"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// extendIntoSolid returns a copy of lab on box (clipped to lab.Box) in
// which every solid voxel whose cube of radius reach (Chebyshev, the
// support of the smoothing kernel) holds a pore voxel carries a fluid
// label: the fluid on its side of the w–n interface continued into the
// solid (package doc, "Wall"). wcode and ncode are the labels written for
// wetting and nonwetting. Solid voxels whose fit fails stay solid, i.e.
// missing to the normalised convolution.
//
// Plane fits are made once per 2×2×2 block of the global voxel lattice
// (blocks start at even coordinates), centred on the block centre, and
// every voxel of the block that needs one is classified against that
// plane; so the label written at a voxel depends only on the labels within
// extendReach(reach, rho) of it, whatever the tiling.
func extendIntoSolid(lab *volume.Labels, solid, wet, non *phase.Set, box volume.Box, reach int, rho float64, wcode, ncode uint8) *volume.Labels {
	box = box.Intersect(lab.Box)
	ext := lab.Crop(box, 0)
	if box.Empty() {
		return ext
	}
	// holds: bit 0 a wetting, bit 1 a nonwetting voxel within the cube of
	// radius reach. With both, the w–n interface passes near and the side
	// is decided by a fit; with one, the voxel takes that fluid.
	holds := levelset.Holds(lab, wet, non, box, reach)
	var fi *faceIndex
	var buf []face
	// Blocks covering box: fits cached by block.
	blo := [3]int{floorDiv2(box.Min[0]), floorDiv2(box.Min[1]), floorDiv2(box.Min[2])}
	bhi := [3]int{floorDiv2(box.Max[0]-1) + 1, floorDiv2(box.Max[1]-1) + 1, floorDiv2(box.Max[2]-1) + 1}
	bs := [3]int{bhi[0] - blo[0], bhi[1] - blo[1], bhi[2] - blo[2]}
	var fitAt []int32 // per block: 0 not fitted, else 1 + index in fits
	var fits []planeFit
	i := 0
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			row := lab.Pix[lab.Index(z, y, box.Min[2]):][:box.Max[2]-box.Min[2]]
			for k, l := range row {
				j := i + k
				if !solid[l] || holds.Pix[j] == 0 {
					continue
				}
				x := box.Min[2] + k
				switch {
				case holds.Pix[j] == 3:
					if fi == nil {
						fi = newFaceIndex(lab, wet, non, box.Grow(int(math.Ceil(rho))+2))
						fitAt = make([]int32, bs[0]*bs[1]*bs[2])
					}
					b := [3]int{floorDiv2(z), floorDiv2(y), floorDiv2(x)}
					bi := ((b[0]-blo[0])*bs[1]+b[1]-blo[1])*bs[2] + b[2] - blo[2]
					if fitAt[bi] == 0 {
						c := [3]float64{2*float64(b[0]) + 0.5, 2*float64(b[1]) + 0.5, 2*float64(b[2]) + 0.5}
						buf = fi.within(c, rho, buf[:0])
						fits = append(fits, fitPlane(buf, rho))
						fitAt[bi] = int32(len(fits))
					}
					f := &fits[fitAt[bi]-1]
					if f.state != fitOK {
						continue
					}
					d := [3]float64{float64(z) - 2*float64(b[0]) - 0.5, float64(y) - 2*float64(b[1]) - 0.5, float64(x) - 2*float64(b[2]) - 0.5}
					if f.nonwetting(d) {
						ext.Pix[j] = ncode
					} else {
						ext.Pix[j] = wcode
					}
				case holds.Pix[j]&1 != 0:
					ext.Pix[j] = wcode
				default:
					ext.Pix[j] = ncode
				}
			}
			i += len(row)
		}
	}
	return ext
}

func floorDiv2(v int) int { return v >> 1 } // arithmetic shift: floor for negatives too

// extendReach returns how far from a voxel extendIntoSolid reads labels:
// the block offset (1) plus the fit ball and the face partner, or the cube
// of the pore test.
func extendReach(reach int, rho float64) int {
	return max(int(math.Ceil(rho))+2, reach)
}

// faceIndex lists the faces between a wetting and a nonwetting voxel of a
// box, per (z, y) row of the face's lower voxel, in increasing x.
type faceIndex struct {
	box  volume.Box
	rows [][]faceRec
}

type faceRec struct {
	x    int32
	axis int8
	sign int8 // +1: wetting at the lower voxel, nonwetting at the upper
}

func newFaceIndex(lab *volume.Labels, wet, non *phase.Set, box volume.Box) *faceIndex {
	box = box.Intersect(lab.Box)
	s := box.Size()
	fi := &faceIndex{box: box, rows: make([][]faceRec, s[0]*s[1])}
	lb := lab.Box
	ls := lb.Size()
	step := [3]int{ls[1] * ls[2], ls[2], 1}
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			var row []faceRec
			base := lab.Index(z, y, box.Min[2])
			for x := box.Min[2]; x < box.Max[2]; x++ {
				j := base + x - box.Min[2]
				l := lab.Pix[j]
				w, n := wet[l], non[l]
				if !w && !n {
					continue
				}
				up := [3]int{z + 1, y + 1, x + 1}
				for a := 0; a < 3; a++ {
					if up[a] >= lb.Max[a] {
						continue
					}
					m := lab.Pix[j+step[a]]
					if w && non[m] {
						row = append(row, faceRec{int32(x), int8(a), 1})
					} else if n && wet[m] {
						row = append(row, faceRec{int32(x), int8(a), -1})
					}
				}
			}
			fi.rows[(z-box.Min[0])*s[1]+y-box.Min[1]] = row
		}
	}
	return fi
}

// face is a w–n voxel face: centre q relative to the query voxel and unit
// normal e along a lattice axis, from the wetting to the nonwetting voxel.
type face struct {
	q, e [3]float64
}

// within appends to fs the faces whose centre lies within rho of c, with
// centres relative to c, in z, y, x order of their lower voxel (a fixed
// order relative to c).
//
// A face of row (z, y) at x has centre (z, y, x) + ½e relative to c, one
// coordinate moved by ½: rows whose nearest possible centre is at least
// rho away in (z, y) are skipped, and within a row only the x range that
// can lie inside the ball is searched (widened by a voxel on each side).
// Faces are still kept by the same test, so the list is the one of the
// plain scan of every row (TestWithinMatchesScan).
func (fi *faceIndex) within(c [3]float64, rho float64, fs []face) []face {
	var lo, hi [3]int
	for a := 0; a < 3; a++ {
		lo[a] = int(math.Floor(c[a]-rho)) - 1
		hi[a] = int(math.Ceil(c[a] + rho))
	}
	s := fi.box.Size()
	r2 := rho * rho
	for z := max(lo[0], fi.box.Min[0]); z <= min(hi[0], fi.box.Max[0]-1); z++ {
		dz := float64(z) - c[0]
		az := nearSq(dz)
		if az >= r2 {
			continue
		}
		for y := max(lo[1], fi.box.Min[1]); y <= min(hi[1], fi.box.Max[1]-1); y++ {
			dy := float64(y) - c[1]
			a := az + nearSq(dy)
			if a >= r2 {
				continue
			}
			row := fi.rows[(z-fi.box.Min[0])*s[1]+y-fi.box.Min[1]]
			if len(row) == 0 {
				continue
			}
			w := math.Sqrt(r2 - a)
			x0 := int32(max(lo[2], int(math.Floor(c[2]-0.5-w))-1))
			x1 := int32(min(hi[2], int(math.Ceil(c[2]+w))+1))
			// First face at x ≥ x0 (binary search).
			k, n := 0, len(row)
			for k < n {
				m := int(uint(k+n) >> 1)
				if row[m].x < x0 {
					k = m + 1
				} else {
					n = m
				}
			}
			for ; k < len(row) && row[k].x <= x1; k++ {
				f := row[k]
				q := [3]float64{dz, dy, float64(f.x) - c[2]}
				q[f.axis] += 0.5
				if q[0]*q[0]+q[1]*q[1]+q[2]*q[2] >= r2 {
					continue
				}
				var e [3]float64
				e[f.axis] = float64(f.sign)
				fs = append(fs, face{q, e})
			}
		}
	}
	return fs
}

// nearSq returns the smaller of d² and (d + ½)²: the nearest a face
// centre of a voxel at offset d comes to the origin along that axis.
func nearSq(d float64) float64 {
	return min(d*d, (d+0.5)*(d+0.5))
}

// minFitFaces is the fewest faces a plane fit accepts.
const minFitFaces = 6

// planeFit is a plane fitted around a centre: height h = q·n over the
// in-plane coordinates (q·u, q·v) is c[0] + c[1]·(q·u) + c[2]·(q·v).
type planeFit struct {
	state   uint8 // 0 not fitted, fitOK, fitFailed
	n, u, v [3]float64
	c       [3]float64
}

const (
	fitOK     = 1
	fitFailed = 2
)

// nonwetting reports whether the point d (relative to the fit centre) lies
// on the nonwetting side of the plane.
func (f *planeFit) nonwetting(d [3]float64) bool {
	h := d[0]*f.n[0] + d[1]*f.n[1] + d[2]*f.n[2]
	a := d[0]*f.u[0] + d[1]*f.u[1] + d[2]*f.u[2]
	b := d[0]*f.v[0] + d[1]*f.v[1] + d[2]*f.v[2]
	return h > f.c[0]+f.c[1]*a+f.c[2]*b
}

// fitPlane fits a plane to the faces (centres relative to the fit
// centre). Frame: n = Σ τ e/|…| (the tapered area vector of the digital
// interface, pointing into the nonwetting phase), τ = (1 − |q|²/ρ²)²; then
// the height h = q·n is fitted as c0 + c1 a + c2 b over the in-plane
// coordinates by least squares with weights τ|e·n| (each face stands for
// its projected area). The state is fitFailed with fewer than minFitFaces
// faces or a singular system.
func fitPlane(fs []face, rho float64) planeFit {
	f := planeFit{state: fitFailed}
	if len(fs) < minFitFaces {
		return f
	}
	r2 := rho * rho
	var nv [3]float64
	for _, fc := range fs {
		t := 1 - (fc.q[0]*fc.q[0]+fc.q[1]*fc.q[1]+fc.q[2]*fc.q[2])/r2
		t *= t
		for a := 0; a < 3; a++ {
			nv[a] += t * fc.e[a]
		}
	}
	nn := math.Sqrt(nv[0]*nv[0] + nv[1]*nv[1] + nv[2]*nv[2])
	if !(nn > 0) {
		return f
	}
	n := [3]float64{nv[0] / nn, nv[1] / nn, nv[2] / nn}
	// u: the lattice axis least aligned with n, made orthogonal to it.
	a := 0
	for k := 1; k < 3; k++ {
		if math.Abs(n[k]) < math.Abs(n[a]) {
			a = k
		}
	}
	var u [3]float64
	u[a] = 1
	for k := range u {
		u[k] -= n[a] * n[k]
	}
	un := math.Sqrt(u[0]*u[0] + u[1]*u[1] + u[2]*u[2])
	for k := range u {
		u[k] /= un
	}
	v := [3]float64{n[1]*u[2] - n[2]*u[1], n[2]*u[0] - n[0]*u[2], n[0]*u[1] - n[1]*u[0]}
	var m [3][3]float64
	var rhs [3]float64
	for _, fc := range fs {
		t := 1 - (fc.q[0]*fc.q[0]+fc.q[1]*fc.q[1]+fc.q[2]*fc.q[2])/r2
		w := t * t * math.Abs(fc.e[0]*n[0]+fc.e[1]*n[1]+fc.e[2]*n[2])
		x := [3]float64{1, fc.q[0]*u[0] + fc.q[1]*u[1] + fc.q[2]*u[2], fc.q[0]*v[0] + fc.q[1]*v[1] + fc.q[2]*v[2]}
		h := fc.q[0]*n[0] + fc.q[1]*n[1] + fc.q[2]*n[2]
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				m[i][j] += w * x[i] * x[j]
			}
			rhs[i] += w * x[i] * h
		}
	}
	c, ok := solve3(m, rhs)
	if !ok {
		return f
	}
	return planeFit{state: fitOK, n: n, u: u, v: v, c: c}
}

// solve3 solves m c = b by Cramer's rule; ok is false when m is singular
// relative to its scale.
func solve3(m [3][3]float64, b [3]float64) ([3]float64, bool) {
	det3 := func(a [3][3]float64) float64 {
		return a[0][0]*(a[1][1]*a[2][2]-a[1][2]*a[2][1]) -
			a[0][1]*(a[1][0]*a[2][2]-a[1][2]*a[2][0]) +
			a[0][2]*(a[1][0]*a[2][1]-a[1][1]*a[2][0])
	}
	var c [3]float64
	det := det3(m)
	if !(math.Abs(det) > 1e-12*math.Abs(m[0][0]*m[1][1]*m[2][2])) {
		return c, false
	}
	for k := 0; k < 3; k++ {
		mk := m
		for i := 0; i < 3; i++ {
			mk[i][k] = b[i]
		}
		c[k] = det3(mk) / det
	}
	return c, true
}

// firstCode returns the smallest label in s, ok false when s is empty.
func firstCode(s *phase.Set) (uint8, bool) {
	for l, in := range s {
		if in {
			return uint8(l), true
		}
	}
	return 0, false
}
