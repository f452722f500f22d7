package main

import (
	"path/filepath"
	"regexp"
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
