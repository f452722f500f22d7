package ingest

import (
	"context"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/layout"
	"sluice/pkg/phase"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// Planning a step in reference-scan mode registers it to the reference
// scan: without the reference's grey values it is refused in one line that
// names the key and the way out (register.off), with register.off it is
// planned without registration (and under another parameter hash), and
// with them the plan carries the forward model's shift; a shift beyond
// register.max_shift is marked and still applied.
func TestPlanRegistersStep(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	codes := phase.Default()
	ref := volume.NewShape[uint8](64, 64, 64, 4e-6)
	forward.Rock{GrainRadius: 5, Porosity: 0.4, BlobRadius: 3, Seed: 5}.Draw(ref, codes)
	step := ref.Clone()
	forward.Rock{GrainRadius: 5, Porosity: 0.4, BlobRadius: 3, BlobFrac: 0.3, Seed: 5}.Draw(step, codes)
	lv := forward.Default()
	render := func(lab *volume.Labels, cnr float64, seed uint64, s [3]float64) *volume.Volume[uint16] {
		p := forward.Default()
		p.CNR, p.Seed, p.Shift = cnr, seed, s
		g, err := forward.Render(lab, p)
		if err != nil {
			t.Fatal(err)
		}
		u := forward.Uint16(g)
		u.VoxelSize = 4e-6
		return u
	}
	shift := [3]float64{1.3, -0.4, 0.6}
	path := filepath.Join(dir, "scan-0001.raw")
	if err := volio.WriteRaw(path, render(step, 5, 2, shift), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile = 32
	cfg.DetectSample = false
	cfg.Measure.SkipCurvature, cfg.Measure.SkipContact = true, true
	cfg.Segment.Reference = true
	cfg.Segment.Threshold = "fixed"
	cfg.Segment.Fixed = []float64{(lv.Nonwetting + lv.Wetting) / 2}
	if _, err := EnsureCampaign(ctx, st, "rg", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	c, _ := layout.NewCampaign("rg")
	put := func(key string, v volume.Any) {
		z, err := volio.CreateZarr(ctx, st, strings.TrimSuffix(key, "/"), volio.ZarrMeta{Shape: [3]int{64, 64, 64}, Chunks: [3]int{32, 32, 32},
			DType: v.DType(), Compressor: "zstd", VoxelSize: 4e-6})
		if err != nil {
			t.Fatal(err)
		}
		if err := z.WriteBox(ctx, v); err != nil {
			t.Fatal(err)
		}
	}
	mask := ref.Clone()
	put(c.SolidMask(), mask)
	in := &Ingester{Store: st, Version: "test"}
	man, err := in.StoreStep(ctx, Request{Campaign: "rg", Step: "scan-0001", Path: path, HasTime: true})
	if err != nil {
		t.Fatal(err)
	}

	_, err = PlanStep(ctx, st, man, cfg, 1, "test")
	if err == nil || !strings.Contains(err.Error(), c.ReferenceVolume()) || !strings.Contains(err.Error(), "register.off: true") || strings.Contains(err.Error(), "\n") {
		t.Errorf("no reference grey: %v; want one line naming %s and register.off", err, c.ReferenceVolume())
	}
	off := cfg
	off.Register.Off = true
	if off.Hash() == cfg.Hash() {
		t.Error("register.off does not change the parameter hash")
	}
	p, err := PlanStep(ctx, st, man, off, 1, "test")
	if err != nil || p.Registration != nil {
		t.Errorf("register.off: plan registration %+v, %v; want none", p.Registration, err)
	}

	put(c.ReferenceVolume(), render(ref, 20, 1<<20, [3]float64{}))
	p, err = PlanStep(ctx, st, man, cfg, 1, "test")
	if err != nil {
		t.Fatal(err)
	}
	r := p.Registration
	if r == nil {
		t.Fatal("no registration in the plan")
	}
	for a := range shift {
		// Source: the forward model's shift; 0.1 as pkg/register TestRecoversKnownShifts.
		if math.Abs(r.Shift[a]-shift[a]) > 0.1 {
			t.Errorf("plan shift %v, forward model's %v", r.Shift, shift)
			break
		}
	}
	if r.Beyond || r.Limit != campaign.DefaultMaxShift || r.Applied != r.Shift {
		t.Errorf("registration %+v: want the shift applied, within the default limit %d", r, campaign.DefaultMaxShift)
	}
	tight := cfg
	tight.Register.MaxShift = 1
	p, err = PlanStep(ctx, st, man, tight, 1, "test")
	if err != nil {
		t.Fatal(err)
	}
	if r := p.Registration; r == nil || !r.Beyond || r.Limit != 1 || r.Applied != r.Shift {
		t.Errorf("max_shift 1, shift %v: registration %+v; want beyond the limit and applied", shift, r)
	}
}
