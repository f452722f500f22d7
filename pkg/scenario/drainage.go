package scenario

import (
	"fmt"
	"math"

	"sluice/pkg/distance"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Face names a face of the image box: the axis it is normal to (0 = z,
// 1 = y, 2 = x) and whether it is the high end of that axis. The zero value
// is the low-z face, the default inlet.
type Face struct {
	Axis int
	High bool
}

// Opposite returns the face across the box.
func (f Face) Opposite() Face { return Face{Axis: f.Axis, High: !f.High} }

func (f Face) String() string {
	end := "low"
	if f.High {
		end = "high"
	}
	return end + " " + [3]string{"z", "y", "x"}[f.Axis%3]
}

// DrainageOptions configure a Drainage.
type DrainageOptions struct {
	// Inlet is the face in contact with the nonwetting reservoir; the
	// opposite face is the outlet, in contact with the wetting reservoir.
	// The zero value is the low-z face.
	Inlet Face
	// Connectivity of the nonwetting phase (of the ball-centre set through
	// which it invades): 26 (default; 0 means 26) or 6. The wetting phase
	// uses the complementary connectivity (6 for 26, 26 for 6) when trapping.
	Connectivity int
	// OpenSides leaves the four faces parallel to the flow axis open. By
	// default they are walls (solid beyond the box), as in a sample held in
	// a sleeve; the inlet and outlet faces are always open.
	OpenSides bool
}

// Drainage is full-morphology (morphological) drainage of one rock
// (Hilpert & Miller 2001, Adv. Water Resour. 24:243). For a capillary
// radius r_c, the pore voxels that may hold a ball centre are those whose
// centre is farther than r_c from every non-pore voxel centre (so the
// closed digital ball of radius r_c about it lies in the pore space); the
// nonwetting phase occupies every voxel within r_c of a centre connected
// through centres to the inlet face. Everything else in the pore space is
// wetting. The capillary pressure of the state is Pc = 2σ/r_c
// (Young–Laplace for the spherical menisci of radius r_c).
//
// The squared distance of each voxel to the nearest non-pore voxel is
// computed once, exactly (pkg/distance, Felzenszwalb & Huttenlocher 2012),
// and reused for every r_c; each state then costs one flood fill of the
// centre set and one exact distance transform of the connected centres
// (dilation by the ball of radius r_c), the latter restricted to the
// bounding box of those centres grown by r_c.
//
// Because the nonwetting set is the dilation of a centre set by the
// digital ball of radius r_c, and every such ball lies in the pore space,
// it is exactly invariant under morphological opening by that ball.
type Drainage struct {
	rock  *volume.Labels
	shape [3]int
	// pore[i] is true for pore voxels; i follows rock.Pix.
	pore []bool
	// dist2[i] is the squared distance (voxel units, an exact integer) from
	// voxel i to the nearest non-pore voxel centre, walls included.
	dist2 []float32
	// reach2[i] is the largest r² at which voxel i is a ball centre
	// connected to the inlet through centres: the bottleneck (maximin) of
	// dist2 over the best path from the inlet face, 0 for solid voxels.
	reach2 []float32
	opt    DrainageOptions
}

// NewDrainage prepares the drainage of rock, whose pore space is the
// voxels whose labels are in pore (everything else, phase.Outside included,
// is solid). rock is kept, not copied: do not change it while d is in use.
func NewDrainage(rock *volume.Labels, pore *phase.Set, opt DrainageOptions) (*Drainage, error) {
	if err := rock.Validate(); err != nil {
		return nil, fmt.Errorf("scenario: drainage: %w", err)
	}
	if opt.Connectivity == 0 {
		opt.Connectivity = 26
	}
	if opt.Connectivity != 6 && opt.Connectivity != 26 {
		return nil, fmt.Errorf("scenario: drainage connectivity must be 6 or 26, not %d", opt.Connectivity)
	}
	if opt.Inlet.Axis < 0 || opt.Inlet.Axis > 2 {
		return nil, fmt.Errorf("scenario: drainage inlet axis %d, want 0 (z), 1 (y) or 2 (x)", opt.Inlet.Axis)
	}
	d := &Drainage{rock: rock, shape: rock.Box.Size(), opt: opt}
	d.pore = make([]bool, len(rock.Pix))
	solid := make([]bool, len(rock.Pix))
	for i, v := range rock.Pix {
		d.pore[i] = pore[v]
		solid[i] = !pore[v]
	}
	f := distance.SquaredToMask(solid, d.shape)
	d.dist2 = make([]float32, len(f))
	n := d.shape
	i := 0
	for z := 0; z < n[0]; z++ {
		for y := 0; y < n[1]; y++ {
			for x := 0; x < n[2]; x++ {
				v := f[i]
				if !opt.OpenSides {
					// The wall beyond a side face is a full plane of solid
					// voxels one voxel outside the box: its nearest centre
					// is straight across.
					c := [3]int{z, y, x}
					for a := 0; a < 3; a++ {
						if a == opt.Inlet.Axis {
							continue
						}
						lo, hi := float64(c[a]+1), float64(n[a]-c[a])
						v = math.Min(v, math.Min(lo*lo, hi*hi))
					}
				}
				d.dist2[i] = float32(v)
				i++
			}
		}
	}
	d.reach2 = widestPaths(d.dist2, d.pore, d.shape, opt.Inlet, opt.Connectivity)
	return d, nil
}

// widestPaths returns, for every pore voxel, the largest value m such that a
// path of pore voxels (with the given connectivity) whose dist2 all exceed
// or equal m joins it to the inlet face: the bottleneck of the widest path,
// found by a best-first flood with one bucket per distinct dist2 value
// (dist2 holds integers, so the buckets are exact).
func widestPaths(dist2 []float32, pore []bool, shape [3]int, inlet Face, connectivity int) []float32 {
	// Rank the distinct values.
	maxV := 0
	for i, v := range dist2 {
		if pore[i] && int(v) > maxV {
			maxV = int(v)
		}
	}
	rank := make([]int32, maxV+1)
	for i := range rank {
		rank[i] = -1
	}
	for i, v := range dist2 {
		if pore[i] {
			rank[int(v)] = 0
		}
	}
	var values []float32
	for v := range rank {
		if rank[v] == 0 {
			rank[v] = int32(len(values))
			values = append(values, float32(v))
		}
	}
	best := make([]float32, len(dist2))
	done := make([]bool, len(dist2))
	buckets := make([][]int32, len(values))
	top := -1
	push := func(i int, key float32) {
		r := int(rank[int(key)])
		buckets[r] = append(buckets[r], int32(i))
		top = max(top, r)
	}
	forFace(shape, inlet, func(i int) {
		if pore[i] {
			best[i] = dist2[i]
			push(i, dist2[i])
		}
	})
	nz, ny, nx := shape[0], shape[1], shape[2]
	sy, sz := nx, nx*ny
	for top >= 0 {
		if len(buckets[top]) == 0 {
			buckets[top] = nil
			top--
			continue
		}
		b := buckets[top]
		i := int(b[len(b)-1])
		buckets[top] = b[:len(b)-1]
		if done[i] {
			continue
		}
		done[i] = true
		key := best[i]
		z, y, x := i/sz, (i/sy)%ny, i%nx
		for dz := -1; dz <= 1; dz++ {
			zz := z + dz
			if zz < 0 || zz >= nz {
				continue
			}
			for dy := -1; dy <= 1; dy++ {
				yy := y + dy
				if yy < 0 || yy >= ny {
					continue
				}
				for dx := -1; dx <= 1; dx++ {
					xx := x + dx
					if xx < 0 || xx >= nx || (connectivity == 6 && abs(dz)+abs(dy)+abs(dx) != 1) {
						continue
					}
					j := zz*sz + yy*sy + xx
					if !pore[j] || done[j] {
						continue
					}
					k := min(key, dist2[j])
					if k > best[j] {
						best[j] = k
						push(j, k)
					}
				}
			}
		}
	}
	return best
}

// Rock returns the rock the drainage was prepared for.
func (d *Drainage) Rock() *volume.Labels { return d.rock }

// PoreVoxels counts the pore voxels.
func (d *Drainage) PoreVoxels() int {
	c := 0
	for _, p := range d.pore {
		if p {
			c++
		}
	}
	return c
}

// InscribedRadius returns the distance from voxel (z, y, x) (global
// coordinates) to the nearest non-pore voxel centre: the radius of the
// largest open ball about it that holds pore voxels only.
func (d *Drainage) InscribedRadius(z, y, x int) float64 {
	return math.Sqrt(float64(d.dist2[d.rock.Index(z, y, x)]))
}

// BreakthroughRadius returns the capillary radius below which the ball
// centres connected to the inlet reach the outlet face, so that the
// nonwetting phase spans the sample (it may touch the outlet face at a
// slightly larger r_c, when a ball near the outlet reaches across).
func (d *Drainage) BreakthroughRadius() float64 {
	m := float32(0)
	forFace(d.shape, d.opt.Inlet.Opposite(), func(i int) {
		if d.reach2[i] > m {
			m = d.reach2[i]
		}
	})
	return math.Sqrt(float64(m))
}

// EntryRadius returns the capillary radius below which the nonwetting phase
// starts to enter: the largest inscribed radius of a pore voxel on the inlet
// face. At r_c ≥ EntryRadius the sample holds no nonwetting phase.
func (d *Drainage) EntryRadius() float64 {
	m := float32(0)
	forFace(d.shape, d.opt.Inlet, func(i int) {
		if d.pore[i] && d.dist2[i] > m {
			m = d.dist2[i]
		}
	})
	return math.Sqrt(float64(m))
}

// Invade returns the nonwetting mask (layout of rock.Pix) at capillary
// radius rc (voxels). trapped, if not nil, marks wetting voxels that may
// not be displaced (trapped wetting phase, see Trap): ball centres then
// also keep a distance greater than rc from every trapped voxel, so no
// ball overlaps trapped wetting phase.
func (d *Drainage) Invade(rc float64, trapped []bool) []bool {
	n := len(d.pore)
	r2 := rc * rc
	if q := math.Round(r2); math.Abs(r2-q) < 1e-9*q {
		r2 = q // rc = √k: compare with the integer k, not its rounding
	}
	var conn []bool
	if trapped != nil && anyTrue(trapped) {
		trapD2 := distance.SquaredToMask(trapped, d.shape)
		centre := make([]bool, n)
		for i := range centre {
			centre[i] = d.pore[i] && float64(d.dist2[i]) > r2 && trapD2[i] > r2
		}
		conn = FloodFromFace(centre, d.shape, d.opt.Inlet, d.opt.Connectivity)
	} else {
		// Without trapping the connected centres at rc are exactly the
		// voxels whose widest path from the inlet stays above rc.
		conn = make([]bool, n)
		for i := range conn {
			conn[i] = float64(d.reach2[i]) > r2
		}
	}
	nw := make([]bool, n)
	bb, ok := boundsOf(conn, d.shape)
	if !ok {
		return nw
	}
	// Dilation by the ball of radius rc: voxels within rc of a connected
	// centre. Only the centres' bounding box grown by rc can be reached.
	bb = bb.Grow(int(math.Ceil(rc))).Intersect(volume.BoxOf(d.shape[0], d.shape[1], d.shape[2]))
	sub := bb.Size()
	mask := make([]bool, bb.Voxels())
	j := 0
	for z := bb.Min[0]; z < bb.Max[0]; z++ {
		for y := bb.Min[1]; y < bb.Max[1]; y++ {
			i := (z*d.shape[1]+y)*d.shape[2] + bb.Min[2]
			copy(mask[j:j+sub[2]], conn[i:i+sub[2]])
			j += sub[2]
		}
	}
	dil := distance.SquaredToMask(mask, sub)
	j = 0
	for z := bb.Min[0]; z < bb.Max[0]; z++ {
		for y := bb.Min[1]; y < bb.Max[1]; y++ {
			i := (z*d.shape[1]+y)*d.shape[2] + bb.Min[2]
			for x := 0; x < sub[2]; x++ {
				nw[i+x] = dil[j] <= r2 && d.pore[i+x]
				j++
			}
		}
	}
	return nw
}

// Trap returns trapped (allocated when nil) with every wetting voxel — pore,
// not in nw — that is not connected through wetting voxels to the outlet
// face added to it. Wetting connectivity is the complement of the
// nonwetting one (6 for 26). Call it after each Invade of a drainage
// sequence at falling r_c and pass the result to the next Invade; trapped
// wetting then stays wetting for good.
//
// Voxel images resolve no wetting films in pore corners, through which real
// wetting phase in water-wet rock stays connected; trapping by voxel
// connectivity therefore overstates trapping, and is off in campaigns by
// default.
func (d *Drainage) Trap(nw, trapped []bool) []bool {
	if trapped == nil {
		trapped = make([]bool, len(d.pore))
	}
	wet := make([]bool, len(d.pore))
	for i := range wet {
		wet[i] = d.pore[i] && !nw[i]
	}
	conn := 6
	if d.opt.Connectivity == 6 {
		conn = 26
	}
	reach := FloodFromFace(wet, d.shape, d.opt.Inlet.Opposite(), conn)
	for i := range wet {
		if wet[i] && !reach[i] {
			trapped[i] = true
		}
	}
	return trapped
}

// Labels returns a copy of the rock with its pore voxels set to wetting, or
// to nonwetting where nw is true.
func (d *Drainage) Labels(nw []bool, wetting, nonwetting uint8) *volume.Labels {
	out := d.rock.Clone()
	for i, p := range d.pore {
		if !p {
			continue
		}
		if nw[i] {
			out.Pix[i] = nonwetting
		} else {
			out.Pix[i] = wetting
		}
	}
	return out
}

// Saturation returns the nonwetting saturation S_n of mask nw: nonwetting
// pore voxels over pore voxels.
func (d *Drainage) Saturation(nw []bool) float64 {
	p, n := 0, 0
	for i, in := range d.pore {
		if in {
			p++
			if nw[i] {
				n++
			}
		}
	}
	if p == 0 {
		return 0
	}
	return float64(n) / float64(p)
}

// FloodFromFace returns the voxels of mask (C order, shape (nz, ny, nx))
// connected through mask voxels, with the given connectivity (6 or 26), to
// a mask voxel on face. It is a breadth-first flood fill.
func FloodFromFace(mask []bool, shape [3]int, face Face, connectivity int) []bool {
	seen := make([]bool, len(mask))
	queue := make([]int32, 0, 1024)
	forFace(shape, face, func(i int) {
		if mask[i] && !seen[i] {
			seen[i] = true
			queue = append(queue, int32(i))
		}
	})
	nz, ny, nx := shape[0], shape[1], shape[2]
	sy, sz := nx, nx*ny
	for len(queue) > 0 {
		i := int(queue[len(queue)-1])
		queue = queue[:len(queue)-1]
		z, y, x := i/sz, (i/sy)%ny, i%nx
		for dz := -1; dz <= 1; dz++ {
			zz := z + dz
			if zz < 0 || zz >= nz {
				continue
			}
			for dy := -1; dy <= 1; dy++ {
				yy := y + dy
				if yy < 0 || yy >= ny {
					continue
				}
				for dx := -1; dx <= 1; dx++ {
					xx := x + dx
					if xx < 0 || xx >= nx {
						continue
					}
					if connectivity == 6 && abs(dz)+abs(dy)+abs(dx) != 1 {
						continue
					}
					j := zz*sz + yy*sy + xx
					if mask[j] && !seen[j] {
						seen[j] = true
						queue = append(queue, int32(j))
					}
				}
			}
		}
	}
	return seen
}

// Percolates reports whether mask connects face to the opposite face
// (connectivity 6 or 26).
func Percolates(mask []bool, shape [3]int, face Face, connectivity int) bool {
	reach := FloodFromFace(mask, shape, face, connectivity)
	hit := false
	forFace(shape, face.Opposite(), func(i int) {
		if reach[i] {
			hit = true
		}
	})
	return hit
}

// forFace calls f with the index of every voxel on face.
func forFace(shape [3]int, face Face, f func(i int)) {
	c := 0
	if face.High {
		c = shape[face.Axis] - 1
	}
	for z := 0; z < shape[0]; z++ {
		if face.Axis == 0 && z != c {
			continue
		}
		for y := 0; y < shape[1]; y++ {
			if face.Axis == 1 && y != c {
				continue
			}
			for x := 0; x < shape[2]; x++ {
				if face.Axis == 2 && x != c {
					continue
				}
				f((z*shape[1]+y)*shape[2] + x)
			}
		}
	}
}

// boundsOf returns the bounding box of the true voxels of mask.
func boundsOf(mask []bool, shape [3]int) (volume.Box, bool) {
	b := volume.Box{Min: shape}
	found := false
	i := 0
	for z := 0; z < shape[0]; z++ {
		for y := 0; y < shape[1]; y++ {
			for x := 0; x < shape[2]; x++ {
				if mask[i] {
					found = true
					c := [3]int{z, y, x}
					for a := 0; a < 3; a++ {
						b.Min[a] = min(b.Min[a], c[a])
						b.Max[a] = max(b.Max[a], c[a]+1)
					}
				}
				i++
			}
		}
	}
	return b, found
}

func anyTrue(m []bool) bool {
	for _, v := range m {
		if v {
			return true
		}
	}
	return false
}

func abs(v int) int {
	if v < 0 {
		return -v
	}
	return v
}
