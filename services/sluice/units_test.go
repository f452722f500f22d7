package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/synth"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// capNoVoxelSize writes the nonwetting cap scene (drop radius 22 voxels,
// contact angle 110° through the wetting phase) as a raw labels file whose
// header carries no voxel size, and returns its path.
func capNoVoxelSize(t *testing.T, dir string) string {
	t.Helper()
	lab := capScene()
	lab.VoxelSize = 0
	path := filepath.Join(dir, "cap.raw")
	if err := volio.WriteRaw(path, lab, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	return path
}

func writeFile(t *testing.T, dir, name, text string) string {
	t.Helper()
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// pcWithin checks Pc against Young–Laplace for the cap of radius 22 voxels.
func pcWithin(t *testing.T, label string, m map[string]any, sigma, voxel float64) {
	t.Helper()
	// Source: Young–Laplace for a spherical cap, Pc = 2σ/R; R = 22 voxels
	// (the drawn radius). 7 % as in TestMeasureLabelsAllFormats, whose
	// measured error on this scene is about 3 %.
	want := 2 * sigma / (22 * voxel)
	pc, ok := m["capillary_pressure_pa"].(float64)
	if !ok || pc < 0.93*want || pc > 1.07*want {
		t.Errorf("%s: capillary_pressure_pa %v, want %.1f Pa ±7 %%", label, m["capillary_pressure_pa"], want)
	}
}

// TestMeasureReadsConfig (issue 13, item 2): `measure --config` reads the
// config in every mode — voxel_size, ift_n_per_m and measure.connectivity
// take effect, with --labels too — and a flag overrides the config only
// when it is given on the command line.
func TestMeasureReadsConfig(t *testing.T) {
	dir := t.TempDir()
	path := capNoVoxelSize(t, dir)
	cfg := writeFile(t, dir, "camp.yaml", "voxel_size: 4um\nift_n_per_m: 0.035\nmeasure:\n  connectivity: 6\n")

	m := measureJSON(t, "--labels", "--config", cfg, path)
	if vs, _ := m["voxel_size_m"].(float64); vs != 4e-6 {
		t.Errorf("--labels --config: voxel_size_m %v, want 4e-06 from the config", m["voxel_size_m"])
	}
	pcWithin(t, "--labels --config", m, 0.035, 4e-6)
	if c, _ := m["connectivity"].(float64); c != 6 {
		t.Errorf("--labels --config: connectivity %v, want 6 from the config", m["connectivity"])
	}

	// Flags given on the command line win; flags left out do not reset
	// the config to the flag defaults.
	m = measureJSON(t, "--labels", "--config", cfg, "--connectivity", "26", "--ift", "0.07275", path)
	if c, _ := m["connectivity"].(float64); c != 26 {
		t.Errorf("--connectivity 26 over config 6: got %v", m["connectivity"])
	}
	pcWithin(t, "--ift 0.07275 over config 0.035", m, 0.07275, 4e-6)
	m = measureJSON(t, "--labels", "--config", cfg, "--voxel-size", "2um", path)
	pcWithin(t, "--voxel-size 2um over config 4um", m, 0.035, 2e-6)
	if c, _ := m["connectivity"].(float64); c != 6 {
		t.Errorf("config connectivity 6 with other flags given: got %v", m["connectivity"])
	}

	// Grey input: the text table shows the config's voxel size and a
	// capillary pressure.
	lab := volume.NewShape[uint8](40, 48, 48, 0)
	synth.CapScene{Wall: 8, R: 20, DropAngle: 90, Centre: [2]float64{23.5, 23.5}}.Draw(lab, 0, 2, 1)
	g, err := forward.Render(lab, forward.Default())
	if err != nil {
		t.Fatal(err)
	}
	grey := filepath.Join(dir, "grey.raw")
	if err := volio.WriteRaw(grey, forward.Uint16(g), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	code, out, errs := runCLI(t, "measure", "--no-sample", "--config", cfg, grey)
	if code != 0 {
		t.Fatalf("measure grey --config: exit %d: %s", code, errs)
	}
	if !regexpLine(out, "voxel size", "4") {
		t.Errorf("grey --config: table does not show voxel size 4 µm:\n%s", out)
	}
	if line := lineWith(out, "capillary pressure"); line == "" || strings.Contains(line, "—") {
		t.Errorf("grey --config: no capillary pressure: %q", line)
	}

	// A missing config file or a typo in a key is one line and exit 2,
	// with --labels as without.
	typo := writeFile(t, dir, "typo.yaml", "voxel_size: 4um\nmeasure:\n  conectivity: 6\n")
	for _, mode := range [][]string{{"--labels"}, {"--no-sample"}} {
		file := path
		if mode[0] != "--labels" {
			file = grey
		}
		code, _, errs := runCLI(t, append(append([]string{"measure"}, mode...), "--config", filepath.Join(dir, "nosuch.yaml"), file)...)
		oneLineError(t, "measure "+mode[0]+" --config nosuch.yaml", code, errs, "nosuch.yaml")
		if code != exitBadInput {
			t.Errorf("missing config: exit %d, want 2", code)
		}
		code, _, errs = runCLI(t, append(append([]string{"measure"}, mode...), "--config", typo, file)...)
		oneLineError(t, "measure "+mode[0]+" --config typo.yaml", code, errs, "typo.yaml", "conectivity")
		if code != exitBadInput {
			t.Errorf("typo in config: exit %d, want 2", code)
		}
	}
}

func lineWith(text, key string) string {
	for _, l := range strings.Split(text, "\n") {
		if strings.Contains(l, key) {
			return l
		}
	}
	return ""
}

// regexpLine reports whether the line holding key has value as a field.
func regexpLine(text, key, value string) bool {
	for _, f := range strings.Fields(strings.TrimPrefix(lineWith(text, key), key)) {
		if f == value {
			return true
		}
	}
	return false
}

// TestUnitsRefused (issue 13, item 6): σ outside 1e-3…0.5 N/m, a voxel
// size without a unit or outside 0.05 µm…1 mm are refused in one line with
// exit 2, in flags and config alike.
func TestUnitsRefused(t *testing.T) {
	dir := t.TempDir()
	path := capNoVoxelSize(t, dir)
	cases := []struct {
		args  []string
		wants []string
	}{
		{[]string{"--ift", "35"}, []string{"35 looks like mN/m; did you mean 0.035?"}},
		{[]string{"--ift", "-0.035"}, []string{"-0.035"}},
		{[]string{"--ift", "0.0001"}, []string{"N/m"}},
		{[]string{"--voxel-size", "4"}, []string{`"4"`, "unit"}},
		{[]string{"--voxel-size", "4m"}, []string{"4m", "0.05 µm … 1 mm"}},
		{[]string{"--voxel-size", "10nm"}, []string{"10nm", "0.05 µm … 1 mm"}},
		{[]string{"--config", writeFile(t, dir, "ift35.yaml", "voxel_size: 4um\nift_n_per_m: 35\n")}, []string{"ift35.yaml", "35 looks like mN/m; did you mean 0.035?"}},
		{[]string{"--config", writeFile(t, dir, "vs4.yaml", "voxel_size: 4\n")}, []string{"vs4.yaml", `"4"`, "unit"}},
		{[]string{"--config", writeFile(t, dir, "vsbig.yaml", "voxel_size: 2mm\n")}, []string{"vsbig.yaml", "0.05 µm … 1 mm"}},
	}
	for _, c := range cases {
		args := append([]string{"measure", "--labels", "--voxel-size=2um"}, c.args...)
		code, _, errs := runCLI(t, append(args, path)...)
		oneLineError(t, strings.Join(args, " "), code, errs, c.wants...)
		if code != exitBadInput {
			t.Errorf("%v: exit %d, want 2", args, code)
		}
	}
	// A plausible σ and voxel size pass: water–air 0.072 N/m at 25 °C
	// (handbook value, from memory) and 50 nm, 1 mm at the range's ends.
	for _, vs := range []string{"0.05um", "1mm", "2.5µm", "0.0000025m"} {
		if code, _, errs := runCLI(t, "measure", "--labels", "--ift", "0.072", "--voxel-size", vs, path); code != 0 {
			t.Errorf("--voxel-size %s --ift 0.072: exit %d: %s", vs, code, errs)
		}
	}
}

// TestVoxelSizeUnknown (issue 13, item 6): with no voxel size from flag,
// config or file, measure says on every output that it assumed 1 µm, and
// refuses when σ is given (Pc in Pa needs a length); segment writes no
// voxel size into the label header instead of an invented one.
func TestVoxelSizeUnknown(t *testing.T) {
	dir := t.TempDir()
	path := capNoVoxelSize(t, dir)
	m := measureJSON(t, "--labels", path)
	if a, ok := m["voxel_size_assumed"].(bool); !ok || !a {
		t.Errorf("no voxel size anywhere: voxel_size_assumed %v, want true", m["voxel_size_assumed"])
	}
	m = measureJSON(t, "--labels", "--voxel-size", "2um", path)
	if a, ok := m["voxel_size_assumed"].(bool); !ok || a {
		t.Errorf("--voxel-size 2um: voxel_size_assumed %v, want false", m["voxel_size_assumed"])
	}
	code, out, errs := runCLI(t, "measure", "--labels", path)
	if code != 0 {
		t.Fatalf("measure: exit %d: %s", code, errs)
	}
	if !strings.Contains(lineWith(out, "voxel size"), "assumed") {
		t.Errorf("text output does not say the voxel size is assumed: %q", lineWith(out, "voxel size"))
	}
	code, _, errs = runCLI(t, "measure", "--labels", "--ift", "0.035", path)
	oneLineError(t, "measure --ift without voxel size", code, errs, path, "voxel size")
	if code != exitBadInput {
		t.Errorf("--ift without voxel size: exit %d, want 2", code)
	}

	// segment: grey without voxel size → labels header without one.
	lab := volume.NewShape[uint8](40, 48, 48, 0)
	synth.CapScene{Wall: 8, R: 20, DropAngle: 90, Centre: [2]float64{23.5, 23.5}}.Draw(lab, 0, 2, 1)
	g, err := forward.Render(lab, forward.Default())
	if err != nil {
		t.Fatal(err)
	}
	g.VoxelSize = 0
	grey := filepath.Join(dir, "grey.raw")
	if err := volio.WriteRaw(grey, forward.Uint16(g), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	outRaw := filepath.Join(dir, "labels.raw")
	code, text, errs := runCLI(t, "segment", "--no-sample", grey, outRaw)
	if code != 0 {
		t.Fatalf("segment: exit %d: %s", code, errs)
	}
	hdr, err := os.ReadFile(outRaw + ".sluice.json")
	if err != nil {
		t.Fatal(err)
	}
	if strings.Contains(string(hdr), "voxel_size") {
		t.Errorf("segment wrote a voxel size it was never given: %s", hdr)
	}
	if !strings.Contains(text, "voxel size unknown") {
		t.Errorf("segment does not say the voxel size is unknown:\n%s", text)
	}
	code, _, errs = runCLI(t, "segment", "--no-sample", "--voxel-size", "3um", grey, outRaw)
	if code != 0 {
		t.Fatalf("segment --voxel-size 3um: exit %d: %s", code, errs)
	}
	if hdr, _ = os.ReadFile(outRaw + ".sluice.json"); !strings.Contains(string(hdr), `"3um"`) {
		t.Errorf("segment --voxel-size 3um: header %s", hdr)
	}
}

// TestCampaignRefusesUnknownVoxelSize (issue 13, item 6): `reprocess
// --from` into a new campaign whose config has no voxel_size refuses a
// scan without one in its metadata, in one line with exit 2, instead of
// storing it at 1 µm.
func TestCampaignRefusesUnknownVoxelSize(t *testing.T) {
	dir := t.TempDir()
	from := filepath.Join(dir, "scans")
	if err := os.Mkdir(from, 0o755); err != nil {
		t.Fatal(err)
	}
	v := volume.NewShape[uint16](16, 16, 16, 0)
	for i := range v.Pix {
		v.Pix[i] = uint16(1000 + 97*(i%5))
	}
	if err := volio.WriteRaw(filepath.Join(from, "scan-0001.raw"), v, volio.WriteOptions{TimeS: 10, HasTime: true}); err != nil {
		t.Fatal(err)
	}
	cfg := writeFile(t, dir, "camp.yaml", "tile: 32\ndetect_sample: false\n")
	code, _, errs := runCLI(t, "reprocess", "novs", "--data", filepath.Join(dir, "data"), "--from", from, "--config", cfg)
	lines := strings.Split(strings.TrimSpace(errs), "\n")
	last := lines[len(lines)-1]
	if code != exitBadInput || !strings.Contains(last, "scan-0001.raw") || !strings.Contains(last, "no voxel size") {
		t.Errorf("reprocess --from without any voxel size: exit %d, last line %q", code, last)
	}
	t.Logf("%s", last)
}
