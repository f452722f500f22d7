package worker

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/layout"
	"sluice/pkg/measure"
	"sluice/pkg/phase"
	"sluice/pkg/register"
	"sluice/pkg/scan"
	"sluice/pkg/scenario"
	"sluice/pkg/segment"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
	"sluice/services/ingest"
)

// A reference-scan campaign whose step drifted by a sub-voxel shift:
// ingest estimates the shift once for the step (its plan carries it), and
// every tile reads its box moved by it, resampled, through the real store.
// The labels the tiles write and the counts their partials add up to equal
// the step registered and measured whole in memory (scan.RegisterWhole,
// scan.Whole), and the plan's shift is the forward model's within 0.1
// voxel (pkg/register TestRecoversKnownShifts).
func TestRegisteredStepTilesEqualWhole(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	sc := &scenario.Campaign{Shape: [3]int{64, 64, 64}, Steps: 12, Seed: 1, NoCore: true}
	if err := sc.Prepare(); err != nil {
		t.Fatal(err)
	}
	codes := phase.Default()
	ref, _, _ := sc.Step(0)
	mask := ref.Clone()
	for i, v := range mask.Pix {
		if v == codes.Nonwetting {
			mask.Pix[i] = codes.Wetting
		}
	}
	lv := forward.Default()
	render := func(lab *volume.Labels, cnr float64, seed uint64, s register.Shift) *volume.Volume[uint16] {
		p := forward.Default()
		p.CNR, p.Seed, p.Shift = cnr, seed, s
		g, err := forward.Render(lab, p)
		if err != nil {
			t.Fatal(err)
		}
		u := forward.Uint16(g)
		u.VoxelSize = sc.VoxelSize
		return u
	}
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile = 32
	cfg.DetectSample = false
	cfg.Measure.SkipContact, cfg.Measure.SkipCurvature = true, true
	cfg.Segment.Reference = true
	cfg.Segment.Threshold = "fixed"
	cfg.Segment.Fixed = []float64{(lv.Nonwetting + lv.Wetting) / 2}
	cfg.Segment.PartialVolume.Blur = lv.Blur
	cfg.Segment.PartialVolume.SolidGrey = lv.Solid
	cfg.Segment.Assign = segment.AssignThreshold
	if _, err := ingest.EnsureCampaign(ctx, st, "c", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	c, _ := layout.NewCampaign("c")
	refGrey := render(ref, 20, 1<<20, register.Shift{})
	for _, a := range []struct {
		key string
		v   volume.Any
	}{{c.ReferenceVolume(), refGrey}, {c.SolidMask(), mask}} {
		z, err := volio.CreateZarr(ctx, st, strings.TrimSuffix(a.key, "/"), volio.ZarrMeta{Shape: [3]int{64, 64, 64}, Chunks: [3]int{32, 32, 32},
			DType: a.v.DType(), Compressor: "zstd", VoxelSize: sc.VoxelSize})
		if err != nil {
			t.Fatal(err)
		}
		if err := z.WriteBox(ctx, a.v); err != nil {
			t.Fatal(err)
		}
	}
	lab, _, _ := sc.Step(8)
	shift := register.Shift{0.4, -1.3, 0.7}
	grey := render(lab, 5, 3, shift)
	path := filepath.Join(dir, "scan-0008.raw")
	if err := volio.WriteRaw(path, grey, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	var tasks taskList
	in := &ingest.Ingester{Store: st, Queue: &tasks, Version: "test"}
	if _, err := in.Ingest(ctx, ingest.Request{Campaign: "c", Step: "scan-0008", Path: path, HasTime: true}); err != nil {
		t.Fatal(err)
	}
	step, _ := layout.NewStep("c", "scan-0008")
	var plan campaign.Plan
	if err := campaign.GetJSON(ctx, st, campaign.PlanKey(step, cfg.Hash()), &plan); err != nil {
		t.Fatal(err)
	}
	r := plan.Registration
	if r == nil {
		t.Fatal("the plan of a reference-mode step carries no registration")
	}
	for a := range shift {
		if math.Abs(r.Shift[a]-shift[a]) > 0.1 {
			t.Errorf("plan shift %v, forward model's %v", r.Shift, shift)
			break
		}
	}
	if r.Applied != r.Shift || r.Beyond {
		t.Errorf("registration %+v: want the shift applied, within the limit", r)
	}
	w := &Worker{Store: st, ID: "test"}
	var parts []*measure.Partial
	for _, task := range tasks {
		if _, err := w.Process(ctx, task); err != nil {
			t.Fatalf("tile %d: %v", task.Tile, err)
		}
		var p measure.Partial
		if err := campaign.GetJSON(ctx, st, task.ResultKey, &p); err != nil {
			t.Fatal(err)
		}
		parts = append(parts, &p)
	}
	mo, _ := plan.Config.MeasureOptions()
	got, err := measure.Combine(parts, grey.Bounds(), sc.VoxelSize, mo)
	if err != nil {
		t.Fatal(err)
	}
	rg, rm, err := scan.RegisterWhole(grey, mask, r.Applied)
	if err != nil {
		t.Fatal(err)
	}
	wl, want, _, err := scan.Whole(rg, plan.Config, rm, 2)
	if err != nil {
		t.Fatal(err)
	}
	z, err := volio.OpenZarr(ctx, st, strings.TrimSuffix(step.Labels(), "/"))
	if err != nil {
		t.Fatal(err)
	}
	sl, err := z.ReadBox(ctx, grey.Bounds())
	if err != nil {
		t.Fatal(err)
	}
	stored := sl.(*volume.Labels)
	for i := range stored.Pix {
		if stored.Pix[i] != wl.Pix[i] {
			t.Fatalf("voxel %d: tiles labelled %d, the whole step %d", i, stored.Pix[i], wl.Pix[i])
		}
	}
	g := fmt.Sprint(got.VoxelsSolid, got.VoxelsWetting, got.VoxelsNonwetting, got.VoxelsOutside, got.EulerNonwetting, got.GangliaCount)
	wn := fmt.Sprint(want.VoxelsSolid, want.VoxelsWetting, want.VoxelsNonwetting, want.VoxelsOutside, want.EulerNonwetting, want.GangliaCount)
	if g != wn {
		t.Errorf("tiles: solid, wetting, nonwetting, outside, χ_n, ganglia = %s; whole step %s", g, wn)
	}
	if got.VoxelsOutside == 0 {
		t.Error("no voxel left out: the faces the shifted scan did not see are measured")
	}
}
