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
	if p.Watershed.Wall {
		return 2 * (p.Watershed.Steps + 1)
	}
	return p.Watershed.Steps + 1
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
