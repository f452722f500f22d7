package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/synth"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// runCLI runs a sluice command in-process and returns its exit status and
// standard output; standard error goes to the returned string too.
func runCLI(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out bytes.Buffer
	old := stdout
	stdout = &out
	defer func() { stdout = old }()
	r, w, _ := os.Pipe()
	oldErr := os.Stderr
	os.Stderr = w
	code := run(args)
	w.Close()
	os.Stderr = oldErr
	var errb bytes.Buffer
	errb.ReadFrom(r)
	return code, out.String(), errb.String()
}

// capScene is a nonwetting drop on a flat wall: known contact angle and
// curvature (science.md, spherical cap).
func capScene() *volume.Labels {
	lab := volume.NewShape[uint8](40, 64, 64, 2e-6)
	synth.CapScene{Wall: 8, R: 22, DropAngle: 70, Centre: [2]float64{31.5, 31.5}}.Draw(lab, 0, 2, 1)
	return lab
}

// TestMeasureLabelsAllFormats: `sluice measure --labels --json` gives the
// same object for a raw file, a TIFF stack and a Zarr array of one volume.
func TestMeasureLabelsAllFormats(t *testing.T) {
	dir := t.TempDir()
	lab := capScene()
	raw := filepath.Join(dir, "cap.raw")
	if err := volio.WriteRaw(raw, lab, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	stack := filepath.Join(dir, "stack")
	if err := volio.WriteTIFFStack(stack, lab, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	zarr := filepath.Join(dir, "cap.zarr")
	if err := writeLabels(zarr, lab); err != nil {
		t.Fatal(err)
	}
	var first map[string]any
	for _, path := range []string{raw, stack, zarr} {
		code, out, errs := runCLI(t, "measure", "--labels", "--json", "--voxel-size", "2um", "--ift", "0.07275", path)
		if code != 0 {
			t.Fatalf("%s: exit %d: %s", path, code, errs)
		}
		var m map[string]any
		if err := json.Unmarshal([]byte(out), &m); err != nil {
			t.Fatalf("%s: output is not one JSON object: %v\n%s", path, err, out)
		}
		if first == nil {
			first = m
			// Young–Laplace with σ = 72.75 mN/m (CRC Handbook, water–air
			// 20 °C): drop radius 22 voxels × 2 µm → Pc = 2σ/R.
			want := 2 * 0.07275 / (22 * 2e-6)
			if pc := m["capillary_pressure_pa"].(float64); pc < 0.93*want || pc > 1.07*want {
				t.Errorf("Pc %.1f Pa, want %.1f ±7 %%", pc, want)
			}
			// Contact angle through the wetting phase: 180° − 70°.
			if a := m["contact_angle_mean_deg"].(float64); a < 105 || a > 115 {
				t.Errorf("contact angle %.1f°, want 110 ± 5°", a)
			}
			continue
		}
		for _, k := range []string{"porosity", "saturation_wetting", "area_wn_m2", "euler_nonwetting", "ganglia_count", "contact_angle_samples", "curvature_wn_mean_per_m"} {
			if m[k] != first[k] {
				t.Errorf("%s: %s = %v, raw file gave %v", path, k, m[k], first[k])
			}
		}
	}
	code, out, _ := runCLI(t, "measure", "--labels", raw)
	if code != 0 || !strings.Contains(out, "porosity") || !strings.Contains(out, "kPa") {
		t.Errorf("table output: exit %d\n%s", code, out)
	}
}

// TestMeasureBadInput: one line naming the file and the problem, exit 2.
func TestMeasureBadInput(t *testing.T) {
	dir := t.TempDir()
	short := filepath.Join(dir, "short.raw")
	os.WriteFile(short, make([]byte, 1000), 0o644)
	for _, args := range [][]string{
		{"measure", "--labels", "--shape", "10,10,20", "--dtype", "uint8", short},
		{"measure", "--labels", filepath.Join(dir, "missing.raw")},
		{"measure", "--labels", "--connectivity", "8", "--shape", "10,10,10", "--dtype", "uint8", short},
	} {
		code, _, errs := runCLI(t, args...)
		if code != 2 {
			t.Errorf("%v: exit %d, want 2", args, code)
		}
		if lines := strings.Count(strings.TrimSpace(errs), "\n"); lines != 0 || errs == "" {
			t.Errorf("%v: want one error line, got %q", args, errs)
		}
		if strings.Contains(args[len(args)-1], "short") && !strings.Contains(errs, "short.raw") && !strings.Contains(errs, "connectivity") {
			t.Errorf("%v: error does not name the file: %q", args, errs)
		}
	}
}

// TestSegmentThenMeasure: a forward-model scan (grey) segments to labels
// that measure like the truth within the accuracy of the segmentation.
func TestSegmentThenMeasure(t *testing.T) {
	dir := t.TempDir()
	lab := volume.NewShape[uint8](40, 48, 48, 2e-6)
	synth.CapScene{Wall: 8, R: 20, DropAngle: 90, Centre: [2]float64{23.5, 23.5}}.Draw(lab, 0, 2, 1)
	p := forward.Default()
	g, err := forward.Render(lab, p)
	if err != nil {
		t.Fatal(err)
	}
	grey := filepath.Join(dir, "grey.raw")
	if err := volio.WriteRaw(grey, forward.Uint16(g), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "labels.zarr")
	code, text, errs := runCLI(t, "segment", "--no-sample", grey, out)
	if code != 0 {
		t.Fatalf("segment: exit %d: %s", code, errs)
	}
	if !strings.Contains(text, "thresholds (otsu)") {
		t.Errorf("segment does not print its thresholds: %q", text)
	}
	z, err := volio.OpenZarr(context.Background(), volio.Dir(dir), "labels.zarr")
	if err != nil {
		t.Fatal(err)
	}
	v, err := z.ReadBox(context.Background(), lab.Box)
	if err != nil {
		t.Fatal(err)
	}
	seg := v.(*volume.Labels)
	wrong := 0
	for i := range seg.Pix {
		if seg.Pix[i] != lab.Pix[i] {
			wrong++
		}
	}
	if frac := float64(wrong) / float64(len(seg.Pix)); frac > 0.02 {
		t.Errorf("%.3f of voxels differ from the truth", frac)
	}
	code, jsonOut, errs := runCLI(t, "measure", "--json", "--no-sample", grey)
	if code != 0 {
		t.Fatalf("measure grey: exit %d: %s", code, errs)
	}
	var m map[string]any
	if err := json.Unmarshal([]byte(jsonOut), &m); err != nil {
		t.Fatal(err)
	}
	var n, pore float64
	for _, v := range lab.Pix {
		if v != 0 {
			pore++
		}
		if v == 2 {
			n++
		}
	}
	// Default settings (median filter, no partial-volume correction): the
	// drop's rim against the bright wall reads slightly brighter, so allow
	// 0.02; pkg/segment asserts |ΔS| ≤ 0.01 with the edge-preserving filter.
	if s := m["saturation_nonwetting"].(float64); s < n/pore-0.02 || s > n/pore+0.02 {
		t.Errorf("S_n %.4f from grey, truth %.4f", s, n/pore)
	}
}
