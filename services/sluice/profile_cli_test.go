package main

import (
	"math"
	"path/filepath"
	"regexp"
	"strconv"
	"testing"
)

// TestMeasureTableFront: `sluice measure` (table) shows the front of the
// golden drop, 0.075 mm from the low z face (Source: the analytic cap,
// dropChecks: the far edge of slice 14, the last with S_n > 0.05), with
// its bins and threshold.
func TestMeasureTableFront(t *testing.T) {
	raw := filepath.Join("..", "..", "testdata", "drop-labels.raw")
	code, out, errs := runCLI(t, "measure", "--labels", "--ift", "0.052", raw)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !regexp.MustCompile(`front from the inlet \(z\)\s+0\.075\s+mm \(far edge of the farthest of 24 bins of 5 µm with S_n > 0\.05\)`).MatchString(out) {
		t.Errorf("no front line in:\n%s", out)
	}
}

// TestMeasureTableMeanCurvature: `sluice measure` (table) shows J_wn of
// the golden drop in mm, within the band of dropChecks of the analytic
// 2πh (Source: J = ∫H dA over the cap = cap area 2πRh × 1/R; h from
// goldenDrop.truth()).
func TestMeasureTableMeanCurvature(t *testing.T) {
	raw := filepath.Join("..", "..", "testdata", "drop-labels.raw")
	code, out, errs := runCLI(t, "measure", "--labels", "--ift", "0.052", raw)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	m := regexp.MustCompile(`mean curvature integral J_wn = ∫H dA \(w–n\)\s+([0-9.e+-]+)\s+mm \(`).FindStringSubmatch(out)
	if m == nil {
		t.Fatalf("no J_wn line in:\n%s", out)
	}
	got, _ := strconv.ParseFloat(m[1], 64)
	want := 2 * math.Pi * goldenDrop.truth().h * goldenDrop.Voxel * 1e3
	if math.Abs(got/want-1) > 0.10 {
		t.Errorf("J_wn %g mm, analytic %g mm", got, want)
	}
}
