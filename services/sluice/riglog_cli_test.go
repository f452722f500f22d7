package main

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/riglog"
	"sluice/pkg/series"
	"sluice/pkg/store"
	"sluice/services/ingest"
)

// TestRigLogCommand: `sluice rig-log` refuses a log with a bad row (exit 2,
// one line naming the file and line, nothing stored) and a campaign
// without a rig_log section; a good log is stored and sets the series'
// columns (Source, by hand: pump 1.2 µl/min from t = 0 on the rig's clock,
// which runs 10 s ahead of the scans' (offset −10 s), so the step at
// t = 40 s has 50 s of pumping, 1e-9 m³ = 0.5 of the pore volume φ·V_bulk
// = 0.25 × 8e-9 m³; the transducer 2.5 kPa interpolated linearly between
// 2 kPa at 45 s and 3 kPa at 55 s on the rig's clock).
func TestRigLogCommand(t *testing.T) {
	ctx := context.Background()
	data := t.TempDir()
	rigCampaign, _ := layout.NewCampaign("rig")
	local, err := store.NewLocal(filepath.Join(data, "store"))
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.IFT = 0.07275
	cfg.RigLog = &riglog.Config{Columns: riglog.Columns{Time: riglog.Column{Column: "t", Unit: "s"},
		Rate: &riglog.Column{Column: "Q", Unit: "ul/min"}, DifferentialPressure: &riglog.Column{Column: "dP", Unit: "kPa"}},
		ClockOffsetS: -10, ViscosityPaS: 1.0016e-3}
	if _, err := ingest.EnsureCampaign(ctx, local, "rig", cfg, Version, ""); err != nil {
		t.Fatal(err)
	}
	if _, err := ingest.EnsureCampaign(ctx, local, "norig", campaign.Default(), Version, ""); err != nil {
		t.Fatal(err)
	}
	row := series.Row{Step: "s1", Time: 40}
	phi, h, ift, axis := 0.25, 1e-5, 0.07275, "z"
	row.Porosity, row.VoxelSize, row.IFT, row.FlowAxis = &phi, &h, &ift, &axis
	row.Extra = map[string]json.RawMessage{"bulk_volume_m3": json.RawMessage("8e-9"), "shape_zyx": json.RawMessage("[200,200,200]")}
	if err := series.Save(ctx, local, "rig", []series.Row{row}); err != nil {
		t.Fatal(err)
	}
	bad := filepath.Join(data, "rig-bad.csv")
	os.WriteFile(bad, []byte("t,Q,dP\n0,1.2,0\n45,1.2,2\n55,1.2,oops\n"), 0o644)
	code, _, errs := runCLI(t, "rig-log", "--data", data, "rig", bad)
	if code != exitBadInput || strings.Count(strings.TrimSpace(errs), "\n") != 0 || !strings.Contains(errs, bad+" line 4") || !strings.Contains(errs, `"oops" is not a number`) {
		t.Errorf("bad row: exit %d, %q", code, errs)
	}
	if _, err := local.Get(ctx, campaign.RigLogKey(rigCampaign)); err == nil {
		t.Error("a refused log was stored")
	}
	good := filepath.Join(data, "rig.csv")
	os.WriteFile(good, []byte("t,Q,dP\n0,1.2,0\n45,1.2,2\n55,1.2,3\n"), 0o644)
	if code, _, errs := runCLI(t, "rig-log", "--data", data, "norig", good); code != exitBadInput || !strings.Contains(errs, "no rig_log section") {
		t.Errorf("campaign without rig_log: exit %d, %q", code, errs)
	}
	code, out, errs := runCLI(t, "rig-log", "--data", data, "rig", good)
	if code != exitOK {
		t.Fatalf("good log: exit %d, %s", code, errs)
	}
	rows, err := series.Load(ctx, local, "rig")
	if err != nil || len(rows) != 1 {
		t.Fatal(rows, err)
	}
	r := rows[0]
	if r.PoreVolumesInjected == nil || math.Abs(*r.PoreVolumesInjected-0.5) > 1e-12 {
		t.Errorf("PV injected %v, want 0.5", r.PoreVolumesInjected)
	}
	if r.RigDiffPressure == nil || math.Abs(*r.RigDiffPressure-2500) > 1e-9 {
		t.Errorf("Δp %v, want 2500 Pa", r.RigDiffPressure)
	}
	// Ca = μ q/(A σ) = 1.0016e-3 × (2e-11/4e-6) / 0.07275 (water at 20 °C,
	// CRC Handbook from memory; σ water–air, CRC Handbook).
	if r.CapillaryNumber == nil || math.Abs(*r.CapillaryNumber/6.88385e-8-1) > 1e-5 {
		t.Errorf("Ca %v, want 6.88385e-8", r.CapillaryNumber)
	}
	if !strings.Contains(out, "1 of 1 steps") || !strings.Contains(out, "pore volume 2e-09 m³") {
		t.Errorf("summary: %s", out)
	}
}
