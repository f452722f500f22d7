package curvature

import (
	"math"
	"math/rand"
	"slices"
	"sort"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// withinScan is faceIndex.within as first written: every row of the cube
// around c, binary search to its low x, every face kept by the ball test.
// It is the reference the pruned search must reproduce face for face.
func withinScan(fi *faceIndex, c [3]float64, rho float64, fs []face) []face {
	var lo, hi [3]int
	for a := 0; a < 3; a++ {
		lo[a] = int(math.Floor(c[a]-rho)) - 1
		hi[a] = int(math.Ceil(c[a] + rho))
	}
	s := fi.box.Size()
	r2 := rho * rho
	for z := max(lo[0], fi.box.Min[0]); z <= min(hi[0], fi.box.Max[0]-1); z++ {
		dz := float64(z) - c[0]
		for y := max(lo[1], fi.box.Min[1]); y <= min(hi[1], fi.box.Max[1]-1); y++ {
			dy := float64(y) - c[1]
			ri := (z-fi.box.Min[0])*s[1] + y - fi.box.Min[1]
			row := fi.recs[fi.start[ri]:fi.start[ri+1]]
			x0 := int32(lo[2])
			k := sort.Search(len(row), func(i int) bool { return row[i].x >= x0 })
			for ; k < len(row) && row[k].x <= int32(hi[2]); k++ {
				f := row[k]
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

// The pruned face search returns exactly the faces, in the same order, of
// the plain scan (source: the scan itself, kept above), at block centres
// (the only queries extendIntoSolid makes) and at arbitrary centres, for
// fit radii with and without an exact square.
func TestWithinMatchesScan(t *testing.T) {
	lab := volume.NewShape[uint8](40, 36, 44, 0)
	synth.Boolean(lab, synth.BooleanIntensity(0.5, 4), 4, 2, 7)
	lab.Box = lab.Box.Translate([3]int{-3, 5, 2})
	rng := rand.New(rand.NewSource(3))
	for i, v := range lab.Pix {
		if v == 0 && rng.Intn(4) != 0 {
			lab.Pix[i] = 1
		}
	}
	wet, non := phase.Of(1), phase.Of(2)
	fi := newFaceIndex(lab, wet, non, lab.Box.Grow(-2))
	total := 0
	for _, rho := range []float64{6, 4.3, 8, 2.5} {
		for q := 0; q < 400; q++ {
			var c [3]float64
			for a := 0; a < 3; a++ {
				v := lab.Box.Min[a] - 4 + rng.Intn(lab.Box.Max[a]-lab.Box.Min[a]+8)
				c[a] = float64(v) + 0.5
				if q%2 == 1 {
					c[a] = float64(v) + rng.Float64()
				}
			}
			got := fi.within(c, rho, nil)
			want := withinScan(fi, c, rho, nil)
			if !slices.Equal(got, want) {
				t.Fatalf("rho %g centre %v: %d faces, the scan finds %d (or another order)", rho, c, len(got), len(want))
			}
			total += len(want)
		}
	}
	if total < 10000 {
		t.Fatalf("only %d faces found over all queries: the scene has too little interface to test", total)
	}
}

// withinBlock (the rows and x ranges of a block-centred ball, tabulated
// once) returns the plain scan's faces in the same order at block centres,
// for blocks inside the face index and reaching past its faces.
func TestWithinBlockMatchesScan(t *testing.T) {
	lab := volume.NewShape[uint8](40, 36, 44, 0)
	synth.Boolean(lab, synth.BooleanIntensity(0.5, 4), 4, 2, 7)
	lab.Box = lab.Box.Translate([3]int{-3, 5, 2})
	rng := rand.New(rand.NewSource(5))
	for i, v := range lab.Pix {
		if v == 0 && rng.Intn(4) != 0 {
			lab.Pix[i] = 1
		}
	}
	fi := newFaceIndex(lab, phase.Of(1), phase.Of(2), lab.Box.Grow(-2))
	total := 0
	for _, rho := range []float64{6, 4.3, 8, 2.5, 1} {
		bb := newBlockBall(rho)
		for q := 0; q < 600; q++ {
			var b [3]int
			for a := 0; a < 3; a++ {
				b[a] = floorDiv2(lab.Box.Min[a] - 6 + rng.Intn(lab.Box.Max[a]-lab.Box.Min[a]+12))
			}
			c := [3]float64{2*float64(b[0]) + 0.5, 2*float64(b[1]) + 0.5, 2*float64(b[2]) + 0.5}
			got := fi.withinBlock(b, bb, nil)
			want := withinScan(fi, c, rho, nil)
			if !slices.Equal(got, want) {
				t.Fatalf("rho %g block %v: %d faces, the scan finds %d (or another order)", rho, b, len(got), len(want))
			}
			total += len(want)
		}
	}
	if total < 10000 {
		t.Fatalf("only %d faces found over all queries: the scene has too little interface to test", total)
	}
}
