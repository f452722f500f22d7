package levelset

import (
	"math"
	"math/rand"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// bandScene is a three-phase Boolean scene (labels 0 solid, 1, 2) offset
// from the origin so that global coordinates are exercised.
func bandScene(seed int64) *volume.Labels {
	lab := volume.NewShape[uint8](23, 26, 29, 0)
	synth.Boolean(lab, synth.BooleanIntensity(0.5, 3), 3, 1, uint64(seed))
	lab.Box = lab.Box.Translate([3]int{3, -2, 5})
	rng := rand.New(rand.NewSource(seed))
	for i, v := range lab.Pix {
		if v == 0 && rng.Intn(3) == 0 {
			lab.Pix[i] = 2
		}
	}
	return lab
}

// Source: common practice — a Chebyshev-cube test done by brute force over
// the (2r+1)³ window; Mixed and Holds.
func TestMixedMatchesBruteForce(t *testing.T) {
	for seed := int64(1); seed <= 3; seed++ {
		lab := bandScene(seed)
		a, b := phase.Of(1), phase.Of(2)
		box := lab.Box.Grow(-4).Translate([3]int{1, 0, 2})
		for _, r := range []int{0, 1, 2, 5} {
			got := Mixed(lab, a, b, box, r)
			holds := Holds(lab, a, b, box, r)
			for z := got.Box.Min[0]; z < got.Box.Max[0]; z++ {
				for y := got.Box.Min[1]; y < got.Box.Max[1]; y++ {
					for x := got.Box.Min[2]; x < got.Box.Max[2]; x++ {
						ha, hb := false, false
						for dz := -r; dz <= r; dz++ {
							for dy := -r; dy <= r; dy++ {
								for dx := -r; dx <= r; dx++ {
									if l, ok := at(lab, z+dz, y+dy, x+dx); ok {
										ha = ha || a[l]
										hb = hb || b[l]
									}
								}
							}
						}
						want := uint8(0)
						if ha && hb {
							want = 1
						}
						if g := got.At(z, y, x); g != want {
							t.Fatalf("seed %d r %d: Mixed(%d,%d,%d) = %d, brute force %d", seed, r, z, y, x, g, want)
						}
						wantH := uint8(0)
						if ha {
							wantH |= 1
						}
						if hb {
							wantH |= 2
						}
						if g := holds.At(z, y, x); g != wantH {
							t.Fatalf("seed %d r %d: Holds(%d,%d,%d) = %d, brute force %d", seed, r, z, y, x, g, wantH)
						}
					}
				}
			}
		}
	}
}

func at(lab *volume.Labels, z, y, x int) (uint8, bool) {
	if !lab.Box.Contains(z, y, x) {
		return 0, false
	}
	return lab.At(z, y, x), true
}

// FractionOn must reproduce Fraction bit for bit on the voxels asked for
// (the narrow band changes the work, not the numbers).
func TestFractionOnMatchesFraction(t *testing.T) {
	rng := rand.New(rand.NewSource(7))
	for seed := int64(1); seed <= 3; seed++ {
		lab := bandScene(seed)
		num, den := phase.Of(2), phase.Of(1, 2)
		for _, sigma := range []float64{0.8, 1.5, 2} {
			box := lab.Box.Grow(-3).Translate([3]int{0, 1, -1})
			want := Fraction(lab, num, den, box, sigma)
			need := volume.New[uint8](want.Box, 0)
			for i := range need.Pix {
				if rng.Intn(10) == 0 {
					need.Pix[i] = 1
				}
			}
			got := FractionOn(lab, num, den, box, sigma, need)
			n := 0
			for i, m := range need.Pix {
				if m == 0 {
					continue
				}
				n++
				g, w := got.Pix[i], want.Pix[i]
				if math.Float32bits(g) != math.Float32bits(w) && !(math.IsNaN(float64(g)) && math.IsNaN(float64(w))) {
					t.Fatalf("seed %d σ %v: voxel %d: FractionOn %v, Fraction %v", seed, sigma, i, g, w)
				}
			}
			if n == 0 {
				t.Fatal("empty mask")
			}
		}
	}
}

// Outside Mixed(num, den∖num, r) the fraction is exactly 0, 1 or NaN —
// the property the narrow band rests on.
func TestFractionPureOutsideMixed(t *testing.T) {
	lab := bandScene(4)
	num, den, rest := phase.Of(2), phase.Of(1, 2), phase.Of(1)
	const sigma = 1.5
	phi := Fraction(lab, num, den, lab.Box, sigma)
	mix := Mixed(lab, num, rest, lab.Box, Radius(sigma))
	inside := 0
	for i, m := range mix.Pix {
		f := phi.Pix[i]
		if m == 0 && !(f == 0 || f == 1 || math.IsNaN(float64(f))) {
			t.Fatalf("voxel %d outside the band has φ = %v", i, f)
		}
		if m != 0 && f > 0 && f < 1 {
			inside++
		}
	}
	if inside == 0 {
		t.Fatal("no band voxels in the scene")
	}
}

// GradientKernel.At (taps computed once) returns GradientAt bit for bit,
// at voxels inside the scene and next to its faces, for σ 1, 1.5 and 2.
func TestGradientKernelMatchesGradientAt(t *testing.T) {
	lab := bandScene(4)
	set := phase.Of(0)
	rng := rand.New(rand.NewSource(9))
	for _, sigma := range []float64{1, 1.5, 2} {
		k := NewGradientKernel(sigma)
		nonzero := 0
		for i := 0; i < 300; i++ {
			var p [3]int
			for a := 0; a < 3; a++ {
				p[a] = lab.Box.Min[a] + rng.Intn(lab.Box.Max[a]-lab.Box.Min[a])
			}
			got, want := k.At(lab, set, p), GradientAt(lab, set, p, sigma)
			if got != want {
				t.Fatalf("σ %g at %v: kernel %v, GradientAt %v", sigma, p, got, want)
			}
			if want != [3]float64{} {
				nonzero++
			}
		}
		if nonzero < 100 {
			t.Fatalf("σ %g: only %d of 300 points with a gradient: the scene tests too little", sigma, nonzero)
		}
	}
}
