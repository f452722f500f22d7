package segment

import (
	"math"
	"math/bits"
	"runtime"
	"slices"
	"sync"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Assignment methods (Params.Assign) and path costs (Watershed.Cost).
const (
	AssignWatershed = "watershed"
	AssignThreshold = "threshold"
	CostSum         = "sum"
	CostMax         = "max"
)

// Watershed bounds the seeded flood of Params.Assign "watershed" (see the
// package doc).
type Watershed struct {
	// Steps bounds the flood: an unseeded voxel takes the class of the seed
	// it reaches at least cost over at most Steps face moves through
	// unseeded voxels; voxels no seed reaches keep their threshold class.
	// Default 4, range 1..16. Steps + 1 is part of the halo.
	Steps int `json:"steps" yaml:"steps"`
	// Cost of a path: "sum" (default) of its edge weights (the grey-weighted
	// distance of the image foresting transform) or "max", its highest edge
	// weight (the watershed's flooding level). See the package doc for the
	// comparison.
	Cost string `json:"cost" yaml:"cost"`
	// Wall adds a second pass on the labels of the first in which a fluid
	// voxel's solid face neighbours do not unseed it (see the package doc).
	// It doubles the halo.
	Wall bool `json:"wall" yaml:"wall"`
}

// WatershedHalo returns the halo the watershed adds: Steps + 1 (one for
// the seed test, which reads the face neighbours' classes), or 0 when the
// assignment is by threshold.
func (p Params) WatershedHalo() int {
	if p.Assign != AssignWatershed {
		return 0
	}
	h := p.Watershed.Steps + 1
	if p.Watershed.Wall {
		h *= 2
	}
	if p.solidLayerPass() {
		h += 2 * SolidLayerReach
	}
	return h
}

// SolidLayerWidth is the widest solid layer, in voxel widths along the
// lattice direction, that the solid-layer pass takes for a blurred
// fluid–fluid edge: a run of at most 4 solid voxels along an axis, 2 along
// a face diagonal (2.8 voxel widths) or a body diagonal (3.5). Grains are
// wider. SolidLayerReach is the farthest a voxel of such a run lies from
// its ends (the halo of one pass). Measured at CNR 5, PSF σ 1 (pkg/segment
// TestIssue15Table scenes, doped brine, pack S_w 0.51 / fine rock S_w
// 0.42), ΔA_wn by width: 3 → −27.0 % / −28.5 %, 3.5 → −23.8 / −14.2,
// 4 → −22.0 / −4.2, 5 → −16.8 / +35.9 % (the fine rock's grains, 8 voxels
// across, lose their rims: solid called fluid 72 000 → 93 000 → 130 000
// of 532 000 from width 3 to 4 to 5; undoped 61 000). With a reach of 3
// voxels on either side along every direction (runs up to 5, 8.7 voxel
// widths on a body diagonal) the fine rock lost 231 000.
const (
	SolidLayerWidth = 4.0
	SolidLayerReach = 4
)

// maxRun[i] is the longest solid run along dirs13[i] of at most
// SolidLayerWidth voxel widths.
var maxRun = func() (m [13]int) {
	for i, d := range dirs13 {
		m[i] = min(int(SolidLayerWidth/math.Sqrt(float64(d[0]*d[0]+d[1]*d[1]+d[2]*d[2]))), SolidLayerReach)
	}
	return m
}()

// solidLayerPass reports whether the watershed is followed by the
// solid-layer pass: in 3-class mode with the solid between the fluids in
// grey order (a doped brine, "nsw", or "wsn").
func (p Params) solidLayerPass() bool {
	return p.Assign == AssignWatershed && !p.Reference && len(p.Order) == 3 && p.Order[1] == 's'
}

// noSolidLayers turns the solid-layer passes off (tests measure what
// they remove; the halo is unchanged).
var noSolidLayers bool

// dirs13 are the 13 lattice directions of the 26-neighbourhood, one of
// each pair ±d: axes, face diagonals, body diagonals.
var dirs13 = [13][3]int{
	{0, 0, 1}, {0, 1, 0}, {1, 0, 0},
	{0, 1, 1}, {0, 1, -1}, {1, 0, 1}, {1, 0, -1}, {1, 1, 0}, {1, -1, 0},
	{1, 1, 1}, {1, 1, -1}, {1, -1, 1}, {1, -1, -1},
}

// solidLayers is the solid-layer pass. With the solid between the two
// fluids in grey order (doped brine), the scanner's blur carries every
// nonwetting–wetting edge through the solid's grey: the threshold classes
// put a one- or two-voxel solid layer between the fluids, and the
// watershed keeps it, because solid seeds in the grains flood along the
// layer cheaply (its voxels have about the same grey). Grains are many
// voxels across, so a solid layer of one or two voxels with one fluid on
// one side and the other fluid on the other is taken for that blurred
// edge: a solid voxel u of lab whose nearest non-solid voxels along some
// lattice direction ±d (at most SolidLayerReach moves away each way, only
// solid between) are the darker fluid on one side and the brighter fluid
// on the other is relabelled to the fluid whose filtered grey (of that
// nearest voxel) is nearer its own; ties go to the darker fluid. Of
// several such directions the one with the largest grey difference
// between the two fluid voxels (the steepest, most nearly normal to the
// edge) decides, the first in dirs13 order among equals. Decisions read
// the labels before the pass only, so the result does not depend on the
// order of the voxels; a tile needs SolidLayerReach more voxels of labels
// around the region it decides. Outside voxels and the reference mask
// never take part (the pass runs in 3-class mode only). Solid plates of
// one or two voxels between the two fluids are lost with it; on the
// forward model's grain packs they do not occur. (Ours; the mixture view
// of an edge voxel is that of Santago & Gage 1993, IEEE Trans. Med.
// Imaging 12:566.)
func (c *classes) solidLayers(lab *volume.Labels, f *volume.Volume[float32], out volume.Box, mix bool) *volume.Labels {
	res := lab.Crop(out, 0)
	lo, hi, sd := c.codes[0], c.codes[2], c.codes[1]
	box := lab.Box
	if f.Box != box {
		f = f.Crop(box, 0)
	}
	sz := box.Size()
	nx, nyx := sz[2], sz[1]*sz[2]
	var off [13]int
	for i, d := range dirs13 {
		off[i] = d[0]*nyx + d[1]*nx + d[2]
	}
	pix, grey := lab.Pix, f.Pix
	// side returns the first non-solid label along sgn·dirs13[di] from the
	// box-local voxel i at (z, y, x) within reach moves, its grey and its
	// distance; ok is false when there is none inside the box.
	side := func(i, z, y, x, di, sgn, reach int) (uint8, float32, int, bool) {
		d := dirs13[di]
		o := sgn * off[di]
		for k := 1; k <= reach; k++ {
			zz, yy, xx := z+sgn*k*d[0], y+sgn*k*d[1], x+sgn*k*d[2]
			if uint(zz) >= uint(sz[0]) || uint(yy) >= uint(sz[1]) || uint(xx) >= uint(sz[2]) {
				return 0, 0, 0, false
			}
			j := i + k*o
			if l := pix[j]; l != sd {
				return l, grey[j], k, true
			}
		}
		return 0, 0, 0, false
	}
	sm := float32(0)
	if len(c.t) == 2 {
		sm = float32((c.t[0] + c.t[1]) / 2)
	}
	nz := out.Max[0] - out.Min[0]
	w := min(runtime.GOMAXPROCS(0), nz)
	parallel(w, func(g int) {
		for gz := out.Min[0] + g*nz/w; gz < out.Min[0]+(g+1)*nz/w; gz++ {
			z := gz - box.Min[0]
			for gy := out.Min[1]; gy < out.Max[1]; gy++ {
				y := gy - box.Min[1]
				ri := res.Index(gz, gy, out.Min[2])
				for gx := out.Min[2]; gx < out.Max[2]; gx++ {
					x := gx - box.Min[2]
					i := z*nyx + y*nx + x
					if pix[i] != sd {
						continue
					}
					v := grey[i]
					best, bestC := uint8(0), float32(-1)
					for di := range dirs13 {
						// The solid run through u along d may hold at most
						// maxRun[di] voxels (SolidLayerWidth voxel widths).
						la, ga, ka, ok := side(i, z, y, x, di, -1, maxRun[di])
						if !ok || (la != lo && la != hi) {
							continue
						}
						lb, gb, _, ok := side(i, z, y, x, di, 1, maxRun[di]+1-ka)
						if !ok || !((la == lo && lb == hi) || (la == hi && lb == lo)) {
							continue
						}
						if con := abs32(ga - gb); con > bestC {
							gl, gh := ga, gb
							if la == hi {
								gl, gh = gb, ga
							}
							bestC = con
							if abs32(v-gl) <= abs32(v-gh) {
								best = lo
							} else {
								best = hi
							}
						}
					}
					if bestC >= 0 {
						res.Pix[ri+gx-out.Min[2]] = best
						continue
					}
					if !mix {
						continue
					}
					// Not a layer: a solid voxel next to one fluid whose
					// grey lies beyond the solid level towards the other
					// fluid holds some of that other fluid (a mixture of
					// the solid and its fluid neighbour cannot be there).
					var nLo, nHi bool
					for di := 0; di < 3; di++ {
						for _, sg := range [2]int{-1, 1} {
							if l, _, k, ok := side(i, z, y, x, di, sg, 1); ok && k == 1 {
								nLo = nLo || l == lo
								nHi = nHi || l == hi
							}
						}
					}
					switch {
					case nLo && !nHi && v > sm:
						res.Pix[ri+gx-out.Min[2]] = hi
					case nHi && !nLo && v < sm:
						res.Pix[ri+gx-out.Min[2]] = lo
					}
				}
			}
		}
	})
	return res
}

// flood reassigns the voxels of lab that are not seeds by the bounded
// seeded watershed and returns the labels of out (inside lab.Box, which must
// hold out grown by Steps + 1, clipped to the scan). f is the filtered grey
// over lab.Box. Voxels that are not floodable (outside the sample; in
// reference mode, outside the pore space of the mask) keep their label and
// neither seed nor carry the flood.
//
// Seeds are the floodable voxels whose floodable face neighbours all share
// their label (with wall, a solid and a fluid neighbour do not count as
// different). Edge weights are the absolute grey differences of face
// neighbours, the gradient magnitude along the edge. For every class k and
// unseeded voxel u, cost_k(u) is the least cost of a path of at most Steps
// face moves from a seed of class k through unseeded voxels to u: the sum
// of its edge weights (Cost "sum") or the largest (Cost "max"). It is found
// by Steps synchronous (Jacobi) rounds of cost_k(u) ← min(cost_k(u), min
// over neighbours v of cost_k(v) ⊕ w(u, v)), with cost 0 on seeds of class
// k and +Inf elsewhere; both recursions (min–plus, min–max) are monotone,
// so round r holds the exact optimum over paths of at most r moves, and
// each value is computed by the same float32 operations whatever the box.
// u takes the class of least cost; ties go to its own label when that is
// among the least, else to the first class in the order darkest to
// brightest; with no seed in reach it keeps its label.
func (c *classes) flood(lab *volume.Labels, f *volume.Volume[float32], out volume.Box, p Params, wall bool) *volume.Labels {
	box := lab.Box
	s := box.Size()
	nz, ny, nx := s[0], s[1], s[2]
	nyx := ny * nx
	pix := lab.Pix
	// cls[code] is the class index of a floodable code, else −1: in
	// reference mode the mask's solid is not floodable, in 3-class mode it
	// is a class; Outside never is.
	var cls [256]int8
	for i := range cls {
		cls[i] = -1
	}
	for k, code := range c.codes {
		if p.Reference && code == c.solid {
			continue
		}
		cls[code] = int8(k)
	}
	cls[phase.Outside] = -1
	// dif[l<<8|m]: a neighbour labelled m unseeds a voxel labelled l.
	dif := make([]bool, 1<<16)
	for l := 0; l < 256; l++ {
		for m := 0; m < 256; m++ {
			d := cls[l] >= 0 && cls[m] >= 0 && l != m
			if wall && (uint8(l) == c.solid) != (uint8(m) == c.solid) {
				d = false
			}
			dif[l<<8|m] = d
		}
	}
	// id[i]: −2 not floodable, −1 seed, else the index of unseeded voxel i
	// in list (−3 until numbered). Slabs of z are marked in parallel, then
	// numbered in z order.
	id := make([]int32, len(pix))
	w := min(runtime.GOMAXPROCS(0), nz)
	counts := make([]int, w+1)
	parallel(w, func(g int) {
		n := 0
		for z := g * nz / w; z < (g+1)*nz/w; z++ {
			for y := 0; y < ny; y++ {
				i0 := z*nyx + y*nx
				for x := 0; x < nx; x++ {
					i := i0 + x
					l := pix[i]
					if cls[l] < 0 {
						id[i] = -2
						continue
					}
					t := dif[int(l)<<8:][:256]
					if (x > 0 && t[pix[i-1]]) || (x+1 < nx && t[pix[i+1]]) ||
						(y > 0 && t[pix[i-nx]]) || (y+1 < ny && t[pix[i+nx]]) ||
						(z > 0 && t[pix[i-nyx]]) || (z+1 < nz && t[pix[i+nyx]]) {
						id[i] = -3
						n++
					} else {
						id[i] = -1
					}
				}
			}
		}
		counts[g+1] = n
	})
	for g := 1; g <= w; g++ {
		counts[g] += counts[g-1]
	}
	nu := counts[w]
	// list[u] is the voxel of unseeded u; bit n of nbs[u] says whether its
	// neighbour n (−x, +x, −y, +y, −z, +z) lies in the box.
	list := make([]int32, nu)
	nbs := make([]uint8, nu)
	parallel(w, func(g int) {
		u := counts[g]
		for z := g * nz / w; z < (g+1)*nz/w; z++ {
			for y := 0; y < ny; y++ {
				i0 := z*nyx + y*nx
				for x := 0; x < nx; x++ {
					i := i0 + x
					if id[i] != -3 {
						continue
					}
					id[i] = int32(u)
					list[u] = int32(i)
					var b uint8
					if x > 0 {
						b |= 1
					}
					if x+1 < nx {
						b |= 2
					}
					if y > 0 {
						b |= 4
					}
					if y+1 < ny {
						b |= 8
					}
					if z > 0 {
						b |= 16
					}
					if z+1 < nz {
						b |= 32
					}
					nbs[u] = b
					u++
				}
			}
		}
	})
	offs := [6]int{-1, 1, -nx, nx, -nyx, nyx}
	additive := p.Watershed.Cost != CostMax
	// The least cost over all classes and the set of classes (bit k for
	// class k) that reach it: min_k cost_k(u) = min over neighbours v of
	// (min_k cost_k(v)) ⊕ w(u, v), and class k attains it at u exactly when
	// it attains it at such a v (cost_k(v) >= min, ⊕ monotone), so one cost
	// and a class set per voxel give the per-class rule's result bit for
	// bit.
	inf := float32(math.Inf(1))
	prevC, nextC := make([]float32, nu), make([]float32, nu)
	prevM, nextM := make([]uint8, nu), make([]uint8, nu)
	for u := range prevC {
		prevC[u] = inf
	}
	changed := make([]bool, w)
	// Round 0 takes the seeds among the neighbours (their contribution never
	// changes, and costs only fall) and turns nbs[u] into the set of
	// unseeded neighbours, the only ones later rounds need to read.
	parallel(w, func(g int) {
		for u := g * nu / w; u < (g+1)*nu/w; u++ {
			bc, bm := inf, uint8(0)
			i := int(list[u])
			fi := f.Pix[i]
			b := nbs[u]
			var un uint8
			for n, o := range offs {
				if b&(1<<n) == 0 {
					continue
				}
				j := i + o
				switch v := id[j]; {
				case v >= 0:
					un |= 1 << n
				case v == -1:
					cv, cm := abs32(f.Pix[j]-fi), uint8(1)<<uint(cls[pix[j]])
					if cv < bc {
						bc, bm = cv, cm
					} else if cv == bc {
						bm |= cm
					}
				}
			}
			nbs[u] = un
			prevC[u], prevM[u] = bc, bm
		}
	})
	for round := 1; round < p.Watershed.Steps; round++ {
		parallel(w, func(g int) {
			ch := false
			for u := g * nu / w; u < (g+1)*nu/w; u++ {
				bc, bm := prevC[u], prevM[u]
				b := nbs[u]
				if b != 0 {
					i := int(list[u])
					fi := f.Pix[i]
					for n, o := range offs {
						if b&(1<<n) == 0 {
							continue
						}
						j := i + o
						v := id[j]
						cv, cm := prevC[v], prevM[v]
						if wn := abs32(f.Pix[j] - fi); additive {
							cv += wn
						} else if cv < wn {
							cv = wn
						}
						if cv < bc {
							bc, bm = cv, cm
						} else if cv == bc {
							bm |= cm
						}
					}
					if bc != prevC[u] || bm != prevM[u] {
						ch = true
					}
				}
				nextC[u], nextM[u] = bc, bm
			}
			changed[g] = ch
		})
		prevC, nextC = nextC, prevC
		prevM, nextM = nextM, prevM
		if !slices.Contains(changed, true) {
			break
		}
	}
	res := lab.Crop(out, 0)
	parallel(w, func(g int) {
		for u := g * nu / w; u < (g+1)*nu/w; u++ {
			m := prevM[u]
			if m == 0 {
				continue // no seed within reach: threshold class
			}
			i := int(list[u])
			z, r := i/nyx, i%nyx
			y, x := r/nx, r%nx
			z, y, x = z+box.Min[0], y+box.Min[1], x+box.Min[2]
			if !out.Contains(z, y, x) {
				continue
			}
			best := int(cls[pix[i]])
			if m&(1<<uint(best)) == 0 {
				best = bits.TrailingZeros8(m)
			}
			res.Pix[res.Index(z, y, x)] = c.codes[best]
		}
	})
	return res
}

// parallel runs fn(0) … fn(w−1) on w goroutines and waits for them.
func parallel(w int, fn func(g int)) {
	if w <= 1 {
		fn(0)
		return
	}
	var wg sync.WaitGroup
	for g := 0; g < w; g++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			fn(g)
		}()
	}
	wg.Wait()
}
