package main

import (
	"encoding/json"
	"flag"
	"math"
	"os"
	"path/filepath"
	"testing"

	"sluice/pkg/synth"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata/")

// TestGoldenMeasure keeps `sluice measure --json` of a small drop-on-a-wall
// label volume (testdata/drop-labels.raw) equal to the committed result, so
// any change of a number is seen in review. Regenerate with
// `go test ./services/sluice -run Golden -update` and explain the change.
func TestGoldenMeasure(t *testing.T) {
	dir := filepath.Join("..", "..", "testdata")
	raw := filepath.Join(dir, "drop-labels.raw")
	golden := filepath.Join(dir, "drop-labels.measure.json")
	if *update {
		lab := volume.NewShape[uint8](24, 40, 40, 5e-6)
		synth.CapScene{Wall: 5, R: 14, DropAngle: 75, Centre: [2]float64{19.5, 19.5}}.Draw(lab, 0, 2, 1)
		if err := volio.WriteRaw(raw, lab, volio.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
	}
	code, out, errs := runCLI(t, "measure", "--labels", "--json", "--ift", "0.052", raw)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if *update {
		if err := os.WriteFile(golden, []byte(out), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	var g, w map[string]any
	if err := json.Unmarshal([]byte(out), &g); err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(want, &w); err != nil {
		t.Fatal(err)
	}
	compareJSON(t, "", g, w)
}

// compareJSON compares decoded JSON, numbers to 1e-12 relative.
func compareJSON(t *testing.T, path string, got, want any) {
	t.Helper()
	switch w := want.(type) {
	case map[string]any:
		g, ok := got.(map[string]any)
		if !ok || len(g) != len(w) {
			t.Errorf("%s: keys differ", path)
			return
		}
		for k := range w {
			compareJSON(t, path+"."+k, g[k], w[k])
		}
	case []any:
		g, ok := got.([]any)
		if !ok || len(g) != len(w) {
			t.Errorf("%s: lengths differ", path)
			return
		}
		for i := range w {
			compareJSON(t, path, g[i], w[i])
		}
	case float64:
		g, ok := got.(float64)
		if !ok || (g != w && math.Abs(g-w) > 1e-12*math.Max(math.Abs(g), math.Abs(w))) {
			t.Errorf("%s = %v, golden %v", path, got, want)
		}
	default:
		if got != want {
			t.Errorf("%s = %v, golden %v", path, got, want)
		}
	}
}
