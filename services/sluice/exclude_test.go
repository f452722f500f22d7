package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/measure"
	"sluice/pkg/volio"
)

// TestExcludeZeroMeansNone: `--exclude 0` (and measure.curvature_exclude:
// 0 in a config) ignores no interface near the solid. It used to mean the
// default 3, because the curvature options read a zero as "default".
// Reference: pkg/curvature's own "no exclusion" (a negative Exclude) on
// the same drop-on-a-wall scene; the default (3 voxels) must differ from
// it there, since the cap's contact line lies on the wall.
func TestExcludeZeroMeansNone(t *testing.T) {
	dir := t.TempDir()
	lab := capScene()
	raw := filepath.Join(dir, "cap.raw")
	if err := volio.WriteRaw(raw, lab, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	curv := func(args ...string) float64 {
		t.Helper()
		code, out, errs := runCLI(t, append([]string{"measure", "--labels", "--json", "--voxel-size", "2um"}, append(args, raw)...)...)
		if code != exitOK {
			t.Fatalf("%v: exit %d: %s", args, code, errs)
		}
		var m map[string]any
		if err := json.Unmarshal([]byte(out), &m); err != nil {
			t.Fatal(err)
		}
		return m["curvature_wn_mean_per_m"].(float64)
	}
	// The package without exclusion.
	o := measure.Defaults()
	o.Curvature.Exclude = -1
	res, err := measure.Volume(lab, o, 0, 1)
	if err != nil {
		t.Fatal(err)
	}
	none := *res.CurvMean
	cfg := filepath.Join(dir, "camp.yaml")
	if err := os.WriteFile(cfg, []byte("measure:\n  curvature_exclude: 0\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	zero, fromCfg, def, three := curv("--exclude", "0"), curv("--config", cfg), curv(), curv("--exclude", "3")
	t.Logf("mean κ (1/m): no exclusion %.6g, --exclude 0 %.6g, config 0 %.6g, default %.6g, --exclude 3 %.6g", none, zero, fromCfg, def, three)
	if zero != none || fromCfg != none {
		t.Errorf("--exclude 0 gave κ %.6g and config 0 %.6g; without exclusion κ is %.6g", zero, fromCfg, none)
	}
	if def != three || def == none {
		t.Errorf("default κ %.6g, --exclude 3 %.6g, none %.6g: the default must be 3 voxels and differ from none", def, three, none)
	}
	// The flag overrides the config only when given.
	if got := curv("--config", cfg, "--exclude", "3"); got != three {
		t.Errorf("--exclude 3 over a config of 0: κ %.6g, want %.6g", got, three)
	}
	code, _, errs := runCLI(t, "measure", "--labels", "--exclude", "-1", raw)
	if want := `sluice measure: invalid value "-1" for flag --exclude: must be 0 or more`; code != exitBadInput || strings.TrimRight(errs, "\n") != want {
		t.Errorf("--exclude -1: exit %d, stderr %q; want %q", code, errs, want)
	}
	// The campaign options carry "none" to the curvature stage.
	c := campaign.Default()
	c.Measure.CurvatureExclude = 0
	if mo, err := c.MeasureOptions(); err != nil || mo.Curvature.Exclude >= 0 {
		t.Errorf("curvature_exclude 0 → curvature options %+v, %v; want exclusion off", mo.Curvature, err)
	}
}
