package filter

import (
	"encoding/binary"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"testing"

	"sluice/pkg/volume"
)

// refPython is the interpreter that has Debian's scipy 1.10 and
// scikit-image 0.19 (the python3 first on PATH lacks them).
const refPython = "/usr/bin/python3"

func needPython(t *testing.T) {
	t.Helper()
	if err := exec.Command(refPython, "-c", "import scipy.ndimage, numpy").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("reference scipy missing under CI: %v", err)
		}
		t.Skipf("reference scipy not importable through %s (%v); install python3-scipy", refPython, err)
	}
}

func randomVolume(nz, ny, nx int, seed uint64) *volume.Volume[float32] {
	rng := rand.New(rand.NewPCG(seed, 7))
	v := volume.NewShape[float32](nz, ny, nx, 1e-6)
	for i := range v.Pix {
		v.Pix[i] = rng.Float32()
	}
	return v
}

func writeF32(t *testing.T, path string, pix []float32) {
	t.Helper()
	b := make([]byte, 4*len(pix))
	for i, p := range pix {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(p))
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

func readF32(t *testing.T, path string, n int) []float32 {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if len(b) != 4*n {
		t.Fatalf("%s: %d bytes, want %d", path, len(b), 4*n)
	}
	out := make([]float32, n)
	for i := range out {
		out[i] = math.Float32frombits(binary.LittleEndian.Uint32(b[4*i:]))
	}
	return out
}

// scipyFilter runs expr (using numpy array `a`) through the reference
// interpreter and returns the float32 result.
func scipyFilter(t *testing.T, v *volume.Volume[float32], expr string) []float32 {
	t.Helper()
	dir := t.TempDir()
	in, out := filepath.Join(dir, "in.f32"), filepath.Join(dir, "out.f32")
	writeF32(t, in, v.Pix)
	s := v.Shape()
	script := `import sys, numpy as np, scipy.ndimage as ndi
a = np.fromfile(sys.argv[1], dtype='<f4').reshape(int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5]))
r = ` + expr + `
np.asarray(r, dtype='<f4').tofile(sys.argv[2])
`
	cmd := exec.Command(refPython, "-c", script, in, out, itoa(s[0]), itoa(s[1]), itoa(s[2]))
	if b, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("scipy: %v\n%s", err, b)
	}
	return readF32(t, out, len(v.Pix))
}

func itoa(i int) string { return strconv.Itoa(i) }

func fmtF(f float64) string { return strconv.FormatFloat(f, 'g', -1, 64) }

// reportPerCore reports throughput per core: voxels per second divided by
// GOMAXPROCS (the filters run one goroutine per z-slab).
func reportPerCore(b *testing.B, voxels int) {
	sec := b.Elapsed().Seconds()
	if sec > 0 {
		b.ReportMetric(float64(voxels)*float64(b.N)/sec/1e6/float64(runtime.GOMAXPROCS(0)), "MVox/s/core")
	}
}

func TestMedianMatchesScipy(t *testing.T) {
	needPython(t)
	v := randomVolume(9, 13, 17, 1)
	// Source: scipy 1.10 scipy.ndimage.median_filter(size=3, mode='nearest'), run live.
	want := scipyFilter(t, v, "ndi.median_filter(a, size=3, mode='nearest')")
	got, err := Median3(v, v.Box)
	if err != nil {
		t.Fatal(err)
	}
	for i := range want {
		if got.Pix[i] != want[i] {
			t.Fatalf("voxel %d: median %g, scipy %g", i, got.Pix[i], want[i])
		}
	}
}

func TestGaussianMatchesScipy(t *testing.T) {
	needPython(t)
	v := randomVolume(11, 14, 19, 2)
	for _, c := range []struct{ sigma, truncate float64 }{{0.8, 4}, {1.5, 4}, {1.2, 2.5}, {3, 4}} {
		// Source: scipy 1.10 scipy.ndimage.gaussian_filter(mode='nearest', truncate=…), run live.
		want := scipyFilter(t, v, "ndi.gaussian_filter(a, sigma="+fmtF(c.sigma)+", mode='nearest', truncate="+fmtF(c.truncate)+")")
		got, err := Gaussian(v, v.Box, c.sigma, c.truncate)
		if err != nil {
			t.Fatal(err)
		}
		const tol = 2e-6 // float32 storage between axes, like scipy; the order of the tap pairs may differ
		worst, bits := 0.0, 0
		for i := range want {
			worst = math.Max(worst, math.Abs(float64(got.Pix[i]-want[i])))
			if math.Float32bits(got.Pix[i]) != math.Float32bits(want[i]) {
				bits++
			}
		}
		if worst > tol {
			t.Errorf("sigma %g truncate %g: max |Δ| = %g > %g", c.sigma, c.truncate, worst, tol)
		}
		t.Logf("sigma %g truncate %g: max |Δ| vs scipy = %.2g, %d of %d voxels not bit-identical", c.sigma, c.truncate, worst, bits, len(want))
	}
}

// tileCheck filters the whole volume and 27 tiles cut with the given halo and
// asserts bit-identical cores.
func tileCheck(t *testing.T, name string, v *volume.Volume[float32], halo int, fn func(in *volume.Volume[float32], core volume.Box) (*volume.Volume[float32], error)) {
	t.Helper()
	whole, err := fn(v, v.Box)
	if err != nil {
		t.Fatal(err)
	}
	s := v.Shape()
	tl := volume.Tiling{Whole: v.Box, Tile: [3]int{(s[0] + 2) / 3, (s[1] + 2) / 3, (s[2] + 2) / 3}}
	if tl.Len() != 27 {
		t.Fatalf("want 27 tiles, got %d", tl.Len())
	}
	for _, core := range tl.Cores() {
		in := v.Crop(core.Grow(halo).Intersect(v.Box), 0)
		got, err := fn(in, core)
		if err != nil {
			t.Fatal(err)
		}
		for z := core.Min[0]; z < core.Max[0]; z++ {
			for y := core.Min[1]; y < core.Max[1]; y++ {
				for x := core.Min[2]; x < core.Max[2]; x++ {
					if got.At(z, y, x) != whole.At(z, y, x) {
						t.Fatalf("%s: tile %v differs at (%d,%d,%d): %g vs %g", name, core, z, y, x, got.At(z, y, x), whole.At(z, y, x))
					}
				}
			}
		}
	}
}

func TestTileInvariance(t *testing.T) {
	v := randomVolume(16, 17, 18, 3)
	tileCheck(t, "median", v, MedianHalo, Median3)
	tileCheck(t, "gaussian", v, GaussianRadius(1.3, DefaultTruncate), func(in *volume.Volume[float32], c volume.Box) (*volume.Volume[float32], error) {
		return Gaussian(in, c, 1.3, DefaultTruncate)
	})
	p := DefaultNLM(0.2)
	tileCheck(t, "nlm", v, p.Halo(), p.Apply)
}

// TestNLMEdgePreserving checks the two properties the filter is used for: on
// a noisy step (two flat regions, contrast 5σ) it removes most of the noise in
// the flat parts and leaves the step in place, where a Gaussian of similar
// noise reduction smears it.
func TestNLMEdgePreserving(t *testing.T) {
	const sigma = 0.1
	rng := rand.New(rand.NewPCG(11, 12))
	v := volume.NewShape[float32](20, 20, 20, 1)
	for z := 0; z < 20; z++ {
		for y := 0; y < 20; y++ {
			for x := 0; x < 20; x++ {
				base := float32(0)
				if x >= 10 {
					base = 5 * sigma
				}
				v.Set(z, y, x, base+float32(sigma*rng.NormFloat64()))
			}
		}
	}
	got, err := DefaultNLM(sigma).Apply(v, v.Box)
	if err != nil {
		t.Fatal(err)
	}
	// Residual noise far from the step and in the two voxel planes next to it.
	var flat, edge, nf, ne float64
	wrong := 0
	for z := 3; z < 17; z++ {
		for y := 3; y < 17; y++ {
			for x := 2; x < 18; x++ {
				want := 0.0
				if x >= 10 {
					want = 5 * sigma
				}
				d := float64(got.At(z, y, x)) - want
				if x == 9 || x == 10 {
					edge += d * d
					ne++
				} else if x < 7 || x > 12 {
					flat += d * d
					nf++
				}
				if (got.At(z, y, x) > 2.5*sigma) != (x >= 10) {
					wrong++
				}
			}
		}
	}
	rf, re := math.Sqrt(flat/nf), math.Sqrt(edge/ne)
	t.Logf("NLM residual rms: flat %.3fσ, at the step %.3fσ, misclassified %d", rf/sigma, re/sigma, wrong)
	// Source: Buades, Coll & Morel 2005 (NLM averages only similar patches), common practice for the thresholds.
	if rf > 0.4*sigma {
		t.Errorf("flat-region noise %.3fσ, want < 0.4σ", rf/sigma)
	}
	if re > 0.6*sigma {
		t.Errorf("noise at the step %.3fσ, want < 0.6σ (edge smeared)", re/sigma)
	}
	if wrong != 0 {
		t.Errorf("%d voxels on the wrong side of the mid-level after NLM", wrong)
	}
	// A constant volume stays constant.
	c := volume.NewShape[float32](6, 6, 6, 1)
	for i := range c.Pix {
		c.Pix[i] = 0.25
	}
	cc, _ := DefaultNLM(sigma).Apply(c, c.Box)
	for _, p := range cc.Pix {
		if p != 0.25 {
			t.Fatalf("constant volume changed to %g", p)
		}
	}
}

func TestBadInput(t *testing.T) {
	v := randomVolume(4, 4, 4, 1)
	if _, err := Median3(v, v.Box.Grow(1)); err == nil {
		t.Error("core outside input accepted")
	}
	if _, err := Gaussian(v, v.Box, -1, 4); err == nil {
		t.Error("negative sigma accepted")
	}
	if _, err := (NLM{PatchRadius: 1, SearchRadius: 2}).Apply(v, v.Box); err == nil {
		t.Error("NLM without sigma accepted")
	}
}

func benchFilter(b *testing.B, fn func(in *volume.Volume[float32], core volume.Box) (*volume.Volume[float32], error), halo int) {
	const n = 64
	v := randomVolume(n+2*halo, n+2*halo, n+2*halo, 5)
	core := volume.BoxOf(n, n, n).Translate([3]int{halo, halo, halo})
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := fn(v, core); err != nil {
			b.Fatal(err)
		}
	}
	reportPerCore(b, n*n*n)
}

func BenchmarkMedian3(b *testing.B) { benchFilter(b, Median3, 1) }
func BenchmarkGaussian1(b *testing.B) {
	benchFilter(b, func(in *volume.Volume[float32], c volume.Box) (*volume.Volume[float32], error) {
		return Gaussian(in, c, 1, DefaultTruncate)
	}, 4)
}
func BenchmarkNLM(b *testing.B) { p := DefaultNLM(0.1); benchFilter(b, p.Apply, p.Halo()) }
