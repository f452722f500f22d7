package filter

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"sluice/pkg/volume"
)

// medianSort27 is the plain reference: gather the 27 values of each window
// (indices clamped to in.Box, scipy mode 'nearest'), sort them, take the
// 14th. Defined for NaN-free inputs without −0 (else the order of equal
// zeros or of NaN is not fixed by the values).
func medianSort27(in *volume.Volume[float32], core volume.Box) *volume.Volume[float32] {
	out := volume.New[float32](core, in.VoxelSize)
	ib := in.Box
	w := make([]float32, 0, 27)
	for z := core.Min[0]; z < core.Max[0]; z++ {
		for y := core.Min[1]; y < core.Max[1]; y++ {
			for x := core.Min[2]; x < core.Max[2]; x++ {
				w = w[:0]
				for dz := -1; dz <= 1; dz++ {
					for dy := -1; dy <= 1; dy++ {
						for dx := -1; dx <= 1; dx++ {
							w = append(w, in.At(clamp(z+dz, ib.Min[0], ib.Max[0]), clamp(y+dy, ib.Min[1], ib.Max[1]), clamp(x+dx, ib.Min[2], ib.Max[2])))
						}
					}
				}
				slices.Sort(w)
				out.Set(z, y, x, w[13])
			}
		}
	}
	return out
}

// medianOriginal is Median3 as it was before the sorting-network version
// (commit ee8332b), kept verbatim apart from the name and the helpers'
// names: the definition of the results on NaN and −0.
func medianOriginal(in *volume.Volume[float32], core volume.Box) *volume.Volume[float32] {
	out := volume.New[float32](core, in.VoxelSize)
	ib := in.Box
	s := ib.Size()
	nyx := s[1] * s[2]
	xa := max(core.Min[2]-1, ib.Min[2])
	xb := min(core.Max[2]+1, ib.Max[2])
	cols := make([][9]float32, xb-xa)
	var rows [9]int
	for z := core.Min[0]; z < core.Max[0]; z++ {
		for y := core.Min[1]; y < core.Max[1]; y++ {
			k := 0
			for dz := -1; dz <= 1; dz++ {
				zz := clamp(z+dz, ib.Min[0], ib.Max[0]) - ib.Min[0]
				for dy := -1; dy <= 1; dy++ {
					yy := clamp(y+dy, ib.Min[1], ib.Max[1]) - ib.Min[1]
					rows[k] = zz*nyx + yy*s[2] - ib.Min[2]
					k++
				}
			}
			for x := xa; x < xb; x++ {
				c := &cols[x-xa]
				for k := 0; k < 9; k++ {
					c[k] = in.Pix[rows[k]+x]
				}
				sort9(c)
			}
			o := out.Index(z, y, core.Min[2])
			for x := core.Min[2]; x < core.Max[2]; x++ {
				a := &cols[clamp(x-1, ib.Min[2], ib.Max[2])-xa]
				b := &cols[x-xa]
				c := &cols[clamp(x+1, ib.Min[2], ib.Max[2])-xa]
				out.Pix[o] = median27(a, b, c)
				o++
			}
		}
	}
	return out
}

// sortedZeroOne returns the sorted 0–1 list of length n with k ones.
func sortedZeroOne(n, k int) []int32 {
	l := make([]int32, n)
	for i := n - k; i < n; i++ {
		l[i] = 1
	}
	return l
}

func isSorted01(l []int32) bool { return slices.IsSorted(l) }

// TestMedianNetworksZeroOne checks the generated merge networks and the
// selection on every sorted 0–1 input. Source: the 0–1 principle (Knuth,
// TAOCP vol. 3, §5.3.4, Theorem Z): a min/max network that handles all
// 0–1 inputs handles all inputs.
func TestMedianNetworksZeroOne(t *testing.T) {
	for ka := 0; ka <= 3; ka++ {
		for kb := 0; kb <= 3; kb++ {
			for kc := 0; kc <= 3; kc++ {
				var a, b, c [3]int32
				copy(a[:], sortedZeroOne(3, ka))
				copy(b[:], sortedZeroOne(3, kb))
				copy(c[:], sortedZeroOne(3, kc))
				var p [9]int32
				sortPlane(&p, &a, &b, &c)
				if !isSorted01(p[:]) || int(p[0]+p[1]+p[2]+p[3]+p[4]+p[5]+p[6]+p[7]+p[8]) != ka+kb+kc {
					t.Fatalf("sortPlane(%v,%v,%v) = %v", a, b, c, p)
				}
			}
		}
	}
	for kp := 0; kp <= 9; kp++ {
		for kq := 0; kq <= 9; kq++ {
			var p, q [9]int32
			copy(p[:], sortedZeroOne(9, kp))
			copy(q[:], sortedZeroOne(9, kq))
			var m [10]int32
			mergePair(&m, &p, &q)
			want := sortedZeroOne(18, kp+kq)[4:14]
			if !slices.Equal(m[:], want) {
				t.Fatalf("mergePair(%d ones, %d ones) ranks 5..14 = %v, want %v", kp, kq, m, want)
			}
			for kc := 0; kc <= 9; kc++ {
				var c [9]int32
				copy(c[:], sortedZeroOne(9, kc))
				// The 14th smallest of 27 zeros and ones is 1 iff at most 13 zeros.
				want := int32(0)
				if 27-(kp+kq+kc) <= 13 {
					want = 1
				}
				if got := select14(&m, &c); got != want {
					t.Fatalf("select14 with %d+%d+%d ones = %d, want %d", kp, kq, kc, got, want)
				}
			}
		}
	}
}

func TestMedianKeyOrder(t *testing.T) {
	// Source: IEEE 754 binary32 layout (sign, biased exponent, fraction), from memory.
	vals := []float32{float32(math.Inf(-1)), -math.MaxFloat32, -1.5, -1, -math.SmallestNonzeroFloat32, 0,
		math.SmallestNonzeroFloat32, 1e-38, 1, 1.5, math.MaxFloat32, float32(math.Inf(1))}
	for i, v := range vals {
		if fromKey(toKey(v)) != v || math.Signbit(float64(fromKey(toKey(v)))) != math.Signbit(float64(v)) {
			t.Fatalf("key round trip of %g gives %g", v, fromKey(toKey(v)))
		}
		if i > 0 && !(toKey(vals[i-1]) < toKey(v)) {
			t.Fatalf("key(%g) = %d not below key(%g) = %d", vals[i-1], toKey(vals[i-1]), v, toKey(v))
		}
	}
}

// tiedVolume fills a volume on box with values drawn from a small set
// (many ties), including ±Inf and subnormals but no NaN or −0.
func tiedVolume(box volume.Box, rng *rand.Rand, levels int) *volume.Volume[float32] {
	set := []float32{0, 1, -1, 0.5, -2.25, 3, 1e-40, -1e-40, float32(math.Inf(1)), float32(math.Inf(-1)), 7, -7, 1e30}
	set = set[:min(levels, len(set))]
	v := volume.New[float32](box, 1e-6)
	for i := range v.Pix {
		v.Pix[i] = set[rng.IntN(len(set))]
	}
	return v
}

// TestMedianMatchesSort27 compares Median3 with the sort-all-27 reference
// on random boxes (offset origins, thin shapes, cores touching or not
// touching the input edges) with heavily tied values.
// Source: definition of the median of 27 values; scipy mode 'nearest' clamping.
func TestMedianMatchesSort27(t *testing.T) {
	rng := rand.New(rand.NewPCG(27, 14))
	for trial := 0; trial < 300; trial++ {
		var box, core volume.Box
		for a := 0; a < 3; a++ {
			n := 1 + rng.IntN(9)
			box.Min[a] = rng.IntN(7) - 3
			box.Max[a] = box.Min[a] + n
			lo := box.Min[a] + rng.IntN(n)
			core.Min[a] = lo
			core.Max[a] = lo + 1 + rng.IntN(box.Max[a]-lo)
		}
		v := tiedVolume(box, rng, 2+rng.IntN(12))
		got, err := Median3(v, core)
		if err != nil {
			t.Fatal(err)
		}
		want := medianSort27(v, core)
		for i := range want.Pix {
			if math.Float32bits(got.Pix[i]) != math.Float32bits(want.Pix[i]) {
				t.Fatalf("trial %d, box %v core %v, voxel %d: %g, sort of 27 gives %g", trial, box, core, i, got.Pix[i], want.Pix[i])
			}
		}
	}
}

// TestMedianSpecialValuesUnchanged sprinkles NaN (both signs, several
// payloads) and −0 into tied and continuous volumes and requires the bits
// the pre-network implementation gives. Source: that implementation, kept
// verbatim above (the project's own earlier behaviour, by design).
func TestMedianSpecialValuesUnchanged(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 9))
	specials := []float32{float32(math.NaN()), math.Float32frombits(0xffc00001), math.Float32frombits(0x7f800001), float32(math.Copysign(0, -1))}
	for trial := 0; trial < 40; trial++ {
		box := volume.BoxOf(3+rng.IntN(8), 3+rng.IntN(8), 3+rng.IntN(12)).Translate([3]int{rng.IntN(5), -rng.IntN(5), 2})
		var v *volume.Volume[float32]
		if trial%2 == 0 {
			v = tiedVolume(box, rng, 4)
		} else {
			v = volume.New[float32](box, 1)
			for i := range v.Pix {
				v.Pix[i] = rng.Float32() - 0.5
			}
		}
		// A few special voxels: most rows stay clean, so both paths run.
		for n := rng.IntN(4); n >= 0; n-- {
			v.Pix[rng.IntN(len(v.Pix))] = specials[rng.IntN(len(specials))]
		}
		core := box
		if trial%3 == 0 {
			core = box.Grow(-1)
			if core.Empty() {
				core = box
			}
		}
		got, err := Median3(v, core)
		if err != nil {
			t.Fatal(err)
		}
		want := medianOriginal(v, core)
		for i := range want.Pix {
			if math.Float32bits(got.Pix[i]) != math.Float32bits(want.Pix[i]) {
				t.Fatalf("trial %d, box %v core %v, voxel %d: bits %08x, original %08x", trial, box, core, i, math.Float32bits(got.Pix[i]), math.Float32bits(want.Pix[i]))
			}
		}
	}
}

// BenchmarkMedian3Tile128 filters one 128³ worker tile core (input 130³ with
// the one-voxel halo) of uniform random float32 values.
func BenchmarkMedian3Tile128(b *testing.B) {
	const n = 128
	v := randomVolume(n+2, n+2, n+2, 5)
	core := volume.BoxOf(n, n, n).Translate([3]int{1, 1, 1})
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Median3(v, core); err != nil {
			b.Fatal(err)
		}
	}
	reportPerCore(b, n*n*n)
}

// TestMedianTiesMatchScipy runs the scipy check on a volume of five grey
// levels (ties everywhere, the case the merge networks must get right).
func TestMedianTiesMatchScipy(t *testing.T) {
	needPython(t)
	rng := rand.New(rand.NewPCG(5, 5))
	v := volume.NewShape[float32](10, 15, 21, 1e-6)
	for i := range v.Pix {
		v.Pix[i] = float32(rng.IntN(5)) - 1.5
	}
	// Source: scipy 1.10 scipy.ndimage.median_filter(size=3, mode='nearest'), run live.
	want := scipyFilter(t, v, "ndi.median_filter(a, size=3, mode='nearest')")
	got, err := Median3(v, v.Box)
	if err != nil {
		t.Fatal(err)
	}
	for i := range want {
		if math.Float32bits(got.Pix[i]) != math.Float32bits(want[i]) {
			t.Fatalf("voxel %d: median %g, scipy %g", i, got.Pix[i], want[i])
		}
	}
}
