package main

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/accuracy"
	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/layout"
	"sluice/pkg/store"
)

// TestAccuracyDemoCampaign runs `sluice accuracy` end to end on a small
// demo campaign (64³, reference-scan mode): the grey levels, noise and blur
// it estimates from the last step's scan are those the demo rendered with
// (pkg/forward defaults: levels 14000/24000/40000, blur 0.7 voxel, CNR 5,
// so σ 2000), the table goes to stdout, the report is stored under the
// current run (campaign.AccuracyKey) and equals the --json file, and the
// labels path counts S_w exactly (error 0: the truth is measured by the
// same code). The demo's pores are 1–4 voxels, so --min-radius 2.
//
// Measured (2026-12-05): levels 13934/23237/39985 (the wetting interior of
// this small region lies near solid or gas, so its median is pulled down),
// noise σ 2000.0, blur 0.79; tolerances: noise 3 %, blur 0.2 + 0.12·b (as
// in pkg/accuracy), nonwetting and solid levels 500, wetting 1500.
func TestAccuracyDemoCampaign(t *testing.T) {
	if testing.Short() {
		t.Skip("demo campaign and equilibrium states: seconds of CPU")
	}
	dir := filepath.Join(t.TempDir(), "demo")
	code, out, errs := runCLI(t, "demo", "--size", "64", "--steps", "7", "--tile", "32", "--workers", "2", "--data", dir, "--http", "127.0.0.1:0")
	if code != exitOK {
		t.Fatalf("sluice demo: exit %d\n%s\n%s", code, out, errs)
	}
	jsonPath := filepath.Join(t.TempDir(), "acc.json")
	code, out, errs = runCLI(t, "accuracy", "--data", dir, "--states", "2", "--min-radius", "2", "--json", jsonPath, "demo-drainage")
	if code != exitOK {
		t.Fatalf("sluice accuracy: exit %d\n%s\n%s", code, out, errs)
	}
	for _, want := range []string{"measurement alone (true labels)", "segmentation + measurement (rendered scans)", "estimates", "stored at campaigns/demo-drainage/runs/"} {
		if !strings.Contains(out, want) {
			t.Errorf("stdout lacks %q:\n%s", want, out)
		}
	}
	st, err := store.NewLocal(filepath.Join(dir, "store"))
	if err != nil {
		t.Fatal(err)
	}
	c, _ := layout.NewCampaign("demo-drainage")
	rec, err := campaign.LoadRecord(context.Background(), st, c)
	if err != nil {
		t.Fatal(err)
	}
	var rep accuracy.Report
	if err := campaign.GetJSON(context.Background(), st, campaign.AccuracyKey(c, rec.Current), &rep); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(jsonPath)
	if err != nil {
		t.Fatal(err)
	}
	var fromFile accuracy.Report
	if err := json.Unmarshal(b, &fromFile); err != nil {
		t.Fatal(err)
	}
	if fromFile.CreatedAt != rep.CreatedAt || fromFile.ParamHash != rec.Current || len(fromFile.States) != 2 {
		t.Errorf("--json file (%s, hash %s, %d states) differs from the stored report (%s) or the run %s", fromFile.CreatedAt, fromFile.ParamHash, len(fromFile.States), rep.CreatedAt, rec.Current)
	}
	lv := forward.Default()
	e := rep.Scan
	t.Logf("levels %.0f/%.0f/%.0f, noise %.1f, blur %.3f; S_w grey error %v, a_wn %v", e.Nonwetting, e.Wetting, e.Solid, e.Noise, e.Blur, fmtPtr(rep.GreyPath.SatWetting.Bias, 1, "%.4f"), fmtPtr(rep.GreyPath.SpecificWN.Bias, 1, "%.3f"))
	if sig := lv.NoiseSigma(); math.Abs(e.Noise/sig-1) > 0.03 {
		t.Errorf("noise σ %.1f estimated as %.1f", sig, e.Noise)
	}
	if math.Abs(e.Blur-lv.Blur) > 0.2+0.12*lv.Blur {
		t.Errorf("blur %.2f estimated as %.3f", lv.Blur, e.Blur)
	}
	if math.Abs(e.Nonwetting-lv.Nonwetting) > 500 || math.Abs(e.Solid-lv.Solid) > 500 || math.Abs(e.Wetting-lv.Wetting) > 1500 {
		t.Errorf("levels %.0f/%.0f/%.0f, want about %.0f/%.0f/%.0f", e.Nonwetting, e.Wetting, e.Solid, lv.Nonwetting, lv.Wetting, lv.Solid)
	}
	if s := rep.LabelsPath.SatWetting; s.N != 2 || s.Bias == nil || *s.Bias != 0 {
		t.Errorf("labels path S_w error %+v: want 0 over 2 states", s)
	}
	if rep.GreyPath.SatWetting.N != 2 || rep.GreyPath.SatWetting.Bias == nil {
		t.Errorf("grey path S_w error %+v: want 2 states measured", rep.GreyPath.SatWetting)
	}

	// Refusals: one line, exit 2.
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"accuracy", "--data", dir, "--region", "0,0,0,200", "demo-drainage"}, "size 200 outside 16…160 voxels"},
		{[]string{"accuracy", "--data", dir, "--region", "40,0,0,32", "demo-drainage"}, "beyond the scan's shape"},
		{[]string{"accuracy", "--data", dir, "--noise", "100", "demo-drainage"}, "--noise is for --mask"},
		{[]string{"accuracy", "--data", dir, "--theta", "95", "--min-radius", "2", "demo-drainage"}, "want 0 ≤ θ < 90"},
		{[]string{"accuracy", "--data", dir, "--step", "scan-0099", "demo-drainage"}, "has no step scan-0099"},
	} {
		code, out, errs := runCLI(t, c.args...)
		if code != exitBadInput || !strings.Contains(errs, c.want) || strings.Count(strings.TrimSpace(errs), "\n") > 0 {
			t.Errorf("%v: exit %d, stderr %q; want exit 2 and %q", c.args, code, errs, c.want)
		}
		_ = out
	}
}

// TestAccuracyMask runs `sluice accuracy --mask` on a raw solid mask of a
// converging tube (radius 16 − 0.15z voxels, 48×40×40, solid 0, pore 1)
// with given levels, noise and blur: one state, the table, the --json
// file, and nothing stored.
func TestAccuracyMask(t *testing.T) {
	if testing.Short() {
		t.Skip("equilibrium state: seconds of CPU")
	}
	dir := t.TempDir()
	const nz, n = 48, 40
	b := make([]byte, nz*n*n)
	c := float64(n-1) / 2
	for z := 0; z < nz; z++ {
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				if math.Hypot(float64(y)-c, float64(x)-c) < 16-0.15*float64(z) {
					b[(z*n+y)*n+x] = 1
				}
			}
		}
	}
	path := filepath.Join(dir, "tube.raw")
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	jsonPath := filepath.Join(dir, "acc.json")
	code, out, errs := runCLI(t, "accuracy", "--mask", path, "--shape", "48,40,40", "--dtype", "uint8", "--voxel-size", "3um",
		"--levels", "14000,24000,40000", "--noise", "1000", "--blur", "0.8", "--states", "1", "--json", jsonPath)
	if code != exitOK {
		t.Fatalf("exit %d\n%s\n%s", code, out, errs)
	}
	if strings.Contains(out, "stored at") || !strings.Contains(out, "segmentation + measurement (rendered scans)") {
		t.Errorf("stdout:\n%s", out)
	}
	var rep accuracy.Report
	raw, err := os.ReadFile(jsonPath)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(raw, &rep); err != nil {
		t.Fatal(err)
	}
	if len(rep.States) != 1 || rep.Scan.Noise != 1000 || rep.Scan.Blur != 0.8 || rep.VoxelSize != 3e-6 || rep.CNR != 10 {
		t.Errorf("report: %d states, noise %g, blur %g, voxel %g, CNR %g", len(rep.States), rep.Scan.Noise, rep.Scan.Blur, rep.VoxelSize, rep.CNR)
	}
	t.Logf("%s", out)
	if code, _, errs := runCLI(t, "accuracy", "--mask", path, "--shape", "48,40,40", "--dtype", "uint8", "--voxel-size", "3um", "--step", "s1"); code != exitBadInput || !strings.Contains(errs, "--step reads a campaign") {
		t.Errorf("--mask with --step: exit %d, %s", code, errs)
	}
}
