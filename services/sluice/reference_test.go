package main

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/scenario"
	"sluice/pkg/volio"
)

// TestReferenceScanMode runs the practitioners' workflow for clean fluid
// maps through the pipeline: a long-exposure reference scan of the
// brine-saturated core (CNR 20) becomes the campaign's solid mask
// (`sluice reference`), and each fast scan (CNR 5) then only separates the
// two fluids inside that pore space. Checks: the rock is identical in every
// step (porosity exactly constant — it comes from one mask), and the
// saturation matches the scenario's truth.
func TestReferenceScanMode(t *testing.T) {
	if testing.Short() {
		t.Skip("pipeline test")
	}
	sc := &scenario.Campaign{Shape: [3]int{96, 96, 96}, Steps: 8, Seed: 2}
	if err := sc.Prepare(); err != nil {
		t.Fatal(err)
	}
	data := t.TempDir()
	cfg := demoConfig(sc, 48)
	cfg.Segment.Reference = true
	cfg.Segment.Threshold = "otsu"
	cfg.Segment.Fixed = nil
	cfg.Segment.PartialVolume.Blur = forward.Default().Blur
	cfgPath := filepath.Join(data, "c.json")
	if err := writeDemoConfig(cfgPath, cfg); err != nil {
		t.Fatal(err)
	}
	// The reference scan: the rock with brine in every pore, long exposure.
	rock, _ := sc.RockLabels()
	rp := forward.Default()
	rp.CNR, rp.Seed, rp.Sample = 20, 99, demoCylinder(sc)
	g, err := forward.Render(rock, rp)
	if err != nil {
		t.Fatal(err)
	}
	ref := forward.Uint16(g)
	ref.VoxelSize = sc.VoxelSize
	refPath := filepath.Join(data, "reference.raw")
	if err := volio.WriteRaw(refPath, ref, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	s := cfg.Segment.Sample
	code, out, errs := runCLI(t, "reference", "--campaign", "refmode", "--data", data, "--config", cfgPath,
		"--sample", fmt.Sprintf("%g,%g,%g", s.Y, s.X, s.Radius), refPath)
	if code != 0 {
		t.Fatalf("sluice reference: exit %d: %s", code, errs)
	}
	if !strings.Contains(out, "solid mask stored") {
		t.Errorf("reference output: %s", out)
	}
	if code, _, _ := runCLI(t, "reference", "--campaign", "refmode", "--data", data, refPath); code == 0 {
		t.Errorf("a second reference mask was accepted")
	}

	ctx, cancel := context.WithCancel(context.Background())
	nf := nodeFlags{data: data, http: "127.0.0.1:0", ackWait: 30 * time.Second, maxDeliver: 3}
	f := ingestFlags{campaign: "refmode", config: cfgPath, watch: filepath.Join(data, "incoming"), createWatch: true}
	node, err := startAll(ctx, nf, inputFlags{}, f, 2, quietLog())
	if err != nil {
		cancel()
		t.Fatal(err)
	}
	defer func() { cancel(); node.wg.Wait() }()
	steps := []int{0, 1, 6}
	for _, i := range steps {
		if err := writeScan(f.watch, sc, i, demoCylinder(sc)); err != nil {
			t.Fatal(err)
		}
	}
	st, _ := nf.openStore(ctx)
	rows := waitRows(t, st, "refmode", len(steps), 3*time.Minute)
	for k, r := range rows {
		if *r.Porosity != *rows[0].Porosity {
			t.Errorf("step %s: porosity %.6f differs from %.6f — the rock must come from the one mask", r.Step, *r.Porosity, *rows[0].Porosity)
		}
		lab, _, _ := sc.Step(steps[k])
		truth := 1 - sc.Saturation(lab)
		// Pores of this 96³ pack are 6–10 voxels across (the accuracy
		// targets are asserted on a 128³ pack in pkg/segment); 0.02 here.
		if d := *r.SatWetting - truth; math.Abs(d) > 0.02 {
			t.Errorf("step %s: S_w %.4f, truth %.4f", r.Step, *r.SatWetting, truth)
		}
		t.Logf("step %s: S_w %.4f (truth %.4f), porosity %.4f", r.Step, *r.SatWetting, truth, *r.Porosity)
	}
	var plan campaign.Plan
	step := "scan-" + fmt.Sprintf("%04d", steps[0])
	if err := campaign.GetJSON(ctx, st, "campaigns/refmode/steps/"+step+"/plans/"+cfg.Hash()+".json", &plan); err != nil {
		t.Fatal(err)
	}
	if !plan.Config.Segment.Reference || len(plan.Thresholds.T) != 1 {
		t.Errorf("plan not in reference mode: %+v", plan.Thresholds)
	}
}
