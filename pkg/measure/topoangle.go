package measure

// The topological contact angle of the nonwetting ganglia, after the idea of
// Sun, McClure, Mostaghimi, Herring, Berg & Armstrong 2020 (Geophys. Res.
// Lett. 47:e2019GL086151): an angle from integrals of the Gaussian curvature
// of a ganglion's surfaces and their Euler characteristics (the
// Gauss–Bonnet theorem) instead of from normals at the contact line. We did
// not have the paper's formula at hand; the relation below and its
// discretisation are our own derivation.
//
// # Derivation
//
// The surface of a nonwetting ganglion that touches no image border is
// closed (∫K dA = 4πχ_n over it, χ_n the Euler characteristic of the
// ganglion's volume) and made of two kinds of patches joined along the
// contact line: the interface with the wetting phase (wn) and the wetted
// solid surface under the ganglion (ns). Gauss–Bonnet for a surface with
// boundary, per patch kind:
//
//	∫K_wn dA + ∮κ_g,wn ds = 2πχ(wn patches)
//	∫K_ns dA + ∮κ_g,ns ds = 2πχ(ns patches)
//
// with κ_g the geodesic curvature of the contact line as the boundary of
// each patch (positive where the patch lies on the inside of the turn).
// At a point of the line, with T its tangent, kN its curvature vector and
// ν_wn, ν_ns the unit conormals (tangent to each patch, normal to T,
// pointing into the patch), κ_g = k N·ν. On a solid that is flat there,
// N lies in the solid's tangent plane normal to T, so N = ±ν_ns, and ν_wn
// makes the angle φ with ν_ns, φ the dihedral angle between the patches
// inside the nonwetting phase: κ_g,wn = κ_g,ns cos φ. The contact angle
// through the wetting phase is θ = π − φ. So
//
//	cos θ = −∮κ_g,wn ds / ∮κ_g,ns ds
//	      = −(2πχ_wn − ∫K_wn dA) / (2πχ_ns − ∫K_ns dA),
//
// a κ_g,ns-weighted mean of cos θ along the line when θ varies. Check on a
// spherical cap (sphere radius R, angle α through the cap) on a plane: both
// patches are discs (χ = 1), ∫K_cap = 2π(1 − cos α), ∫K_ns = 0, so cos θ =
// −(2π − 2π + 2π cos α)/2π = −cos α, θ = π − α. Along a solid curved
// across the line the relation gains a term sin φ·∮κ_n,s ds (κ_n,s the
// solid's normal curvature along T): in a straight tube the line is a
// geodesic of the wall, ∮κ_g,ns = 0, and the relation gives no angle.
//
// # Discretisation
//
// On a triangle mesh the discrete Gauss–Bonnet theorem (Σ interior angle
// deficits + Σ boundary (π − angles) = 2π(V − E + F)) makes ∮κ_g ds of a
// patch's boundary the sum, over the boundary's vertices, of π minus the
// patch's triangle angles there (mesh.ClipTurning), identical to
// 2πχ − Σ deficits computed separately. The wall is where segmented data
// are worst: a binary marching-cubes surface meets the solid at 90° in its
// first voxel layer whatever the angle (measured: caps of 30–150° all read
// 55–100°), and a smoothed fluid indicator is pulled toward 90° within a few
// voxels of the wall (science.md, the contact-angle pitfall). So the
// patches are taken away from the wall and the angle is carried to it:
//
//   - the fluid field φ_n = G_σ∗χ_n / G_σ∗χ_pore (σ = 1.5 voxels, normalised
//     convolution over the pore space) and the distance d(x) from the solid
//     surface (exact Euclidean distance to the nearest solid voxel centre
//     minus ½ voxel) are sampled at the voxels;
//   - for each d_k in topoOffsets (4.1, 4.6, 5.1, 5.6, 6.1 voxels): the w–n
//     interface {φ_n = ½} (marching cubes) clipped to d > d_k gives
//     ∮κ_g,wn at d_k; the offset surface {d = d_k} clipped to φ_n > ½ (the
//     ganglion's footprint lifted by d_k) gives ∮κ_g,ns at d_k;
//   - cos θ(d_k) = −Σ∮κ_g,wn / Σ∮κ_g,ns, and cos θ is the value at d = 0
//     of the least-squares line through the five (d_k, cos θ(d_k)). For a
//     spherical cap cos θ(d) = −cos α − d/R exactly, a line in d, so the
//     extrapolation is exact for caps; for other shapes it is first order.
//
// Measured on digitised caps on a plane (radius R 16–24 voxels, θ 30–120°,
// three digitisation phases of wall and axis): within 3.92° (5.75° with the
// offsets at 4, 4.5, …, 6, see topoOffsets; TestTopologicalAngleCaps
// states each error); with the analytic fields instead
// of the data within 0.15° (package mesh). Chosen against σ = 1 with
// offsets 3–5 voxels (3.4° at one phase, but 14.8° where the axis lies on a
// voxel corner: the aligned terraces of a symmetric digitisation) and
// σ = 1.25 with 3.5–5.5 (11.3°). Caps of R 12 lower than 6 voxels, or whose
// extrapolated cosine leaves [−1, 1], give none.
//
// # Which ganglia, and tiles
//
// Only ganglia that touch neither the image border (within 2 voxels of the
// image faces) nor voxels outside the sample, and whose footprint turning
// ∮κ_g,ns is at least π at every d_k (at least half a loop's turning: a
// ganglion that rises less than 6 voxels above the solid, or sits in a
// straight throat, has none), give an angle. The sums add over ganglia (the
// step's angle) and give each ganglion its own angle (the median).
//
// Every cut point of a tile's meshes is owned by the tile whose core holds
// the cube it lies in (floor of its coordinates), and its turning goes to
// the ganglion of the nearest nonwetting voxel (within 2 voxels; through
// the tile merge's foreign sums when that voxel lies in another tile). The
// fields at a point depend only on voxels within the halo, so the sums are
// those of the whole volume whatever the tiling (to rounding).

import (
	"fmt"
	"math"
	"slices"

	"sluice/pkg/cluster"
	"sluice/pkg/distance"
	"sluice/pkg/levelset"
	"sluice/pkg/mesh"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// topoOffsets are the distances from the solid surface (voxels) at which
// the contact-line turnings are taken. The distance field takes the values
// √k − ½ (k an integer), so d + ½ must not be the root of an integer: at
// d = 4.5 or 5.5 whole sets of samples lie exactly on the level, marching
// cubes puts several vertices on each of them, and the turnings of the
// degenerate triangles there are noise (seen on the demo's rock: a
// footprint's turning 654 rad at 4.5 voxels between −21 and 12 rad at 4 and
// 5).
var topoOffsets = [cluster.TopoLevels]float64{4.1, 4.6, 5.1, 5.6, 6.1}

// topoBandLo and topoBandHi bound the distances from the solid (voxels) at
// which the fluid field is kept for the w–n mesh: the offsets ± 3 voxels.
const (
	topoBandLo = 1.0
	topoBandHi = 9.0
)

// topoSigma is the Gaussian σ (voxels) of the fluid field.
const topoSigma = 1.5

// topoReach is how far beyond the sampled box the distance transform must
// see the solid: the largest offset (6) plus the half voxel added to it and
// the cube a sample's value is interpolated in, rounded up, with a voxel to
// spare.
const topoReach = 9

// topoHalo is the halo the topological angle needs: the distance transform's
// reach beyond the samples (core grown by 1).
func topoHalo() int { return max(topoReach+1, levelset.Radius(topoSigma)+1) }

// TopoMinTurning is the smallest footprint turning ∮κ_g,ns (radians) at
// every offset for a ganglion to give an angle: half a loop's 2π.
const TopoMinTurning = math.Pi

// topoShares sets t.Topo (and t.TopoMeasured): each local component's
// share of the contact-line turning sums; shares of nonwetting voxels
// outside the core go to foreign (see attributeGanglia).
func topoShares(t *cluster.Tile, look *cluster.Lookup, lab *volume.Labels, solid, wet, non *phase.Set, whole volume.Box,
	owner func(v [3]int) (local, piece int32), foreign func(piece int32, s cluster.TopoSums)) {
	core := t.Core
	t.TopoMeasured = true
	t.Topo = make([]cluster.TopoSums, len(t.Sizes))
	// Border: a component with a voxel within 2 of the image faces or a
	// face neighbour outside the sample.
	look.Runs(func(z, y, x0, x1 int, id int32) {
		s := &t.Topo[id-1]
		if s.Border {
			return
		}
		near := func(v, lo, hi int) bool { return v-lo < 2 || hi-1-v < 2 }
		if near(z, whole.Min[0], whole.Max[0]) || near(y, whole.Min[1], whole.Max[1]) ||
			x0-whole.Min[2] < 2 || whole.Max[2]-x1 < 2 {
			s.Border = true
			return
		}
		for x := x0; x < x1; x++ {
			for _, d := range [6][3]int{{-1, 0, 0}, {1, 0, 0}, {0, -1, 0}, {0, 1, 0}, {0, 0, -1}, {0, 0, 1}} {
				q := [3]int{z + d[0], y + d[1], x + d[2]}
				if lab.Box.Contains(q[0], q[1], q[2]) && lab.At(q[0], q[1], q[2]) == phase.Outside {
					s.Border = true
					return
				}
			}
		}
	})
	// Samples: the core grown by one (cubes from core.Min−1 to core.Max−1).
	fb := core.Grow(1).Intersect(whole)
	// Turnings count only for ganglia that can give an angle, and a local
	// component touching the border belongs to a ganglion that touches it
	// (refused whatever the other tiles find). So the fields and meshes are
	// needed only around the voxels a cut point can be given to that do
	// not belong to such a component (topoKeepBox); every cut point given to
	// one of them, the triangles at it and the samples those depend on lie
	// within topoKeepMargin of it, so the sums of the other components are
	// those of the whole sample box (TestTopoKeepBoxSameSums).
	if !topoKeepAll {
		kb, ok := topoKeepBox(t, look, lab, non, owner)
		if !ok {
			return
		}
		fb = fb.Intersect(kb.Grow(topoKeepMargin))
	}
	if !anyIn(lab, non, fb) {
		return
	}
	pore := levelset.Union(wet, non)
	a := levelset.Fraction(lab, non, pore, fb, topoSigma)
	for i, v := range a.Pix {
		if v != v { // NaN: no pore space within reach
			v = 0
		}
		a.Pix[i] = offLevel(v - 0.5)
	}
	// Distance from the solid surface: to the nearest solid voxel centre,
	// minus half a voxel, computed on the samples grown by topoReach.
	db := fb.Grow(topoReach).Intersect(lab.Box)
	sub := lab.Crop(db, 0)
	sq := distance.SquaredToSet(sub, solid)
	dist := volume.New[float32](fb, lab.VoxelSize)
	nx := fb.Max[2] - fb.Min[2]
	for z := fb.Min[0]; z < fb.Max[0]; z++ {
		for y := fb.Min[1]; y < fb.Max[1]; y++ {
			src := sq[sub.Index(z, y, fb.Min[2]):][:nx]
			dst := dist.Pix[dist.Index(z, y, fb.Min[2]):][:nx]
			for x, v := range src {
				dst[x] = float32(math.Min(math.Sqrt(v), 1e3) - 0.5)
			}
		}
	}
	// Samples within 3 voxels (Chebyshev) of a sign change of the fluid
	// field between face neighbours: a cut point of an offset surface lies
	// within a voxel of such a change, the triangles sharing its edge within
	// 1.7 voxels, and the corners of their cubes within 3; beyond, every
	// cube's corners have one sign of the field, so a surface the mask
	// leaves there (the offset surface stops at the mask) has no cut point.
	nearN := dilate(interfaceSamples(a), fb.Size(), 3)
	// The w–n interface matters only where it crosses the offsets: a cut
	// point at d_k lies on a mesh edge within a cube, the angles there come
	// from triangles within a voxel of it, and their vertices from the
	// samples of their grid edges, so samples farther than 2.8 voxels from
	// every d_k (d outside [topoBandLo, topoBandHi]) may be dropped from the
	// fluid (a surface then closes there, away from every cut).
	band := a.Clone()
	for i, d := range dist.Pix {
		if d < topoBandLo || d > topoBandHi {
			band.Pix[i] = -0.5
		}
	}
	cubes := volume.Box{Min: core.Min, Max: core.Max}
	for k := 0; k < 3; k++ {
		cubes.Min[k]--
	}
	cubes = cubes.Intersect(volume.Box{Min: fb.Min, Max: [3]int{fb.Max[0] - 1, fb.Max[1] - 1, fb.Max[2] - 1}})
	// Nearest nonwetting voxel of a cut point and its owner.
	type slot struct {
		local, piece int32
	}
	pieces := map[int32]*cluster.TopoSums{}
	add := func(p [3]float64, k int, ns bool, turn float64) {
		c := [3]int{int(math.Floor(p[0])), int(math.Floor(p[1])), int(math.Floor(p[2]))}
		if !core.Contains(c[0], c[1], c[2]) {
			return
		}
		best, bd := [3]int{}, math.Inf(1)
		for dz := -1; dz <= 2; dz++ {
			for dy := -1; dy <= 2; dy++ {
				for dx := -1; dx <= 2; dx++ {
					v := [3]int{c[0] + dz, c[1] + dy, c[2] + dx}
					if !lab.Box.Contains(v[0], v[1], v[2]) || !non[lab.At(v[0], v[1], v[2])] {
						continue
					}
					d := sq3(float64(v[0])-p[0], float64(v[1])-p[1], float64(v[2])-p[2])
					if d < bd {
						best, bd = v, d
					}
				}
			}
		}
		if math.IsInf(bd, 1) {
			return
		}
		var s slot
		if l := look.At(best[0], best[1], best[2]); l > 0 {
			s.local = l
		} else {
			s.local, s.piece = owner(best)
			if s.local == 0 && s.piece == 0 {
				return
			}
		}
		var sums *cluster.TopoSums
		if s.local > 0 {
			sums = &t.Topo[s.local-1]
		} else {
			sums = pieces[s.piece]
			if sums == nil {
				sums = &cluster.TopoSums{}
				pieces[s.piece] = sums
			}
		}
		if ns {
			sums.NS[k] += turn
		} else {
			sums.WN[k] += turn
		}
	}
	wn := mesh.MarchShape(band, 0, cubes)
	dv := make([]float64, len(wn.Vertices)) // distance from the solid at each vertex
	for i, v := range wn.Vertices {
		dv[i] = mesh.Sample(dist, v)
	}
	keep := make([]float64, len(wn.Vertices))
	od := volume.New[float32](fb, lab.VoxelSize)
	for k, d := range topoOffsets {
		for i := range keep {
			keep[i] = dv[i] - d
		}
		wn.ClipTurning(keep, func(p [3]float64, _ int32, turn float64) { add(p, k, false, turn) })
		for i, v := range dist.Pix {
			if nearN[i] {
				od.Pix[i] = offLevel(v - float32(d))
			} else {
				od.Pix[i] = -1
			}
		}
		ns := mesh.MarchShape(od, 0, cubes)
		kn := make([]float64, len(ns.Vertices))
		for i, v := range ns.Vertices {
			kn[i] = mesh.Sample(a, v)
		}
		ns.ClipTurning(kn, func(p [3]float64, _ int32, turn float64) { add(p, k, true, turn) })
	}
	ids := make([]int32, 0, len(pieces))
	for id := range pieces {
		ids = append(ids, id)
	}
	slices.Sort(ids)
	for _, id := range ids {
		foreign(id, *pieces[id])
	}
}

func sq3(a, b, c float64) float64 { return a*a + b*b + c*c }

// topoKeepMargin (voxels) bounds how far from the nonwetting voxel it is
// given to a cut point's turning reads the fields: the cut point lies in a
// cube within 2 voxels of the voxel, the triangles at it in the cubes
// around that one, their vertices on the cubes' edges; a sample's offset
// field depends on the sign changes of the fluid field within 3 voxels
// (nearN), each between face neighbours. That is 2 + 1 + 1 + 3 + 1 = 8; the
// margin keeps 6 voxels to spare.
const topoKeepMargin = 14

// topoKeepAll turns the restriction to topoKeepBox off (for the test that
// compares both).
var topoKeepAll = false

// topoKeepBox returns the bounding box of the nonwetting voxels whose cut
// points can count: core voxels of local components not on the border, and
// nonwetting voxels within 3 voxels outside the core (a cut point in the
// core is given to a voxel at most 2 voxels from its cube) that belong to
// such a component or to a piece of another tile, whose border this tile
// cannot see. ok is false when there is none.
func topoKeepBox(t *cluster.Tile, look *cluster.Lookup, lab *volume.Labels, non *phase.Set,
	owner func(v [3]int) (local, piece int32)) (b volume.Box, ok bool) {
	add := func(z, y, x0, x1 int) {
		lo, hi := [3]int{z, y, x0}, [3]int{z + 1, y + 1, x1}
		if !ok {
			b, ok = volume.Box{Min: lo, Max: hi}, true
			return
		}
		for k := 0; k < 3; k++ {
			b.Min[k], b.Max[k] = min(b.Min[k], lo[k]), max(b.Max[k], hi[k])
		}
	}
	look.Runs(func(z, y, x0, x1 int, id int32) {
		if !t.Topo[id-1].Border {
			add(z, y, x0, x1)
		}
	})
	core := t.Core
	shell := core.Grow(3).Intersect(lab.Box)
	for z := shell.Min[0]; z < shell.Max[0]; z++ {
		for y := shell.Min[1]; y < shell.Max[1]; y++ {
			for x := shell.Min[2]; x < shell.Max[2]; x++ {
				if core.Contains(z, y, x) {
					x = core.Max[2] - 1 // the rest of the row's core part
					continue
				}
				if !non[lab.At(z, y, x)] {
					continue
				}
				local, piece := owner([3]int{z, y, x})
				if (local == 0 && piece == 0) || (local > 0 && t.Topo[local-1].Border) {
					continue
				}
				add(z, y, x, x+1)
			}
		}
	}
	return b, ok
}

// offLevel moves a field value lying exactly on the level 0 a hair below it,
// so no marching-cubes vertex falls on a sample (where the edges of the
// sample would put several vertices at one place).
func offLevel(v float32) float32 {
	if v == 0 {
		return -1e-6
	}
	return v
}

// anyIn reports whether a voxel of box (clipped to lab) is in s.
func anyIn(lab *volume.Labels, s *phase.Set, box volume.Box) bool {
	box = box.Intersect(lab.Box)
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			for _, v := range lab.Pix[lab.Index(z, y, box.Min[2]):][:box.Max[2]-box.Min[2]] {
				if s[v] {
					return true
				}
			}
		}
	}
	return false
}

// interfaceSamples marks the samples of f whose sign (f > 0) differs from
// that of a face neighbour.
func interfaceSamples(f *volume.Volume[float32]) []bool {
	n := f.Box.Size()
	m := make([]bool, len(f.Pix))
	nx, sz := n[2], n[1]*n[2]
	for z := 0; z < n[0]; z++ {
		for y := 0; y < n[1]; y++ {
			i0 := z*sz + y*nx
			row := f.Pix[i0 : i0+nx]
			var up, next []float32 // the row at y+1 and at z+1
			if y+1 < n[1] {
				up = f.Pix[i0+nx : i0+2*nx]
			}
			if z+1 < n[0] {
				next = f.Pix[i0+sz : i0+sz+nx]
			}
			for x, v := range row {
				in := v > 0
				if x+1 < nx && (row[x+1] > 0) != in {
					m[i0+x], m[i0+x+1] = true, true
				}
				if up != nil && (up[x] > 0) != in {
					m[i0+x], m[i0+nx+x] = true, true
				}
				if next != nil && (next[x] > 0) != in {
					m[i0+x], m[i0+sz+x] = true, true
				}
			}
		}
	}
	return m
}

// dilate returns the samples of a box of shape n within Chebyshev distance
// r of a sample marked in m: a running count of marked samples in the
// window [c−r, c+r] along each axis in turn (separable, linear in the box
// whatever r).
func dilate(m []bool, n [3]int, r int) []bool {
	out := slices.Clone(m)
	tmp := make([]bool, len(m))
	stride := [3]int{n[1] * n[2], n[2], 1}
	for ax := 0; ax < 3; ax++ {
		copy(tmp, out)
		length, st := n[ax], stride[ax]
		if length == 0 {
			return out
		}
		// Sample (o, c, j) of the box seen as outer × length × st is at
		// o·length·st + c·st + j; a line along ax is one (o, j).
		for l := 0; l < len(m)/length; l++ {
			start := l/st*length*st + l%st
			cnt := 0
			for c := 0; c < min(r, length); c++ {
				if tmp[start+c*st] {
					cnt++
				}
			}
			for c := 0; c < length; c++ {
				if c+r < length && tmp[start+(c+r)*st] {
					cnt++
				}
				if c-r-1 >= 0 && tmp[start+(c-r-1)*st] {
					cnt--
				}
				out[start+c*st] = cnt > 0
			}
		}
	}
	return out
}

// TopoAngle is the topological contact angle from summed turnings.
type TopoAngle struct {
	// Cos is cos θ extrapolated to the wall; Deg the angle through the
	// wetting phase (nil when |Cos| > 1).
	Cos float64
	Deg *float64
}

// topoFit returns cos θ at the wall from the turnings at topoOffsets: the
// least-squares line through (d_k, −WN_k/NS_k) evaluated at d = 0.
func topoFit(s cluster.TopoSums) TopoAngle {
	var sx, sy, sxx, sxy float64
	n := float64(len(topoOffsets))
	for k, d := range topoOffsets {
		c := -s.WN[k] / s.NS[k]
		sx += d
		sy += c
		sxx += d * d
		sxy += d * c
	}
	b := (n*sxy - sx*sy) / (n*sxx - sx*sx)
	c0 := (sy - b*sx) / n
	r := TopoAngle{Cos: c0}
	if math.Abs(c0) <= 1 {
		r.Deg = ptr(math.Acos(c0) * 180 / math.Pi)
	}
	return r
}

// topoEligible reports whether a ganglion gives a topological angle: closed
// by fluid and solid (no border) and a footprint turning of at least
// TopoMinTurning at every offset.
func topoEligible(g cluster.Ganglion) bool {
	if g.Topo.Border || g.Connected() {
		return false
	}
	for _, v := range g.Topo.NS {
		if !(v >= TopoMinTurning) {
			return false
		}
	}
	return true
}

// topoNone says why no ganglion gave a topological angle, from the number
// of trapped ganglia and how many of them touch the border.
func topoNone(trapped, border int) string {
	const rise = "rises 6 voxels above the solid with a footprint turning of at least π"
	const edge = "the image border or the sample's edge"
	switch {
	case trapped == 0:
		return "no trapped ganglion (every ganglion touches the inlet or the outlet face)"
	case trapped == 1 && border == 1:
		return "the one trapped ganglion touches " + edge
	case trapped == 1:
		return "the one trapped ganglion does not rise 6 voxels above the solid with a footprint turning of at least π"
	case border == trapped:
		return fmt.Sprintf("all %d trapped ganglia touch %s", trapped, edge)
	case border == 0:
		return fmt.Sprintf("none of the %d trapped ganglia %s", trapped, rise)
	}
	return fmt.Sprintf("of the %d trapped ganglia, %d touch %s and none of the other %d %s", trapped, border, edge, trapped-border, rise)
}

// setTopo fills the topological contact-angle keys from the merged ganglia.
func (r *Result) setTopo(ganglia []cluster.Ganglion) {
	var sum cluster.TopoSums
	var per []float64
	trapped, border := 0, 0
	for _, g := range ganglia {
		if !g.Connected() {
			trapped++
			if g.Topo.Border {
				border++
			}
		}
		if !topoEligible(g) {
			continue
		}
		r.TopoGanglia++
		sum.Add(g.Topo)
		if a := topoFit(g.Topo); a.Deg != nil {
			per = append(per, *a.Deg)
		}
	}
	if r.TopoGanglia == 0 {
		r.TopoNote = topoNone(trapped, border)
		return
	}
	a := topoFit(sum)
	r.TopoCos = ptr(a.Cos)
	r.TopoAngle = a.Deg
	if a.Deg == nil {
		r.TopoNote = "the extrapolated cos θ lies outside [−1, 1]"
	}
	if len(per) > 0 {
		slices.Sort(per)
		m := per[len(per)/2]
		if len(per)%2 == 0 {
			m = (per[len(per)/2-1] + per[len(per)/2]) / 2
		}
		r.TopoMedian = ptr(m)
	}
}
