package distance

import (
	"encoding/binary"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// referencePython is the Debian interpreter that carries scipy; the python3
// first on PATH does not.
const referencePython = "/usr/bin/python3"

// needScipy skips (or, under CI, fails) when scipy cannot be imported.
func needScipy(t testing.TB) {
	t.Helper()
	out, err := exec.Command(referencePython, "-c", "import scipy.ndimage, numpy").CombinedOutput()
	if err == nil {
		return
	}
	msg := "scipy is not importable by " + referencePython + " (apt-get install python3-scipy): " + strings.TrimSpace(lastLine(string(out)))
	if os.Getenv("CI") != "" {
		t.Fatal(msg)
	}
	t.Skip(msg)
}

func lastLine(s string) string {
	s = strings.TrimSpace(s)
	if i := strings.LastIndexByte(s, '\n'); i >= 0 {
		return s[i+1:]
	}
	return s
}

// scipyEDT runs scipy.ndimage.distance_transform_edt LIVE on the complement
// of mask and returns the exact integer squared distances, computed from the
// nearest-site indices scipy returns (so no square root is rounded).
func scipyEDT(t *testing.T, mask []bool, shape [3]int) []int64 {
	t.Helper()
	dir := t.TempDir()
	in := filepath.Join(dir, "mask.raw")
	outPath := filepath.Join(dir, "d2.raw")
	raw := make([]byte, len(mask))
	for i, m := range mask {
		if !m {
			raw[i] = 1 // scipy measures from nonzero voxels to the nearest zero
		}
	}
	if err := os.WriteFile(in, raw, 0o644); err != nil {
		t.Fatal(err)
	}
	script := `
import sys, numpy as np
from scipy import ndimage
nz, ny, nx = map(int, sys.argv[3:6])
a = np.fromfile(sys.argv[1], dtype=np.uint8).reshape(nz, ny, nx)
d, idx = ndimage.distance_transform_edt(a, return_indices=True)
g = np.indices(a.shape)
d2 = ((idx - g).astype(np.int64) ** 2).sum(axis=0)
assert np.allclose(np.sqrt(d2), d)
d2.astype('<i8').tofile(sys.argv[2])
`
	cmd := exec.Command(referencePython, "-c", script, in, outPath,
		strconv.Itoa(shape[0]), strconv.Itoa(shape[1]), strconv.Itoa(shape[2]))
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("scipy reference failed: %v\n%s", err, out)
	}
	b, err := os.ReadFile(outPath)
	if err != nil {
		t.Fatal(err)
	}
	if len(b) != 8*len(mask) {
		t.Fatalf("scipy wrote %d bytes, want %d", len(b), 8*len(mask))
	}
	d := make([]int64, len(mask))
	for i := range d {
		d[i] = int64(binary.LittleEndian.Uint64(b[8*i:]))
	}
	return d
}

// randomScene draws a label volume with solid grains (code 0) in pore space
// (code 1): a Boolean model of balls plus isolated specks, so both long and
// short distances occur.
func randomScene(shape [3]int, eta, speck float64, seed uint64) *volume.Labels {
	lab := volume.NewShape[uint8](shape[0], shape[1], shape[2], 1)
	for i := range lab.Pix {
		lab.Pix[i] = 1
	}
	if eta > 0 {
		synth.Boolean(lab, synth.BooleanIntensity(eta, 3.5), 3.5, 0, seed)
	}
	rng := rand.New(rand.NewPCG(seed, 7))
	for i := range lab.Pix {
		if rng.Float64() < speck {
			lab.Pix[i] = 0
		}
	}
	return lab
}

// Source: scipy 1.10 ndimage.distance_transform_edt (exact Euclidean feature
// transform), run live; squared distances must agree exactly.
func TestSquaredToSetMatchesScipy(t *testing.T) {
	needScipy(t)
	cases := []struct {
		name       string
		shape      [3]int
		eta, speck float64
		seed       uint64
		set        uint8
	}{
		{name: "grains", shape: [3]int{29, 34, 41}, eta: 0.6, speck: 0, seed: 1, set: 0},
		{name: "pores", shape: [3]int{29, 34, 41}, eta: 0.6, speck: 0, seed: 2, set: 1},
		{name: "sparse specks", shape: [3]int{40, 23, 37}, eta: 0, speck: 0.0005, seed: 3, set: 0},
		{name: "dense specks", shape: [3]int{17, 45, 26}, eta: 0.2, speck: 0.05, seed: 4, set: 0},
		{name: "thin", shape: [3]int{1, 60, 3}, eta: 0, speck: 0.02, seed: 5, set: 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			lab := randomScene(c.shape, c.eta, c.speck, c.seed)
			set := phase.Of(c.set)
			mask := make([]bool, len(lab.Pix))
			any := false
			for i, p := range lab.Pix {
				mask[i] = set[p]
				any = any || mask[i]
			}
			if !any {
				t.Fatalf("scene has no voxel of the set; pick another seed")
			}
			want := scipyEDT(t, mask, c.shape)
			got := SquaredToSet(lab, set)
			bad, maxd := 0, int64(0)
			for i := range want {
				maxd = max(maxd, want[i])
				if got[i] != float64(want[i]) {
					if bad < 5 {
						t.Errorf("voxel %d: got %v, scipy %d", i, got[i], want[i])
					}
					bad++
				}
			}
			if bad > 0 {
				t.Fatalf("%d of %d voxels differ from scipy", bad, len(want))
			}
			t.Logf("%d voxels equal to scipy, largest squared distance %d", len(want), maxd)
			if m := SquaredToMask(mask, c.shape); !equalFloats(m, got) {
				t.Fatal("SquaredToMask differs from SquaredToSet")
			}
			// A reused destination with stale values gives the same result.
			stale := make([]float64, len(got)+5)
			for i := range stale {
				stale[i] = -1
			}
			if r := SquaredToSetInto(stale, lab, set); !equalFloats(r, got) {
				t.Fatal("SquaredToSetInto with a reused buffer differs")
			}
		})
	}
}

func equalFloats(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// Source: the definition D(p) = min_q (|p−q|² + f(q)) (Felzenszwalb &
// Huttenlocher 2012, eq. 1), evaluated by brute force over all pairs.
func TestSquaredMatchesBruteForce(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	for trial := 0; trial < 6; trial++ {
		shape := [3]int{1 + rng.IntN(9), 1 + rng.IntN(9), 1 + rng.IntN(9)}
		n := shape[0] * shape[1] * shape[2]
		f := make([]float64, n)
		for i := range f {
			switch r := rng.Float64(); {
			case r < 0.6:
				f[i] = math.Inf(1)
			case r < 0.8:
				f[i] = 0
			default:
				f[i] = float64(rng.IntN(30)) // a sampled function, not only a set
			}
		}
		want := make([]float64, n)
		for p := 0; p < n; p++ {
			pz, py, px := p/(shape[1]*shape[2]), p/shape[2]%shape[1], p%shape[2]
			best := math.Inf(1)
			for q := 0; q < n; q++ {
				qz, qy, qx := q/(shape[1]*shape[2]), q/shape[2]%shape[1], q%shape[2]
				d := float64((pz-qz)*(pz-qz)+(py-qy)*(py-qy)+(px-qx)*(px-qx)) + f[q]
				best = math.Min(best, d)
			}
			want[p] = best
		}
		got := append([]float64(nil), f...)
		Squared(got, shape)
		for i := range want {
			if got[i] != want[i] {
				t.Fatalf("shape %v voxel %d: got %v, brute force %v", shape, i, got[i], want[i])
			}
		}
	}
}

// Source: analytic — the distance to a single voxel at c is |p − c|², and
// the transform does not depend on where the box sits in the global grid.
func TestSingleSiteAndOffsetBox(t *testing.T) {
	box := volume.Box{Min: [3]int{100, -7, 3}, Max: [3]int{113, 4, 22}}
	lab := volume.New[uint8](box, 1)
	c := [3]int{105, -2, 20}
	lab.Set(c[0], c[1], c[2], 9)
	d := SquaredToSet(lab, phase.Of(9))
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			for x := box.Min[2]; x < box.Max[2]; x++ {
				want := float64((z-c[0])*(z-c[0]) + (y-c[1])*(y-c[1]) + (x-c[2])*(x-c[2]))
				if got := d[lab.Index(z, y, x)]; got != want {
					t.Fatalf("(%d,%d,%d): got %v want %v", z, y, x, got, want)
				}
			}
		}
	}
}

// Source: definition — an empty set is infinitely far; a full set is at 0.
func TestEmptyAndFullSets(t *testing.T) {
	lab := volume.NewShape[uint8](5, 6, 7, 1)
	for _, v := range SquaredToSet(lab, phase.Of(1)) {
		if !math.IsInf(v, 1) {
			t.Fatalf("empty set: got %v, want +Inf", v)
		}
	}
	for _, v := range SquaredToSet(lab, phase.Of(0)) {
		if v != 0 {
			t.Fatalf("full set: got %v, want 0", v)
		}
	}
}

// BenchmarkSquaredToSet256 reports the throughput of the full 3-D transform
// on a 256³ porous scene (distance of the pore space to the grains), with a
// fresh result per call ("alloc") and with a reused one ("reuse").
func BenchmarkSquaredToSet256(b *testing.B) {
	lab := randomScene([3]int{256, 256, 256}, 0.5, 0, 9)
	set := phase.Of(0)
	b.Run("alloc", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			SquaredToSet(lab, set)
		}
		b.ReportMetric(float64(len(lab.Pix))*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
	})
	b.Run("reuse", func(b *testing.B) {
		dst := SquaredToSet(lab, set)
		b.ResetTimer()
		for i := 0; i < b.N; i++ {
			dst = SquaredToSetInto(dst, lab, set)
		}
		b.ReportMetric(float64(len(lab.Pix))*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
	})
}
