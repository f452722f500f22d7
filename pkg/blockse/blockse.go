// Package blockse gives the standard error of an area- or count-weighted
// mean from sums over spatial blocks of a fixed lattice — batch means in
// space.
//
// # Estimator
//
// The volume is cut into cubes of Edge voxels on the global voxel lattice
// (block (i, j, k) holds z ∈ [i·Edge, (i+1)·Edge), and so on), the same
// whatever the tiling, so block sums add over tiles and the standard error
// is as tile-invariant as the mean. Block j carries W_j = Σ w (the
// interface area, or the number of contact-angle samples, it holds) and
// X_j = Σ w·x (x = κ or θ). The mean is the ratio x̄ = ΣX_j / ΣW_j, and its
// squared standard error is the linearised (delta-method) variance of a
// ratio estimator over n blocks (Cochran 1977, Sampling Techniques, 3rd ed.,
// §6.3), with the n/(n−1) small-sample factor:
//
//	SE² = n/(n−1) · Σ_j (X_j − x̄·W_j)² / (Σ_j W_j)²
//
// Blocks with W_j = 0 take no part. Using blocks rather than single voxels
// or samples is the batch-means (blocking) idea of Flyvbjerg & Petersen 1989
// (J. Chem. Phys. 91:461) and the block bootstrap of Künsch 1989 (Ann.
// Stat. 17:1217): values within a few smoothing lengths are correlated
// (curvature of neighbouring band voxels, angles of neighbouring contact-line
// samples), so an SE over single voxels would be far too small; block means
// of blocks much longer than the correlation length are nearly independent.
// The weights enter as they should: a block with little interface counts
// little (equivalently, the effective number of blocks is
// (ΣW)²/ΣW² — Kish's effective sample size — rather than n).
//
// The spread this measures is the spread of the quantity over space within
// one scan — digitisation and segmentation noise plus real differences
// between pores — i.e. how much the mean would change for another piece of
// the same rock in the same state. It is not a bound on systematic errors of
// the estimator (wall bias, resolution), which all blocks share.
//
// Neighbouring blocks are not independent where one object (a drop, a
// ganglion) spans several of them, and then the SE over blocks of one size
// is too small. The blocking method of Flyvbjerg & Petersen handles this by
// growing the blocks until the SE stops rising. Ratio does one such step:
// it also merges the blocks 2×2×2 (edge 2·Edge) and, when at least
// MinBlocks of those hold weight, reports the larger of the two SEs.
// Measured on independent random scenes (package measure, se_test.go): the
// root-mean-square SE against the empirical spread of the mean was, with
// blocks of 32 only, 1.14 for κ (24 scenes of 96³ with random balls) and
// 0.68 for θ (40 scenes of drops whose contact lines, up to 36 voxels
// across, span several blocks); with the larger-of-two rule 1.32 for κ
// (only 8 blocks of 64 in 96³: the rule errs high on small scans) and 1.03
// for θ (40 scenes of 192² with 22 drops each).
//
// SE is reported only with at least MinBlocks blocks; with fewer the
// estimate of the SE itself is too rough (its relative error is about
// 1/√(2(n−1)), Flyvbjerg & Petersen 1989: 35 % at n = 5).
package blockse

import (
	"math"
	"slices"
)

// Edge is the block edge in voxels. 32 is several times the correlation
// length of the curvature field (the smoothing kernel reaches 5 voxels at
// σ = 1.5 and the wall continuation 6) and about that of the contact-angle
// fits (fit radius 12), and still gives tens of blocks in a 128³ scan and
// thousands in a 1000³ one. The merged blocks of 64 (above) take up what
// one block does not hold.
const Edge = 32

// MinBlocks is the fewest blocks with weight for which an SE is reported.
const MinBlocks = 5

// Key is the index of a block along z, y, x.
type Key [3]int32

// KeyOf returns the block holding voxel (z, y, x).
func KeyOf(z, y, x int) Key {
	return Key{floorDiv(z), floorDiv(y), floorDiv(x)}
}

func floorDiv(a int) int32 {
	q := a / Edge
	if a%Edge != 0 && a < 0 {
		q--
	}
	return int32(q)
}

// Sum is the weight W and the weighted sum X = Σw·x of one block.
type Sum struct {
	Key Key     `json:"k"`
	W   float64 `json:"w"`
	X   float64 `json:"x"`
}

// Sums is a list of block sums sorted by key, at most one per key.
type Sums []Sum

// Acc accumulates block sums.
type Acc map[Key]*[2]float64

// Add adds weight w and weighted value wx to block k.
func (a Acc) Add(k Key, w, wx float64) {
	s := a[k]
	if s == nil {
		s = new([2]float64)
		a[k] = s
	}
	s[0] += w
	s[1] += wx
}

// Sums returns the accumulated sums sorted by key (nil when empty).
func (a Acc) Sums() Sums {
	if len(a) == 0 {
		return nil
	}
	out := make(Sums, 0, len(a))
	for k, s := range a {
		out = append(out, Sum{Key: k, W: s[0], X: s[1]})
	}
	slices.SortFunc(out, func(p, q Sum) int { return compareKey(p.Key, q.Key) })
	return out
}

func compareKey(a, b Key) int {
	for i := range a {
		if a[i] != b[i] {
			if a[i] < b[i] {
				return -1
			}
			return 1
		}
	}
	return 0
}

// Merge returns the sums of s and t together (both sorted by key), adding
// the blocks they share. Neither input is modified.
func Merge(s, t Sums) Sums {
	if len(t) == 0 {
		return s
	}
	if len(s) == 0 {
		return slices.Clone(t)
	}
	out := make(Sums, 0, len(s)+len(t))
	i, j := 0, 0
	for i < len(s) || j < len(t) {
		switch {
		case j == len(t) || (i < len(s) && compareKey(s[i].Key, t[j].Key) < 0):
			out = append(out, s[i])
			i++
		case i == len(s) || compareKey(s[i].Key, t[j].Key) > 0:
			out = append(out, t[j])
			j++
		default:
			out = append(out, Sum{Key: s[i].Key, W: s[i].W + t[j].W, X: s[i].X + t[j].X})
			i++
			j++
		}
	}
	return out
}

// Estimate is a weighted mean with its standard error.
type Estimate struct {
	Mean float64
	// SE is the standard error of Mean (NaN with fewer than MinBlocks
	// blocks).
	SE float64
	// Blocks is the number of blocks with weight; Effective is Kish's
	// effective number (ΣW)²/ΣW².
	Blocks    int
	Effective float64
}

// Ratio returns the ratio mean ΣX/ΣW of the blocks and its standard error
// (package doc). Mean is NaN without weight.
func Ratio(s Sums) Estimate {
	var w, x, w2 float64
	n := 0
	for _, b := range s {
		if b.W > 0 {
			w += b.W
			x += b.X
			w2 += b.W * b.W
			n++
		}
	}
	e := Estimate{Mean: math.NaN(), SE: math.NaN(), Blocks: n}
	if !(w > 0) {
		return e
	}
	e.Mean = x / w
	e.Effective = w * w / w2
	if n < MinBlocks {
		return e
	}
	e.SE = seOf(s, e.Mean, w, n)
	if c := coarsen(s); countWeighted(c) >= MinBlocks {
		e.SE = math.Max(e.SE, seOf(c, e.Mean, w, countWeighted(c)))
	}
	return e
}

// seOf is the batch-means SE of the ratio mean over the blocks of s.
func seOf(s Sums, mean, w float64, n int) float64 {
	var ss float64
	for _, b := range s {
		if b.W > 0 {
			d := b.X - mean*b.W
			ss += d * d
		}
	}
	return math.Sqrt(float64(n) / float64(n-1) * ss / (w * w))
}

func countWeighted(s Sums) int {
	n := 0
	for _, b := range s {
		if b.W > 0 {
			n++
		}
	}
	return n
}

// coarsen merges the blocks 2×2×2 into blocks of twice the edge.
func coarsen(s Sums) Sums {
	acc := Acc{}
	for _, b := range s {
		k := b.Key
		acc.Add(Key{floorHalf(k[0]), floorHalf(k[1]), floorHalf(k[2])}, b.W, b.X)
	}
	return acc.Sums()
}

func floorHalf(a int32) int32 {
	if a < 0 {
		return -((-a + 1) / 2)
	}
	return a / 2
}
