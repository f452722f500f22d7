package filter

import (
	"encoding/binary"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"sync/atomic"
	"testing"

	"sluice/pkg/volume"
)

func randomUint16(nz, ny, nx int, seed uint64, levels int) *volume.Volume[uint16] {
	rng := rand.New(rand.NewPCG(seed, 11))
	v := volume.NewShape[uint16](nz, ny, nx, 1e-6)
	for i := range v.Pix {
		if levels > 0 {
			v.Pix[i] = uint16(rng.IntN(levels)) * uint16(65535/max(levels-1, 1))
		} else {
			v.Pix[i] = uint16(rng.Uint32())
		}
	}
	return v
}

// TestMedianIntegerMatchesFloat checks the integer median against Median3
// on the converted volume, voxel for voxel, for full-range values, for five
// grey levels (ties everywhere, 0 and 65535 included) and on sub-boxes whose
// edges are and are not clamped. Source: Median3 (itself checked against
// scipy and a sort of the 27 values); float32 holds every uint16 exactly.
func TestMedianIntegerMatchesFloat(t *testing.T) {
	for _, levels := range []int{0, 5, 2} {
		v := randomUint16(11, 14, 19, uint64(levels)+1, levels)
		f := volume.Float(v)
		for _, core := range []volume.Box{v.Box, {Min: [3]int{1, 1, 1}, Max: [3]int{10, 13, 18}}, {Min: [3]int{0, 2, 3}, Max: [3]int{5, 14, 4}}, {Min: [3]int{4, 0, 0}, Max: [3]int{5, 1, 19}}} {
			want, err := Median3(f, core)
			if err != nil {
				t.Fatal(err)
			}
			got, err := Median3Integer(v, core)
			if err != nil {
				t.Fatal(err)
			}
			for i := range want.Pix {
				if float32(got.Pix[i]) != want.Pix[i] {
					t.Fatalf("levels %d core %v voxel %d: integer median %d, float median %g", levels, core, i, got.Pix[i], want.Pix[i])
				}
			}
		}
	}
	u8 := volume.NewShape[uint8](6, 7, 9, 1)
	rng := rand.New(rand.NewPCG(3, 3))
	for i := range u8.Pix {
		u8.Pix[i] = uint8(rng.Uint32())
	}
	want, _ := Median3(volume.Float(u8), u8.Box)
	got, err := Median3Integer(u8, u8.Box)
	if err != nil {
		t.Fatal(err)
	}
	for i := range want.Pix {
		if float32(got.Pix[i]) != want.Pix[i] {
			t.Fatalf("uint8 voxel %d: integer median %d, float median %g", i, got.Pix[i], want.Pix[i])
		}
	}
}

// TestMedianIntegerTiles checks that 27 tiles cut with MedianHalo give the
// whole-volume result (common practice: halo = stencil radius).
func TestMedianIntegerTiles(t *testing.T) {
	v := randomUint16(16, 17, 18, 9, 7)
	whole, err := Median3Integer(v, v.Box)
	if err != nil {
		t.Fatal(err)
	}
	tl := volume.Tiling{Whole: v.Box, Tile: [3]int{6, 6, 6}}
	if tl.Len() != 27 {
		t.Fatalf("want 27 tiles, got %d", tl.Len())
	}
	for _, core := range tl.Cores() {
		got, err := Median3Integer(v.Crop(core.Grow(MedianHalo).Intersect(v.Box), 0), core)
		if err != nil {
			t.Fatal(err)
		}
		for z := core.Min[0]; z < core.Max[0]; z++ {
			for y := core.Min[1]; y < core.Max[1]; y++ {
				for x := core.Min[2]; x < core.Max[2]; x++ {
					if got.At(z, y, x) != whole.At(z, y, x) {
						t.Fatalf("tile %v differs at (%d,%d,%d): %d vs %d", core, z, y, x, got.At(z, y, x), whole.At(z, y, x))
					}
				}
			}
		}
	}
}

// TestMedianIntegerMatchesScipy runs scipy on the uint16 array itself.
func TestMedianIntegerMatchesScipy(t *testing.T) {
	needPython(t)
	v := randomUint16(9, 12, 23, 4, 9)
	dir := t.TempDir()
	in, out := filepath.Join(dir, "in.u16"), filepath.Join(dir, "out.u16")
	b := make([]byte, 2*len(v.Pix))
	for i, p := range v.Pix {
		binary.LittleEndian.PutUint16(b[2*i:], p)
	}
	if err := os.WriteFile(in, b, 0o644); err != nil {
		t.Fatal(err)
	}
	s := v.Shape()
	// Source: scipy 1.10 scipy.ndimage.median_filter(size=3, mode='nearest') on uint16, run live.
	script := `import sys, numpy as np, scipy.ndimage as ndi
a = np.fromfile(sys.argv[1], dtype='<u2').reshape(int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5]))
ndi.median_filter(a, size=3, mode='nearest').astype('<u2').tofile(sys.argv[2])
`
	if o, err := exec.Command(refPython, "-c", script, in, out, itoa(s[0]), itoa(s[1]), itoa(s[2])).CombinedOutput(); err != nil {
		t.Fatalf("scipy: %v\n%s", err, o)
	}
	w, err := os.ReadFile(out)
	if err != nil || len(w) != len(b) {
		t.Fatalf("scipy output: %d bytes, %v", len(w), err)
	}
	got, err := Median3Integer(v, v.Box)
	if err != nil {
		t.Fatal(err)
	}
	for i := range got.Pix {
		if want := binary.LittleEndian.Uint16(w[2*i:]); got.Pix[i] != want {
			t.Fatalf("voxel %d: median %d, scipy %d", i, got.Pix[i], want)
		}
	}
}

// BenchmarkMedian3Uint16Tile128 filters one 128³ tile core (input 130³) of
// uniform random uint16 values; compare BenchmarkMedian3Tile128 (float32).
func BenchmarkMedian3Uint16Tile128(b *testing.B) {
	const n = 128
	v := randomUint16(n+2, n+2, n+2, 5, 0)
	core := volume.BoxOf(n, n, n).Translate([3]int{1, 1, 1})
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := Median3Rows(v, core, func(z, y int, row []uint16) {}); err != nil {
			b.Fatal(err)
		}
	}
	reportPerCore(b, n*n*n)
}

// TestMedianLevelsMatchesMedian checks the threshold-decomposition counts
// against the median itself: above = number of cuts below the median, for
// cuts on and between the grey levels (ties), beyond both ends, and for
// clamped and interior sub-boxes. Source: Median3Integer (checked against
// scipy above); Fitch, Coyle & Gallagher 1984 for the identity.
func TestMedianLevelsMatchesMedian(t *testing.T) {
	v := randomUint16(10, 13, 17, 21, 6)
	step := 65535 / 5
	cutSets := [][]int{{step - 1, 3 * step}, {step, 2 * step, 4 * step, 5 * step}, {-5}, {70000}, {0}, {2*step + 7, 2 * step}}
	for _, cuts := range cutSets {
		for _, core := range []volume.Box{v.Box, {Min: [3]int{1, 1, 1}, Max: [3]int{9, 12, 16}}, {Min: [3]int{0, 2, 3}, Max: [3]int{5, 13, 4}}, {Min: [3]int{9, 0, 0}, Max: [3]int{10, 1, 17}}} {
			med, err := Median3Integer(v, core)
			if err != nil {
				t.Fatal(err)
			}
			var seen atomic.Int64 // rows come out on the filter's goroutines
			err = Median3Levels(v, core, cuts, func(z, y int, above []uint8) {
				seen.Add(1)
				for i, a := range above {
					m := int(med.At(z, y, core.Min[2]+i))
					want := 0
					for _, c := range cuts {
						if m > c {
							want++
						}
					}
					if int(a) != want {
						t.Errorf("cuts %v core %v at (%d,%d,%d): %d cuts below, median %d gives %d", cuts, core, z, y, core.Min[2]+i, a, m, want)
					}
				}
			})
			if err != nil {
				t.Fatal(err)
			}
			if s := core.Size(); seen.Load() != int64(s[0]*s[1]) {
				t.Fatalf("%d rows emitted, want %d", seen.Load(), s[0]*s[1])
			}
		}
	}
	// uint8, cuts inside and beyond the 0..255 range.
	u8 := volume.NewShape[uint8](7, 8, 9, 1)
	rng := rand.New(rand.NewPCG(8, 8))
	for i := range u8.Pix {
		u8.Pix[i] = uint8(rng.IntN(4) * 85)
	}
	med8, _ := Median3Integer(u8, u8.Box)
	cuts8 := []int{84, 85, 170, 300}
	err := Median3Levels(u8, u8.Box, cuts8, func(z, y int, above []uint8) {
		for i, a := range above {
			m, want := int(med8.At(z, y, i)), 0
			for _, c := range cuts8 {
				if m > c {
					want++
				}
			}
			if int(a) != want {
				t.Errorf("uint8 at (%d,%d,%d): %d cuts below, median %d gives %d", z, y, i, a, m, want)
			}
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	if err := Median3Levels(v, v.Box, []int{1, 2, 3, 4, 5}, func(int, int, []uint8) {}); err == nil {
		t.Error("five cuts accepted")
	}
}

// BenchmarkMedian3LevelsTile128: two cuts over one 128³ tile (uint16).
func BenchmarkMedian3LevelsTile128(b *testing.B) {
	const n = 128
	v := randomUint16(n+2, n+2, n+2, 5, 0)
	core := volume.BoxOf(n, n, n).Translate([3]int{1, 1, 1})
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := Median3Levels(v, core, []int{20000, 40000}, func(z, y int, above []uint8) {}); err != nil {
			b.Fatal(err)
		}
	}
	reportPerCore(b, n*n*n)
}
