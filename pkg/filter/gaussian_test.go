package filter

import (
	"crypto/sha256"
	"encoding/binary"

	"math"
	"math/rand/v2"
	"testing"

	"sluice/pkg/volume"
)

// gaussianReference is the straightforward form of Gaussian's arithmetic:
// three whole-box passes (z, then y, then x) with every index clamped to
// in.Box, float32 storage between passes, and per output voxel the float64
// sum w[0]·c + Σ_{j=1..r} w[j]·(float64(a₋ⱼ) + float64(a₊ⱼ)) in increasing j.
// The core is cropped at the end. It defines the summation order Gaussian
// must keep bit for bit (the order is our own choice, documented on
// Gaussian; scipy's correlate1d sums in tap order, hence the 2e-6 tolerance
// in TestGaussianMatchesScipy).
func gaussianReference(in *volume.Volume[float32], core volume.Box, sigma, truncate float64) *volume.Volume[float32] {
	w := GaussianKernel(sigma, truncate)
	r := len(w) - 1
	b := in.Box
	cur := in.Clone()
	for axis := 0; axis < 3; axis++ {
		next := volume.New[float32](b, in.VoxelSize)
		for z := b.Min[0]; z < b.Max[0]; z++ {
			for y := b.Min[1]; y < b.Max[1]; y++ {
				for x := b.Min[2]; x < b.Max[2]; x++ {
					at := func(k int) float64 {
						p := [3]int{z, y, x}
						p[axis] = clamp(p[axis]+k, b.Min[axis], b.Max[axis])
						return float64(cur.At(p[0], p[1], p[2]))
					}
					acc := w[0] * at(0)
					for j := 1; j <= r; j++ {
						acc += w[j] * (at(-j) + at(j))
					}
					next.Set(z, y, x, float32(acc))
				}
			}
		}
		cur = next
	}
	return cur.Crop(core, 0)
}

// pixHash is the SHA-256 of the voxels' float32 bit patterns (little endian).
func pixHash(pix []float32) [32]byte {
	b := make([]byte, 4*len(pix))
	for i, p := range pix {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(p))
	}
	return sha256.Sum256(b)
}

// TestGaussianBitIdentical hashes Gaussian's output against the
// straightforward reference above for several σ, truncations, input boxes
// (off the origin) and cores (whole box, interior, touching the box faces,
// one voxel thick), on random data with a wide dynamic range. The radii
// (0–7, 16, 28) take every combination of tap sweeps in symmetricRow, and
// 16 and 28 exceed the box, so clamping happens on both sides of a row.
// Source: none outside the project — this pins the summation order so that
// speed work cannot change a single bit; accuracy against scipy 1.10 is
// TestGaussianMatchesScipy.
func TestGaussianBitIdentical(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 3))
	in := volume.New[float32](volume.Box{Min: [3]int{-3, 5, 2}, Max: [3]int{18, 24, 31}}, 1e-6)
	for i := range in.Pix {
		// uniform [0, 1) with a few large and tiny values, so that the
		// float64 sums round differently under any reordering
		switch rng.IntN(20) {
		case 0:
			in.Pix[i] = float32(rng.Float64() * 1e6)
		case 1:
			in.Pix[i] = float32(rng.Float64() * 1e-6)
		default:
			in.Pix[i] = rng.Float32()
		}
	}
	ib := in.Box
	cores := []volume.Box{
		ib,
		{Min: [3]int{2, 9, 8}, Max: [3]int{11, 20, 25}},
		{Min: ib.Min, Max: [3]int{4, 10, 9}},
		{Min: [3]int{10, 16, 20}, Max: ib.Max},
		{Min: [3]int{7, 12, 5}, Max: [3]int{8, 13, 30}},
	}
	cases := []struct{ sigma, truncate float64 }{{0.1, 4}, {0.3, 4}, {0.5, 4}, {0.8, 4}, {1, 4}, {1.5, 3}, {1.5, 4}, {2, 3.5}, {2.2, 2.5}, {4, 4}, {7, 4}}
	for _, c := range cases {
		for ci, core := range cores {
			want := gaussianReference(in, core, c.sigma, c.truncate)
			got, err := Gaussian(in, core, c.sigma, c.truncate)
			if err != nil {
				t.Fatal(err)
			}
			if got.Box != core {
				t.Fatalf("box %v, want %v", got.Box, core)
			}
			hg, hw := pixHash(got.Pix), pixHash(want.Pix)
			if hg != hw {
				n := 0
				for i := range want.Pix {
					if math.Float32bits(got.Pix[i]) != math.Float32bits(want.Pix[i]) {
						n++
					}
				}
				t.Errorf("sigma %g truncate %g core %d %v: hash %x, reference %x (%d voxels differ)", c.sigma, c.truncate, ci, core, hg[:6], hw[:6], n)
			}
		}
	}
}

// BenchmarkGaussianCurvature is the smoothing of the curvature stage
// (σ 1.5, truncate 3, radius 5) over a 96³ core with its halo, the setting
// `sluice bench compare` times.
func BenchmarkGaussianCurvature(b *testing.B) {
	const n, r = 96, 5
	v := randomVolume(n+2*r, n+2*r, n+2*r, 5)
	core := volume.BoxOf(n, n, n).Translate([3]int{r, r, r})
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Gaussian(v, core, 1.5, 3); err != nil {
			b.Fatal(err)
		}
	}
	reportPerCore(b, n*n*n)
}

// BenchmarkGaussianWhole filters a whole 96³ box (no halo: the core is the
// input box, as for the phase indicators in `sluice bench compare`).
func BenchmarkGaussianWhole(b *testing.B) {
	const n = 96
	v := randomVolume(n, n, n, 6)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Gaussian(v, v.Box, 1.5, 3); err != nil {
			b.Fatal(err)
		}
	}
	reportPerCore(b, n*n*n)
}
