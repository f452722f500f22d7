package curvature

import (
	"math"
	"sort"

	"sluice/pkg/levelset"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// extendIntoSolid returns a copy of lab on box (clipped to lab.Box) in
// which every solid voxel within reach (Euclidean, centre to centre) of a
// pore voxel carries a fluid label: the fluid on its side of the w–n
// interface continued into the solid (package doc, "Wall"). wcode and
// ncode are the labels written for wetting and nonwetting. Solid voxels
// whose fit fails stay solid, i.e. missing to the normalised convolution.
//
// The label written at a voxel depends only on the labels within
// extendReach(reach, rho) of it.
func extendIntoSolid(lab *volume.Labels, solid, wet, non *phase.Set, box volume.Box, reach, rho float64, wcode, ncode uint8) *volume.Labels {
	box = box.Intersect(lab.Box)
	ext := lab.Crop(box, 0)
	if box.Empty() {
		return ext
	}
	pore := levelset.Union(wet, non)
	near := levelset.Near(lab, pore, box, reach)
	// both: the cube of radius ceil(rho) holds both fluids, so the w–n
	// interface may pass within rho and the side is decided by a fit;
	// elsewhere the cube of radius ceil(reach) ≤ ceil(rho) holds one fluid
	// at most, and the voxel takes that one.
	both := levelset.Mixed(lab, wet, non, box, int(math.Ceil(rho)))
	hasW := levelset.Mixed(lab, wet, wet, box, int(math.Ceil(reach)))
	var fi *faceIndex
	var buf []face
	i := 0
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			row := lab.Pix[lab.Index(z, y, box.Min[2]):][:box.Max[2]-box.Min[2]]
			for k, l := range row {
				j := i + k
				if !solid[l] || near.Pix[j] == 0 {
					continue
				}
				switch {
				case both.Pix[j] != 0:
					if fi == nil {
						fi = newFaceIndex(lab, wet, non, box.Grow(int(math.Ceil(rho))+1))
					}
					var nw, ok bool
					buf = fi.within([3]int{z, y, box.Min[2] + k}, rho, buf[:0])
					if nw, ok = planeSide(buf, rho); !ok {
						continue
					}
					if nw {
						ext.Pix[j] = ncode
					} else {
						ext.Pix[j] = wcode
					}
				case hasW.Pix[j] != 0:
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

// extendReach returns how far from a voxel extendIntoSolid reads labels:
// the fit ball plus the face partner, or the cube of the pore test.
func extendReach(reach, rho float64) int {
	return max(int(math.Ceil(rho))+1, int(math.Ceil(reach)))
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

// within appends to fs the faces whose centre lies within rho of p, in
// z, y, x order of their lower voxel (a fixed order relative to p).
func (fi *faceIndex) within(p [3]int, rho float64, fs []face) []face {
	r := int(math.Ceil(rho))
	s := fi.box.Size()
	lo, hi := int32(p[2]-r-1), int32(p[2]+r)
	for z := max(p[0]-r-1, fi.box.Min[0]); z <= min(p[0]+r, fi.box.Max[0]-1); z++ {
		for y := max(p[1]-r-1, fi.box.Min[1]); y <= min(p[1]+r, fi.box.Max[1]-1); y++ {
			row := fi.rows[(z-fi.box.Min[0])*s[1]+y-fi.box.Min[1]]
			k := sort.Search(len(row), func(i int) bool { return row[i].x >= lo })
			for ; k < len(row) && row[k].x <= hi; k++ {
				f := row[k]
				q := [3]float64{float64(z - p[0]), float64(y - p[1]), float64(int(f.x) - p[2])}
				q[f.axis] += 0.5
				if q[0]*q[0]+q[1]*q[1]+q[2]*q[2] >= rho*rho {
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

// minFitFaces is the fewest faces a plane fit accepts.
const minFitFaces = 6

// planeSide fits a plane to the faces (centres relative to the query
// point) and reports whether the query point lies on its nonwetting side.
// Frame: N = Σ τ e/|…| (the tapered area vector of the digital interface,
// pointing into the nonwetting phase), τ = (1 − |q|²/ρ²)²; then the height
// h = q·N is fitted as c0 + c1 a + c2 b over the in-plane coordinates by
// least squares with weights τ|e·N| (each face stands for its projected
// area). The query point (a = b = 0, h = 0) is on the nonwetting side when
// c0 < 0. ok is false with fewer than minFitFaces faces or a singular
// system.
func planeSide(fs []face, rho float64) (nonwetting, ok bool) {
	if len(fs) < minFitFaces {
		return false, false
	}
	r2 := rho * rho
	var nv [3]float64
	for _, f := range fs {
		t := 1 - (f.q[0]*f.q[0]+f.q[1]*f.q[1]+f.q[2]*f.q[2])/r2
		t *= t
		for a := 0; a < 3; a++ {
			nv[a] += t * f.e[a]
		}
	}
	nn := math.Sqrt(nv[0]*nv[0] + nv[1]*nv[1] + nv[2]*nv[2])
	if !(nn > 0) {
		return false, false
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
	for _, f := range fs {
		t := 1 - (f.q[0]*f.q[0]+f.q[1]*f.q[1]+f.q[2]*f.q[2])/r2
		w := t * t * math.Abs(f.e[0]*n[0]+f.e[1]*n[1]+f.e[2]*n[2])
		x := [3]float64{1, f.q[0]*u[0] + f.q[1]*u[1] + f.q[2]*u[2], f.q[0]*v[0] + f.q[1]*v[1] + f.q[2]*v[2]}
		h := f.q[0]*n[0] + f.q[1]*n[1] + f.q[2]*n[2]
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				m[i][j] += w * x[i] * x[j]
			}
			rhs[i] += w * x[i] * h
		}
	}
	c0, ok := solve3first(m, rhs)
	if !ok {
		return false, false
	}
	return c0 < 0, true
}

// solve3first returns the first unknown of m c = b by Cramer's rule; ok is
// false when m is singular relative to its scale.
func solve3first(m [3][3]float64, b [3]float64) (float64, bool) {
	det := m[0][0]*(m[1][1]*m[2][2]-m[1][2]*m[2][1]) -
		m[0][1]*(m[1][0]*m[2][2]-m[1][2]*m[2][0]) +
		m[0][2]*(m[1][0]*m[2][1]-m[1][1]*m[2][0])
	scale := m[0][0] * m[1][1] * m[2][2]
	if !(math.Abs(det) > 1e-12*math.Abs(scale)) {
		return 0, false
	}
	d0 := b[0]*(m[1][1]*m[2][2]-m[1][2]*m[2][1]) -
		m[0][1]*(b[1]*m[2][2]-m[1][2]*b[2]) +
		m[0][2]*(b[1]*m[2][1]-m[1][1]*b[2])
	return d0 / det, true
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
