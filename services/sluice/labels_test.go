package main

import (
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// refPython is Debian's interpreter with numpy and tifffile; the python3
// first on PATH lacks them.
const refPython = "/usr/bin/python3"

// pythonRef runs a script under refPython; without numpy/tifffile the test
// fails under CI and is skipped otherwise.
func pythonRef(t *testing.T, script string, args ...string) string {
	t.Helper()
	if out, err := exec.Command(refPython, "-c", "import numpy, tifffile").CombinedOutput(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("numpy/tifffile unavailable in %s: %s", refPython, out)
		}
		t.Skipf("numpy/tifffile unavailable in %s: %s", refPython, out)
	}
	out, err := exec.Command(refPython, append([]string{"-c", script}, args...)...).CombinedOutput()
	if err != nil {
		t.Fatalf("python: %v\n%s", err, out)
	}
	return strings.TrimSpace(string(out))
}

// measureJSON runs `sluice measure --json ARGS` and decodes its object.
func measureJSON(t *testing.T, args ...string) map[string]any {
	t.Helper()
	code, out, errs := runCLI(t, append([]string{"measure", "--json"}, args...)...)
	if code != 0 {
		t.Fatalf("measure %v: exit %d: %s", args, code, errs)
	}
	var m map[string]any
	if err := json.Unmarshal([]byte(out), &m); err != nil {
		t.Fatalf("measure %v: not one JSON object: %v\n%s", args, err, out)
	}
	return m
}

// A 96-page label TIFF written by tifffile is a 96-slice volume: `measure
// --labels stack.tif` once read it as one slice (shape 1 × 96 × 96,
// porosity 0.0000, exit 0).
func TestMeasureMultiPageTIFFLabels(t *testing.T) {
	dir := t.TempDir()
	stack := filepath.Join(dir, "stack.tif")
	// Source: numpy counts of the labels tifffile 2023.2.3 writes, one
	// page per z (photometric minisblack, Deflate): a solid cylinder,
	// brine below z = 60 and oil above; the first page is all solid, so a
	// reader that takes one page gets porosity 0.
	out := pythonRef(t, `
import sys, numpy as np, tifffile
z, y, x = np.mgrid[:96, :96, :96]
lab = np.where((y - 47.5)**2 + (x - 51.5)**2 < 20**2, 0, np.where(z >= 60, 2, 1)).astype(np.uint8)
lab[0] = 0
lab[:, :, :4] = 255
tifffile.imwrite(sys.argv[1], lab, photometric="minisblack", compression="zlib")
inside = (lab != 255).sum()
print(((lab == 1) | (lab == 2)).sum() / inside, (lab == 2).sum() / ((lab == 1) | (lab == 2)).sum())`, stack)
	f := strings.Fields(out)
	porosity, _ := strconv.ParseFloat(f[0], 64)
	sn, _ := strconv.ParseFloat(f[1], 64)
	m := measureJSON(t, "--labels", "--voxel-size", "3um", stack)
	if got := m["shape_zyx"]; !sameShape(got, [3]int{96, 96, 96}) {
		t.Errorf("shape_zyx %v, want [96 96 96]", got)
	}
	// Voxel counts: exact up to float rounding.
	if p := num(m, "porosity"); math.Abs(p-porosity) > 1e-12 {
		t.Errorf("porosity %.6f, numpy counts %.6f", p, porosity)
	}
	if s := num(m, "saturation_nonwetting"); math.Abs(s-sn) > 1e-12 {
		t.Errorf("S_n %.6f, numpy counts %.6f", s, sn)
	}
	// A page of another size is refused with its number.
	bad := filepath.Join(dir, "bad.tif")
	pythonRef(t, `
import sys, numpy as np, tifffile
with tifffile.TiffWriter(sys.argv[1]) as w:
    for k in range(6):
        w.write(np.zeros((16, 16 if k != 4 else 15), np.uint8), photometric="minisblack", contiguous=False)`, bad)
	code, _, errs := runCLI(t, "measure", "--labels", bad)
	if code != exitBadInput {
		t.Errorf("page of another size: exit %d, want %d", code, exitBadInput)
	}
	oneLineError(t, "page of another size", code, errs, "bad.tif", "page 5 of 6 is 15×16 uint8, page 1 is 16×16 uint8")
}

// num is a number of a measure object; a missing or null key is NaN.
func num(m map[string]any, key string) float64 {
	if f, ok := m[key].(float64); ok {
		return f
	}
	return math.NaN()
}

func sameShape(got any, want [3]int) bool {
	a, ok := got.([]any)
	if !ok || len(a) != 3 {
		return false
	}
	for i := range want {
		if f, ok := a[i].(float64); !ok || int(f) != want[i] {
			return false
		}
	}
	return true
}
