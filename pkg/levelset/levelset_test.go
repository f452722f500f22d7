package levelset

import (
	"bytes"
	"encoding/binary"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

const refPython = "/usr/bin/python3"

func needPython(t *testing.T) {
	t.Helper()
	if err := exec.Command(refPython, "-c", "import scipy.ndimage, numpy").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("levelset: %s with scipy is required in CI: %v", refPython, err)
		}
		t.Skipf("%s with scipy not available (%v); set CI to make this a failure", refPython, err)
	}
}

// Source: scipy 1.10 scipy.ndimage.gaussian_filter(mode="constant", cval=0,
// truncate=3) run live: same normalised sampled Gaussian, outside voxels
// zero. Both radii are 5 for σ = 1.5 (scipy: int(3·1.5 + 0.5)).
func TestSmoothMatchesSciPy(t *testing.T) {
	needPython(t)
	lab := volume.NewShape[uint8](20, 22, 24, 0)
	synth.Boolean(lab, synth.BooleanIntensity(1, 4), 4, 1, 42)
	set := phase.Of(1)
	const sigma = 1.5
	got := Smooth(lab, set, lab.Box, sigma)

	dir := t.TempDir()
	in := filepath.Join(dir, "lab.u8")
	if err := os.WriteFile(in, lab.Pix, 0o644); err != nil {
		t.Fatal(err)
	}
	script := `
import sys, numpy as np, scipy.ndimage as nd
a = (np.fromfile(sys.argv[1], dtype=np.uint8).reshape(20, 22, 24) == 1).astype(np.float64)
g = nd.gaussian_filter(a, 1.5, mode="constant", cval=0.0, truncate=3.0)
sys.stdout.buffer.write(g.astype("<f8").tobytes())
`
	out, err := exec.Command(refPython, "-c", script, in).Output()
	if err != nil {
		t.Fatalf("scipy: %v", err)
	}
	want := make([]float64, lab.Box.Voxels())
	if err := binary.Read(bytes.NewReader(out), binary.LittleEndian, want); err != nil {
		t.Fatal(err)
	}
	worst := 0.0
	for i, w := range want {
		worst = math.Max(worst, math.Abs(float64(got.Pix[i])-w))
	}
	t.Logf("max |Smooth − scipy gaussian_filter| = %.2g", worst)
	if worst > 1e-6 { // float32 storage
		t.Errorf("Smooth differs from scipy gaussian_filter by %.3g", worst)
	}
}

// Source: scipy.ndimage.gaussian_filter kernel taps — normalised to unit sum,
// radius int(truncate·σ + 0.5) (equal to ours for σ = 1, 1.5, 2).
func TestKernel(t *testing.T) {
	for _, s := range []float64{1, 1.5, 2} {
		k := Kernel(s)
		sum := 0.0
		for _, v := range k {
			sum += v
		}
		if math.Abs(sum-1) > 1e-12 || len(k) != 2*int(3*s+0.5)+1 {
			t.Errorf("σ=%v: %d taps summing to %v", s, len(k), sum)
		}
	}
}

// Source: our own derivation (package doc) — where the kernel sees only
// nonwetting phase and solid, the normalised convolution is exactly 1, so a
// nonwetting–solid wall creates no gradient.
func TestFractionIgnoresSolid(t *testing.T) {
	lab := volume.NewShape[uint8](30, 30, 30, 0)
	synth.Fill(lab, 2, func(z, y, x float64) bool { return z+0.3*y > 12 })
	synth.Fill(lab, 1, func(z, y, x float64) bool { return z > 22 })
	phi := Fraction(lab, phase.Of(2), phase.Of(1, 2), lab.Box, 1.5)
	for z := 0; z < 30; z++ {
		for y := 0; y < 30; y++ {
			for x := 0; x < 30; x++ {
				v := phi.At(z, y, x)
				if z <= 16 && !math.IsNaN(float64(v)) && v != 1 {
					t.Fatalf("φ(%d,%d,%d) = %v next to an n–solid wall, want exactly 1", z, y, x, v)
				}
			}
		}
	}
}

// Source: analytic geometry — the level sets of φ = −|p − c| are spheres,
// κ = 2/|p − c|; the central-difference formula must reproduce it to
// second order in 1/r.
func TestTotalCurvatureOfSpheres(t *testing.T) {
	b := volume.BoxOf(41, 41, 41)
	f := volume.New[float32](b, 0)
	c := [3]float64{20.3, 19.8, 20.1}
	i := 0
	for z := 0; z < 41; z++ {
		for y := 0; y < 41; y++ {
			for x := 0; x < 41; x++ {
				d := [3]float64{float64(z) - c[0], float64(y) - c[1], float64(x) - c[2]}
				f.Pix[i] = float32(-math.Sqrt(d[0]*d[0] + d[1]*d[1] + d[2]*d[2]))
				i++
			}
		}
	}
	for _, p := range [][3]int{{30, 20, 20}, {20, 35, 22}, {8, 9, 30}} {
		g, ok1 := Gradient(f, p[0], p[1], p[2])
		h, ok2 := Hessian(f, p[0], p[1], p[2])
		r := math.Sqrt(sq(float64(p[0])-c[0]) + sq(float64(p[1])-c[1]) + sq(float64(p[2])-c[2]))
		k := TotalCurvature(g, h)
		if !ok1 || !ok2 || math.Abs(k-2/r) > 0.01*2/r {
			t.Errorf("at %v (r=%.2f): κ=%v, want %v ± 1%%", p, r, k, 2/r)
		}
	}
	if _, ok := Gradient(f, 0, 5, 5); ok {
		t.Error("Gradient at the box edge should report !ok")
	}
}

// Source: our own derivation — ∇(G∗χ) of a half-space points along its
// normal into the set; checked on a tilted plane.
func TestGradientAtTiltedPlane(t *testing.T) {
	lab := volume.NewShape[uint8](40, 40, 40, 0)
	n := [3]float64{0.8, 0.36, -0.48}
	synth.Fill(lab, 1, func(z, y, x float64) bool { return n[0]*(z-20)+n[1]*(y-20)+n[2]*(x-20) > 0 })
	g := GradientAt(lab, phase.Of(1), [3]int{20, 20, 20}, 2)
	l := math.Sqrt(g[0]*g[0] + g[1]*g[1] + g[2]*g[2])
	ang := math.Acos((g[0]*n[0]+g[1]*n[1]+g[2]*n[2])/l) * 180 / math.Pi
	t.Logf("GradientAt on a tilted plane: %.2f° from the normal", ang)
	if ang > 1 {
		t.Errorf("GradientAt is %.2f° off the plane normal, want < 1°", ang)
	}
}

func sq(v float64) float64 { return v * v }

func BenchmarkFraction(b *testing.B) {
	lab := volume.NewShape[uint8](128, 128, 128, 0)
	synth.Boolean(lab, synth.BooleanIntensity(1, 8), 8, 2, 1)
	num, den := phase.Of(2), phase.Of(1, 2)
	for i := 0; i < b.N; i++ {
		Fraction(lab, num, den, lab.Box, 1.5)
	}
	b.ReportMetric(float64(lab.Box.Voxels())*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}

// Source: definition of Euclidean distance — Near must agree with a brute
// force search over all set voxels, on a sub-box and with voxels missing
// beyond lab.Box.
func TestNearMatchesBruteForce(t *testing.T) {
	lab := volume.NewShape[uint8](18, 19, 20, 0)
	synth.Boolean(lab, synth.BooleanIntensity(0.2, 2), 2, 1, 9)
	box := volume.Box{Min: [3]int{2, 0, 3}, Max: [3]int{17, 15, 20}}
	for _, e := range []float64{0, 1.5, 2, 3, 3.2} {
		got := Near(lab, phase.Of(1), box, e)
		for z := box.Min[0]; z < box.Max[0]; z++ {
			for y := box.Min[1]; y < box.Max[1]; y++ {
				for x := box.Min[2]; x < box.Max[2]; x++ {
					want := uint8(0)
					for i, l := range lab.Pix {
						q := [3]int{i / (19 * 20), i / 20 % 19, i % 20}
						if l == 1 && float64(sq(float64(q[0]-z))+sq(float64(q[1]-y))+sq(float64(q[2]-x))) <= e*e {
							want = 1
							break
						}
					}
					if got.At(z, y, x) != want {
						t.Fatalf("e=%v: Near(%d,%d,%d) = %d, brute force %d", e, z, y, x, got.At(z, y, x), want)
					}
				}
			}
		}
	}
}
