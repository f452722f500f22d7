package blockse

import (
	"math"
	"testing"
)

// TestRatioByHand checks Ratio against the ratio-estimator variance
// written out by hand (Cochran 1977, Sampling Techniques, §6.3: v =
// n/(n−1) Σ(X_j − r̄W_j)²/(ΣW)²), at the block size and, where the merged
// blocks are enough, at twice it (the larger counts).
func TestRatioByHand(t *testing.T) {
	w := []float64{1, 2, 3, 4, 5}
	x := []float64{1.1, 1.8, 3.3, 4.4, 4.5}
	var s Sums
	acc := Acc{}
	for i := range w {
		acc.Add(Key{int32(3 * i), 0, 0}, w[i], x[i])
	}
	s = acc.Sums()
	e := Ratio(s)
	// By hand: ΣW = 15, ΣX = 15.1.
	r := 15.1 / 15
	var ss float64
	for i := range w {
		ss += (x[i] - r*w[i]) * (x[i] - r*w[i])
	}
	want := math.Sqrt(5.0 / 4 * ss / (15 * 15))
	if math.Abs(e.Mean-r) > 1e-15 || math.Abs(e.SE-want) > 1e-15*want || e.Blocks != 5 {
		t.Fatalf("Ratio = %+v, want mean %g SE %g", e, r, want)
	}
	// Ten blocks in pairs that merge 2×2×2 into five: the SE is the
	// larger of the two levels.
	acc = Acc{}
	var xs, ws []float64
	for i := 0; i < 10; i++ {
		wi, xi := 1+float64(i%3), 1+0.1*float64(i*i%7)
		acc.Add(Key{int32(i), 0, 0}, wi, xi)
		ws, xs = append(ws, wi), append(xs, xi)
	}
	var sw, sx float64
	for i := range ws {
		sw, sx = sw+ws[i], sx+xs[i]
	}
	m := sx / sw
	var fine, coarse float64
	for i := range ws {
		fine += (xs[i] - m*ws[i]) * (xs[i] - m*ws[i])
	}
	for i := 0; i < 10; i += 2 {
		d := xs[i] + xs[i+1] - m*(ws[i]+ws[i+1])
		coarse += d * d
	}
	want2 := math.Max(math.Sqrt(10.0/9*fine/(sw*sw)), math.Sqrt(5.0/4*coarse/(sw*sw)))
	if e2 := Ratio(acc.Sums()); math.Abs(e2.SE-want2) > 1e-14*want2 || e2.Blocks != 10 {
		t.Fatalf("ten blocks: %+v, want SE %g", e2, want2)
	}
	// Fewer than MinBlocks blocks: no SE.
	if e := Ratio(s[:MinBlocks-1]); !math.IsNaN(e.SE) || math.IsNaN(e.Mean) {
		t.Fatalf("4 blocks: %+v", e)
	}
}

// TestMergeAddsShared checks that Merge adds shared blocks and keeps the
// order, and that KeyOf floors negative coordinates.
func TestMergeAddsShared(t *testing.T) {
	a := Sums{{Key: Key{0, 0, 0}, W: 1, X: 2}, {Key: Key{0, 1, 0}, W: 1, X: 1}}
	b := Sums{{Key: Key{0, 0, 0}, W: 3, X: 4}, {Key: Key{1, 0, 0}, W: 5, X: 6}}
	m := Merge(a, b)
	if len(m) != 3 || m[0].W != 4 || m[0].X != 6 || m[1].Key != (Key{0, 1, 0}) || m[2].Key != (Key{1, 0, 0}) {
		t.Fatalf("Merge = %+v", m)
	}
	if k := KeyOf(-1, Edge, 2*Edge-1); k != (Key{-1, 1, 1}) {
		t.Fatalf("KeyOf = %v", k)
	}
}
