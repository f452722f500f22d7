package morph

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"sluice/pkg/phase"
)

// referencePython is the interpreter with scikit-image, SciPy and zarr
// (Debian packages); the python3 first on PATH lacks them.
const referencePython = "/usr/bin/python3"

// requireSkimage skips (or fails under CI) when scikit-image is missing.
func requireSkimage(t *testing.T) {
	t.Helper()
	if err := exec.Command(referencePython, "-c", "import skimage, numpy").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("reference scikit-image not importable by %s: %v", referencePython, err)
		}
		t.Skipf("reference scikit-image not importable by %s (%v); set CI to make this a failure", referencePython, err)
	}
}

// Euler numbers of random label volumes equal scikit-image's
// measure.euler_number with connectivity=1 (6) and connectivity=3 (26).
// skimage 0.19 binarises (label > 0), pads the image with one layer of
// zeros and counts every 2×2×2 cell of the padded image, which is our
// padded origin box [Min−1, Max). Source: scikit-image 0.19
// skimage.measure.euler_number (Ohser, Nagel & Schladitz 2002 coefficients),
// run live.
func TestEulerMatchesSkimage(t *testing.T) {
	requireSkimage(t)
	dir := t.TempDir()
	type cas struct {
		shape [3]int
		p     float64
		seed  uint64
	}
	var cases []cas
	for i, p := range []float64{0.05, 0.2, 0.35, 0.5, 0.65, 0.8, 0.95} {
		cases = append(cases, cas{[3]int{20, 17, 23}, p, uint64(100 + i)})
	}
	cases = append(cases, cas{[3]int{1, 9, 11}, 0.5, 7}, cas{[3]int{31, 2, 29}, 0.6, 8}, cas{[3]int{25, 26, 24}, 0.3, 9})

	var script strings.Builder
	script.WriteString("import numpy as np\nfrom skimage.measure import euler_number\n")
	files := make([]string, len(cases))
	s := phase.Of(1, 2)
	for i, c := range cases {
		lab := randomLabels(c.shape[0], c.shape[1], c.shape[2], c.p, c.seed)
		files[i] = filepath.Join(dir, fmt.Sprintf("v%d.raw", i))
		raw := make([]byte, len(lab.Pix))
		for j, v := range lab.Pix {
			if s[v] {
				raw[j] = 1
			}
		}
		if err := os.WriteFile(files[i], raw, 0o644); err != nil {
			t.Fatal(err)
		}
		fmt.Fprintf(&script, "a = np.fromfile(%q, dtype=np.uint8).reshape(%d, %d, %d)\n", files[i], c.shape[0], c.shape[1], c.shape[2])
		script.WriteString("print(euler_number(a, connectivity=1), euler_number(a, connectivity=3))\n")
	}
	out, err := exec.Command(referencePython, "-c", script.String()).CombinedOutput()
	if err != nil {
		t.Fatalf("skimage run: %v\n%s", err, out)
	}
	lines := strings.Fields(string(out))
	if len(lines) != 2*len(cases) {
		t.Fatalf("skimage output has %d numbers, want %d:\n%s", len(lines), 2*len(cases), out)
	}
	for i, c := range cases {
		want6, err1 := strconv.ParseInt(lines[2*i], 10, 64)
		want26, err2 := strconv.ParseInt(lines[2*i+1], 10, 64)
		if err1 != nil || err2 != nil {
			t.Fatalf("bad skimage output %q", out)
		}
		lab := randomLabels(c.shape[0], c.shape[1], c.shape[2], c.p, c.seed)
		pad, _ := TileOrigins(lab.Box, lab.Box)
		h := Cells(lab, s, pad)
		e6, e26, err := Euler(&h)
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("shape %v p=%.2f: χ6=%d (skimage %d), χ26=%d (skimage %d)", c.shape, c.p, e6, want6, e26, want26)
		if e6 != want6 || e26 != want26 {
			t.Errorf("shape %v p=%.2f seed %d: χ6=%d χ26=%d, skimage %d %d", c.shape, c.p, c.seed, e6, e26, want6, want26)
		}
	}
}
