package main

import (
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/synth"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// TestThresholdScopeFlag: `segment --threshold-scope campaign` segments a
// single scan with the midpoints of its own phase levels and says so;
// an unknown scope and user thresholds above the data are refused in one
// line naming the flag's key, exit 2.
func TestThresholdScopeFlag(t *testing.T) {
	dir := t.TempDir()
	lab := volume.NewShape[uint8](40, 48, 48, 2e-6)
	synth.CapScene{Wall: 8, R: 20, DropAngle: 90, Centre: [2]float64{23.5, 23.5}}.Draw(lab, 0, 2, 1)
	g, err := forward.Render(lab, forward.Default())
	if err != nil {
		t.Fatal(err)
	}
	grey := filepath.Join(dir, "grey.raw")
	if err := volio.WriteRaw(grey, forward.Uint16(g), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	code, text, errs := runCLI(t, "segment", "--no-sample", "--threshold-scope", "campaign", grey, filepath.Join(dir, "a.zarr"))
	if code != 0 || !strings.Contains(text, "thresholds (campaign)") {
		t.Errorf("--threshold-scope campaign: exit %d, %q %q", code, text, errs)
	}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--threshold-scope", "session"}, "threshold_scope"},
		{[]string{"--threshold-scope", "campaign", "--fixed", "19000,70000"}, "segment.fixed threshold 70000"},
	} {
		args := append(append([]string{"segment", "--no-sample"}, c.args...), grey, filepath.Join(dir, "b.zarr"))
		code, _, errs := runCLI(t, args...)
		t.Logf("%v: %s", c.args, errs)
		if code != exitBadInput || !strings.Contains(errs, c.want) || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%v: exit %d, %q; want exit 2 with one line naming %s", c.args, code, errs, c.want)
		}
	}
}
