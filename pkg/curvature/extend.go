package curvature

import (
	"math"
	"math/bits"

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
	ball := newBlockBall(rho)
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
						buf = fi.withinBlock(b, ball, buf[:0])
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
	box volume.Box
	// recs holds the faces of every row, one row after the other; row
	// i = (z − box.Min[0])·ny + y − box.Min[1] is recs[start[i]:start[i+1]].
	recs  []faceRec
	start []int32
	// filled has bit y − box.Min[1] of plane z − box.Min[0] set when row
	// (z, y) holds a face: words of plane k at filled[k·words:].
	filled []uint64
	words  int
}

type faceRec struct {
	x    int32
	axis int8
	sign int8 // +1: wetting at the lower voxel, nonwetting at the upper
}

func newFaceIndex(lab *volume.Labels, wet, non *phase.Set, box volume.Box) *faceIndex {
	box = box.Intersect(lab.Box)
	s := box.Size()
	fi := &faceIndex{box: box, start: make([]int32, s[0]*s[1]+1), words: (s[1] + 63) / 64}
	fi.filled = make([]uint64, s[0]*fi.words)
	lb := lab.Box
	ls := lb.Size()
	step := [3]int{ls[1] * ls[2], ls[2], 1}
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			row := fi.recs
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
			i := (z-box.Min[0])*s[1] + y - box.Min[1]
			n0 := len(fi.recs)
			fi.recs = row
			fi.start[i+1] = int32(len(row))
			if len(row) > n0 {
				k := y - box.Min[1]
				fi.filled[(z-box.Min[0])*fi.words+k>>6] |= 1 << (k & 63)
			}
		}
	}
	return fi
}

// face is a w–n voxel face: centre q relative to the query voxel and unit
// normal e = sign·(axis ax), from the wetting to the nonwetting voxel.
type face struct {
	q    [3]float64
	ax   int8
	sign int8
}

// within appends to fs the faces whose centre lies within rho of c, with
// centres relative to c, in z, y, x order of their lower voxel (a fixed
// order relative to c).
//
// A face of row (z, y) at x has centre (z, y, x) + ½e relative to c, one
// coordinate moved by ½: planes and rows whose nearest possible centre is
// at least rho away are skipped, only rows holding faces are visited (a
// bit per row), and within a row only the x range that can lie inside the
// ball is searched (each range widened by a voxel on each side).
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
		// Rows of this plane that hold faces, from y0 to y1.
		wy := math.Sqrt(r2 - az)
		y0 := max(lo[1], int(math.Floor(c[1]-0.5-wy))-1, fi.box.Min[1]) - fi.box.Min[1]
		y1 := min(hi[1], int(math.Ceil(c[1]+wy))+1, fi.box.Max[1]-1) - fi.box.Min[1]
		plane := fi.filled[(z-fi.box.Min[0])*fi.words:][:fi.words]
		for k := y0; k <= y1; {
			m := plane[k>>6] >> (k & 63)
			if m == 0 {
				k = (k | 63) + 1
				continue
			}
			k += bits.TrailingZeros64(m)
			if k > y1 {
				break
			}
			y := fi.box.Min[1] + k
			k++
			dy := float64(y) - c[1]
			a := az + nearSq(dy)
			if a >= r2 {
				continue
			}
			ri := (z-fi.box.Min[0])*s[1] + y - fi.box.Min[1]
			row := fi.recs[fi.start[ri]:fi.start[ri+1]]
			w := math.Sqrt(r2 - a)
			x0 := int32(max(lo[2], int(math.Floor(c[2]-0.5-w))-1))
			x1 := int32(min(hi[2], int(math.Ceil(c[2]+w))+1))
			// First face at x ≥ x0 (binary search).
			i, n := 0, len(row)
			for i < n {
				h := int(uint(i+n) >> 1)
				if row[h].x < x0 {
					i = h + 1
				} else {
					n = h
				}
			}
			for ; i < len(row) && row[i].x <= x1; i++ {
				f := row[i]
				q := [3]float64{dz, dy, float64(f.x) - c[2]}
				q[f.axis] += 0.5
				if q[0]*q[0]+q[1]*q[1]+q[2]*q[2] >= r2 {
					continue
				}
				fs = append(fs, face{q: q, ax: f.axis, sign: f.sign})
			}
		}
	}
	return fs
}

// blockBall lists, for a fit centred on a block (centre 2b + ½ on each
// axis), the rows (z, y) = 2b + (oz, oy) that can hold a face within rho of
// the centre, in z, y order, each with the x offsets its faces can have:
// x ∈ 2b[2] + [x0, x1]. Bounds use the nearest a face centre of the row
// can come (nearSq) and are widened by a voxel, so every face within rho
// is in range; the faces are then kept by within's own test.
type blockBall struct {
	rho  float64
	rows []ballRow
}

type ballRow struct{ oz, oy, x0, x1 int }

func newBlockBall(rho float64) *blockBall {
	bb := &blockBall{rho: rho}
	r2 := rho * rho
	R := int(math.Ceil(rho)) + 1
	for oz := -R; oz <= R+1; oz++ {
		az := nearSq(float64(oz) - 0.5)
		if az >= r2 {
			continue
		}
		for oy := -R; oy <= R+1; oy++ {
			a := az + nearSq(float64(oy)-0.5)
			if a >= r2 {
				continue
			}
			x0, x1 := R+2, -R-2
			for ox := -R; ox <= R+1; ox++ {
				if a+nearSq(float64(ox)-0.5) < r2 {
					x0, x1 = min(x0, ox), max(x1, ox)
				}
			}
			if x0 <= x1 {
				bb.rows = append(bb.rows, ballRow{oz, oy, x0 - 1, x1 + 1})
			}
		}
	}
	return bb
}

// withinBlock is within(c, bb.rho) for the centre c = 2b + ½ of block b,
// visiting only the rows and x ranges of bb: the same faces in the same
// order (TestWithinBlockMatchesScan).
func (fi *faceIndex) withinBlock(b [3]int, bb *blockBall, fs []face) []face {
	c := [3]float64{2*float64(b[0]) + 0.5, 2*float64(b[1]) + 0.5, 2*float64(b[2]) + 0.5}
	r2 := bb.rho * bb.rho
	ny := fi.box.Max[1] - fi.box.Min[1]
	for _, br := range bb.rows {
		z, y := 2*b[0]+br.oz, 2*b[1]+br.oy
		if z < fi.box.Min[0] || z >= fi.box.Max[0] || y < fi.box.Min[1] || y >= fi.box.Max[1] {
			continue
		}
		ri := (z-fi.box.Min[0])*ny + y - fi.box.Min[1]
		lo, hi := fi.start[ri], fi.start[ri+1]
		if lo == hi {
			continue
		}
		row := fi.recs[lo:hi]
		x0, x1 := int32(2*b[2]+br.x0), int32(2*b[2]+br.x1)
		i := 0
		for i < len(row) && row[i].x < x0 {
			i++
		}
		dz, dy := float64(z)-c[0], float64(y)-c[1]
		for ; i < len(row) && row[i].x <= x1; i++ {
			f := row[i]
			q := [3]float64{dz, dy, float64(f.x) - c[2]}
			q[f.axis] += 0.5
			if q[0]*q[0]+q[1]*q[1]+q[2]*q[2] >= r2 {
				continue
			}
			fs = append(fs, face{q: q, ax: f.axis, sign: f.sign})
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
		// τ·e has one non-zero component, ±τ (τ > 0 inside the ball):
		// the zero ones would add +0 to sums that are never −0.
		nv[fc.ax] += t * float64(fc.sign)
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
		// |e·n| = |n[ax]| exactly: the other products are ±0.
		w := t * t * math.Abs(n[fc.ax])
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
