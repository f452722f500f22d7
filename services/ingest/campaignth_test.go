package ingest

import (
	"context"
	"errors"
	"io/fs"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/layout"
	"sluice/pkg/phase"
	"sluice/pkg/segment"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// TestCampaignThresholdsStored: in threshold scope "campaign" pass 1 of
// the first step holding both fluids stores the campaign thresholds (with
// their source and histogram) under the run's hash, later steps read them,
// planning again (reprocess, same or another hash) gives the same
// thresholds, and a corrupt record is refused naming its key.
func TestCampaignThresholdsStored(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	// A rock filled with brine; steps 2 and 3 hold the nonwetting phase in
	// the pores within 20 voxels of the centre, step 3 with every grey 3 %
	// darker.
	scan := func(name string, ball bool, gain float64) string {
		lab := volume.NewShape[uint8](48, 48, 48, 2e-6)
		forward.Rock{GrainRadius: 6, Porosity: 0.4, BlobRadius: 5, BlobFrac: 0.4, Seed: 11}.Draw(lab, phase.Default())
		for i, v := range lab.Pix {
			z, y, x := i/(48*48), i/48%48, i%48
			if ball && v == 1 && (z-24)*(z-24)+(y-24)*(y-24)+(x-24)*(x-24) < 20*20 {
				lab.Pix[i] = 2
			}
		}
		lv := forward.Default()
		lv.Nonwetting *= gain
		lv.Wetting *= gain
		lv.Solid *= gain
		g, err := forward.Render(lab, lv)
		if err != nil {
			t.Fatal(err)
		}
		path := filepath.Join(dir, name+".raw")
		if err := volio.WriteRaw(path, forward.Uint16(g), volio.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
		return path
	}
	cfg := campaign.Default()
	cfg.Tile = 24
	cfg.DetectSample = false
	cfg.Measure.SkipCurvature, cfg.Measure.SkipContact = true, true
	cfg.Segment.ThresholdScope = segment.ScopeCampaign
	if ThresholdsKnown(cfg, volume.Uint16) {
		t.Errorf("scope campaign: ThresholdsKnown true, want false (drift needs the histogram)")
	}
	step := cfg
	step.Segment.ThresholdScope = segment.ScopeStep
	unset := cfg
	unset.Segment.ThresholdScope = ""
	if cfg.Hash() == step.Hash() || step.Hash() != unset.Hash() {
		t.Errorf("hashes: campaign %s, step %s, unset %s; want campaign apart and step = unset (the default)", cfg.Hash(), step.Hash(), unset.Hash())
	}
	if _, err := EnsureCampaign(ctx, st, "ct", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	in := &Ingester{Store: st, Version: "test"}
	var mans []campaign.Manifest
	for i, s := range []struct {
		ball bool
		gain float64
	}{{false, 1}, {true, 1}, {true, 0.97}} {
		name := []string{"scan-0001", "scan-0002", "scan-0003"}[i]
		man, err := in.StoreStep(ctx, Request{Campaign: "ct", Step: name, Path: scan(name, s.ball, s.gain), HasTime: true, TimeS: float64(i)})
		if err != nil {
			t.Fatal(err)
		}
		mans = append(mans, man)
	}
	c, _ := layout.NewCampaign("ct")
	key, _ := c.Thresholds(cfg.Hash())
	plans := func(cfg campaign.Config) []campaign.Plan {
		var out []campaign.Plan
		for _, m := range mans {
			p, err := PlanStep(ctx, st, m, cfg, 1, "test")
			if err != nil {
				t.Fatal(err)
			}
			out = append(out, p)
		}
		return out
	}
	ps := plans(cfg)
	if c := ps[0].Thresholds.Campaign; c == nil || !c.Pending {
		t.Errorf("brine-only first step: %+v, want pending with its own split", ps[0].Thresholds)
	}
	var ct segment.CampaignThresholds
	if err := campaign.GetJSON(ctx, st, key, &ct); err != nil {
		t.Fatalf("no campaign thresholds at %s: %v", key, err)
	}
	if ct.Source != segment.SourceFirstStep || ct.Step != "scan-0002" || len(ct.Hist.Counts) != cfg.Segment.Bins || len(ct.T) != 2 {
		t.Errorf("record %s: source %s step %s, %d bins, T %v; want first-step, scan-0002, %d bins, 2 thresholds", key, ct.Source, ct.Step, len(ct.Hist.Counts), ct.T, cfg.Segment.Bins)
	}
	if !reflect.DeepEqual(ps[1].Thresholds.T, ct.T) || ps[1].Thresholds.Method != "campaign" {
		t.Errorf("step 2 thresholds %v (%s), want the campaign's %v", ps[1].Thresholds.T, ps[1].Thresholds.Method, ct.T)
	}
	d := ps[2].Thresholds.Campaign.Drift
	// Source: the imposed gain 0.97 on the rock level 40000: −1200 grey
	// (band ± 300, as in scan.TestCampaignDrift).
	if d.Delta[2] == nil || *d.Delta[2] > -900 || *d.Delta[2] < -1500 || !(ps[2].Thresholds.T[1] < ct.T[1]) {
		t.Errorf("step 3 (gain 0.97): drift %v, thresholds %v; want the rock level −1200 ± 300 and the w|s threshold lowered from %v", d, ps[2].Thresholds.T, ct.T)
	}
	// Reprocess, same hash: the record is read, the plans are the same.
	again := plans(cfg)
	for i := range ps {
		if !reflect.DeepEqual(again[i].Thresholds, ps[i].Thresholds) {
			t.Errorf("step %d planned again: %+v, first %+v", i+1, again[i].Thresholds, ps[i].Thresholds)
		}
	}
	// Reprocess under another hash (a measurement option changed): a new
	// record, fixed by the same step to the same thresholds.
	other := cfg
	other.Measure.CurvatureSigma = 2
	ops := plans(other)
	key2, _ := c.Thresholds(other.Hash())
	var ct2 segment.CampaignThresholds
	if err := campaign.GetJSON(ctx, st, key2, &ct2); err != nil || key2 == key {
		t.Fatalf("other hash: record %s: %v", key2, err)
	}
	if !reflect.DeepEqual(ct2.T, ct.T) || !reflect.DeepEqual(ops[2].Thresholds.T, ps[2].Thresholds.T) {
		t.Errorf("other hash: campaign %v step 3 %v; first run %v and %v", ct2.T, ops[2].Thresholds.T, ct.T, ps[2].Thresholds.T)
	}
	// A corrupt record is refused in one line naming its key.
	if err := st.Put(ctx, key, []byte("{")); err != nil {
		t.Fatal(err)
	}
	_, err = PlanStep(ctx, st, mans[2], cfg, 1, "test")
	if err == nil || !strings.Contains(err.Error(), key) || strings.Contains(err.Error(), "\n") {
		t.Errorf("corrupt %s: %v, want a one-line refusal naming it", key, err)
	}
	// A record for other classes (reference mode: one threshold) is refused naming the key.
	var bad segment.CampaignThresholds = ct
	bad.T = bad.T[:1]
	if err := campaign.PutJSON(ctx, st, key, bad); err != nil {
		t.Fatal(err)
	}
	_, err = PlanStep(ctx, st, mans[2], cfg, 1, "test")
	if err == nil || !strings.Contains(err.Error(), key) {
		t.Errorf("record with one threshold for three classes: %v, want a refusal naming %s", err, key)
	}
	// Scope step stores nothing.
	key3, _ := c.Thresholds(step.Hash())
	plans(step)
	if _, err := st.Get(ctx, key3); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("scope step wrote %s (%v)", key3, err)
	}
}

// TestCampaignFloat32Binning: float32 scans in threshold scope "campaign"
// bin every step from the one that fixed the campaign thresholds on over
// the range stored in the record (the plan's segment.range), not over a
// range measured per step; a record fixed on uint16 scans is refused for a
// float32 scan in one line naming the scan and the record.
func TestCampaignFloat32Binning(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	// Attenuation in cm⁻¹ (gas 0.2, brine 0.9, rock 2.0, CNR 5): brine
	// only, then the nonwetting ball, then the ball with every level ×
	// 1.02 (the range of step 3 differs from step 2's).
	scan := func(name string, ball bool, gain float64, float bool) string {
		lab := volume.NewShape[uint8](48, 48, 48, 2e-6)
		forward.Rock{GrainRadius: 6, Porosity: 0.4, BlobRadius: 5, BlobFrac: 0.4, Seed: 11}.Draw(lab, phase.Default())
		for i, v := range lab.Pix {
			z, y, x := i/(48*48), i/48%48, i%48
			if ball && v == 1 && (z-24)*(z-24)+(y-24)*(y-24)+(x-24)*(x-24) < 20*20 {
				lab.Pix[i] = 2
			}
		}
		lv := forward.Default()
		if float {
			lv.Nonwetting, lv.Wetting, lv.Solid = 0.2*gain, 0.9*gain, 2.0*gain
		}
		g, err := forward.Render(lab, lv)
		if err != nil {
			t.Fatal(err)
		}
		path := filepath.Join(dir, name+".raw")
		var v volume.Any = g
		if !float {
			v = forward.Uint16(g)
		}
		if err := volio.WriteRaw(path, v, volio.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
		return path
	}
	cfg := campaign.Default()
	cfg.Tile = 24
	cfg.DetectSample = false
	cfg.Measure.SkipCurvature, cfg.Measure.SkipContact = true, true
	cfg.Segment.ThresholdScope = segment.ScopeCampaign
	in := &Ingester{Store: st, Version: "test"}
	plan := func(camp string, steps []string, float bool, gains []float64) ([]campaign.Plan, []campaign.Manifest, error) {
		if _, err := EnsureCampaign(ctx, st, camp, cfg, "test", ""); err != nil {
			t.Fatal(err)
		}
		var ps []campaign.Plan
		var mans []campaign.Manifest
		for i, name := range steps {
			man, err := in.StoreStep(ctx, Request{Campaign: camp, Step: name, Path: scan(camp+name, i > 0, gains[i], float), HasTime: true, TimeS: float64(i)})
			if err != nil {
				t.Fatal(err)
			}
			mans = append(mans, man)
			p, err := PlanStep(ctx, st, man, cfg, 1, "test")
			if err != nil {
				return ps, mans, err
			}
			ps = append(ps, p)
		}
		return ps, mans, nil
	}
	ps, fmans, err := plan("f32", []string{"scan-0001", "scan-0002", "scan-0003"}, true, []float64{1, 1, 1.02})
	if err != nil {
		t.Fatal(err)
	}
	c, _ := layout.NewCampaign("f32")
	key, _ := c.Thresholds(cfg.Hash())
	var ct segment.CampaignThresholds
	if err := campaign.GetJSON(ctx, st, key, &ct); err != nil {
		t.Fatalf("no campaign thresholds at %s: %v", key, err)
	}
	if ct.Step != "scan-0002" || ct.Bins != cfg.Segment.Bins || !(ct.Range[0] < 0.2 && ct.Range[1] > 2.0) {
		t.Fatalf("record: step %s, range %v in %d bins; want fixed by scan-0002 over a range holding 0.2 … 2.0 cm⁻¹", ct.Step, ct.Range, ct.Bins)
	}
	// Step 3 planned under another hash (no record yet) measures its own
	// range, which differs: the campaign's range is not step 3's.
	other := cfg
	other.Measure.CurvatureSigma = 2
	own, err := PlanStep(ctx, st, fmans[2], other, 1, "test")
	if err != nil {
		t.Fatal(err)
	}
	if own.Config.Segment.Range == ct.Range {
		t.Errorf("step 3 on its own: range %v, the same as the campaign's; the check needs ranges that differ", own.Config.Segment.Range)
	}
	for i := 1; i < 3; i++ {
		if ps[i].Config.Segment.Range != ct.Range || ps[i].Config.Segment.Bins != ct.Bins {
			t.Errorf("step %d: plan range %v in %d bins, want the campaign's %v in %d", i+1, ps[i].Config.Segment.Range, ps[i].Config.Segment.Bins, ct.Range, ct.Bins)
		}
	}
	// uint16 record, float32 scan.
	if _, _, err := plan("mixed", []string{"scan-0001", "scan-0002"}, false, []float64{1, 1}); err != nil {
		t.Fatal(err)
	}
	man, err := in.StoreStep(ctx, Request{Campaign: "mixed", Step: "scan-0003", Path: scan("mixedscan-0003", true, 1, true), HasTime: true, TimeS: 2})
	if err != nil {
		t.Fatal(err)
	}
	_, err = PlanStep(ctx, st, man, cfg, 1, "test")
	mc, _ := layout.NewCampaign("mixed")
	mkey, _ := mc.Thresholds(cfg.Hash())
	if err == nil || !strings.Contains(err.Error(), "mixedscan-0003.raw") || !strings.Contains(err.Error(), mkey) || !strings.Contains(err.Error(), "uint16") || strings.Contains(err.Error(), "\n") {
		t.Errorf("float32 scan after a uint16 record: %v, want a one-line refusal naming the scan and %s", err, mkey)
	}
}
