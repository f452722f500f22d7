package aggregator

import (
	"context"
	"encoding/json"
	"math"
	"reflect"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/filling"
	"sluice/pkg/layout"
	"sluice/pkg/measure"
	"sluice/pkg/preview"
	"sluice/pkg/series"
	"sluice/pkg/store"
	"sluice/pkg/tracking"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
	"sluice/proto/sluicepb"
)

// fillingEnv stores campaign "c" with three steps of a 16³ scan in eight 8³
// tiles, each with its label array and tile results, as the workers leave
// them:
//
//	s1 (t = 10 s)  wetting, a solid wall at x < 2, a trapped nonwetting box G (z 2–3, y 12–13, x 4–5) kept throughout
//	s2 (t = 20 s)  + drainage of the box z 6–9, y 6–9, x 6–9 (64 voxels, in all eight tiles)
//	s3 (t = 30 s)  its half z 6–7 imbibed (32 voxels), and a drainage of z 12–13, y 2–3, x 12–13 (8 voxels)
type fillingEnv struct {
	st   store.Store
	a    *Aggregator
	hash string
	c    layout.Campaign
}

var fillingSteps = []string{"s1", "s2", "s3"}

func newFillingEnv(t *testing.T) *fillingEnv {
	t.Helper()
	ctx := context.Background()
	loc, err := store.Open(ctx, t.TempDir(), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	e := &fillingEnv{st: loc}
	e.c, _ = layout.NewCampaign("c")
	cfg := campaign.Default()
	cfg.Tile = 8
	cfg.Measure.SkipCurvature, cfg.Measure.SkipContact = true, true
	e.hash = cfg.Hash()
	if err := campaign.PutJSON(ctx, loc, e.c.Config(), campaign.Record{Name: "c", Current: e.hash, Config: cfg, Runs: []string{e.hash}}); err != nil {
		t.Fatal(err)
	}
	mo, err := cfg.MeasureOptions()
	if err != nil {
		t.Fatal(err)
	}
	whole := volume.BoxOf(16, 16, 16)
	lab := volume.New[uint8](whole, 1e-6)
	fill := func(b [6]int, v uint8) {
		for z := b[0]; z < b[1]; z++ {
			for y := b[2]; y < b[3]; y++ {
				for x := b[4]; x < b[5]; x++ {
					lab.Set(z, y, x, v)
				}
			}
		}
	}
	fill([6]int{0, 16, 0, 16, 0, 16}, 1)
	fill([6]int{0, 16, 0, 16, 0, 2}, 0)
	fill([6]int{2, 4, 12, 14, 4, 6}, 2) // G: trapped and unchanged in every step
	for i, name := range fillingSteps {
		switch i {
		case 1:
			fill([6]int{6, 10, 6, 10, 6, 10}, 2)
		case 2:
			fill([6]int{6, 8, 6, 10, 6, 10}, 1)
			fill([6]int{12, 14, 2, 4, 12, 14}, 2)
		}
		step, _ := e.c.Step(name)
		man := campaign.Manifest{Campaign: "c", Step: name, Shape: [3]int{16, 16, 16}, DType: "uint8", VoxelSize: 1e-6, TimeS: float64(10 * (i + 1))}
		plan := campaign.Plan{Campaign: "c", Step: name, ParamHash: e.hash, Config: cfg, Tile: 8, Tiles: 8}
		for key, v := range map[string]any{step.Manifest(): man, campaign.PlanKey(step, e.hash): plan} {
			if err := campaign.PutJSON(ctx, loc, key, v); err != nil {
				t.Fatal(err)
			}
		}
		z, err := volio.CreateZarr(ctx, loc, strings.TrimSuffix(step.Labels(), "/"), volio.ZarrMeta{Shape: man.Shape,
			Chunks: [3]int{8, 8, 8}, DType: volume.Uint8, Compressor: "zstd", VoxelSize: 1e-6})
		if err != nil {
			t.Fatal(err)
		}
		if err := z.WriteBox(ctx, lab); err != nil {
			t.Fatal(err)
		}
		for k, core := range plan.Tiling(man).Cores() {
			part, err := measure.MeasureTile(lab, core, whole, mo)
			if err != nil {
				t.Fatal(err)
			}
			rk, _ := step.TileResult(k, e.hash)
			if err := campaign.PutJSON(ctx, loc, rk, part); err != nil {
				t.Fatal(err)
			}
		}
	}
	e.a = &Aggregator{Store: loc, Log: quiet()}
	if err := e.a.Start(ctx); err != nil {
		t.Fatal(err)
	}
	return e
}

// deliver hands the aggregator the results of every tile of step.
func (e *fillingEnv) deliver(t *testing.T, step string) { e.deliverTiles(t, step, 8) }

// deliverTiles hands the aggregator the results of the first n tiles of
// step. All results are in the store, so the first completes the step (the
// aggregator counts the stored ones); later ones find it completed.
func (e *fillingEnv) deliverTiles(t *testing.T, step string, n int) {
	t.Helper()
	s, _ := e.c.Step(step)
	for k := range n {
		rk, _ := s.TileResult(k, e.hash)
		if err := e.a.TileDone(context.Background(), &sluicepb.TileDone{Campaign: "c", Step: step, Tile: int32(k), TileCount: 8,
			ParamHash: e.hash, ResultKey: rk, LabelKey: s.Labels(), TimeS: 0}); err != nil {
			t.Fatalf("%s tile %d: %v", step, k, err)
		}
	}
}

// result returns the step's run result, nil when it is not completed.
func (e *fillingEnv) result(t *testing.T, step string) []byte {
	t.Helper()
	s, _ := e.c.Step(step)
	b, err := e.st.Get(context.Background(), campaign.RunResultKey(s, e.hash))
	if err != nil {
		return nil
	}
	return b
}

func (e *fillingEnv) filling(t *testing.T, step string) *filling.Result {
	t.Helper()
	b := e.result(t, step)
	if b == nil {
		t.Fatalf("step %s not completed", step)
	}
	var r struct {
		PoreFilling *filling.Result `json:"pore_filling"`
	}
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	if r.PoreFilling == nil {
		t.Fatalf("step %s: no pore_filling in %s", step, b)
	}
	return r.PoreFilling
}

// count returns the count and voxels of a kind, -1 when null.
func count(k *filling.Kind) [2]int64 {
	if k == nil {
		return [2]int64{-1, -1}
	}
	return [2]int64{k.Count, k.Voxels}
}

// TestFillingInOrder: completed in order, the first step has no events
// (null, with a note) and the later ones have exactly the changes built
// into them (by construction: 1 drainage event of 64 voxels, then 1
// imbibition event of 32 voxels and 1 drainage event of 8 voxels), at
// 1/10 s⁻¹ over the 10 s between steps; the CSV carries the counts.
func TestFillingInOrder(t *testing.T) {
	e := newFillingEnv(t)
	for _, s := range fillingSteps {
		e.deliver(t, s)
	}
	f1 := e.filling(t, "s1")
	if f1.PreviousStep != nil || f1.Drainage != nil || f1.Imbibition != nil || f1.Note == "" {
		t.Errorf("s1: %+v, want null events with a note", f1)
	}
	f2, f3 := e.filling(t, "s2"), e.filling(t, "s3")
	if f2.PreviousStep == nil || *f2.PreviousStep != "s1" || count(f2.Drainage) != [2]int64{1, 64} || count(f2.Imbibition) != [2]int64{0, 0} {
		t.Errorf("s2: previous %v, drainage %v, imbibition %v", f2.PreviousStep, count(f2.Drainage), count(f2.Imbibition))
	}
	if f3.PreviousStep == nil || *f3.PreviousStep != "s2" || count(f3.Drainage) != [2]int64{1, 8} || count(f3.Imbibition) != [2]int64{1, 32} {
		t.Errorf("s3: previous %v, drainage %v, imbibition %v", f3.PreviousStep, count(f3.Drainage), count(f3.Imbibition))
	}
	if r := f3.Imbibition.RatePerS; r == nil || *r != 0.1 {
		t.Errorf("s3 imbibition rate %v, want 0.1 /s", r)
	}
	// The imbibed half z 6–7 of the box: centroid (6.5, 7.5, 7.5) voxels →
	// (7, 8, 8) µm with voxel centres at (i + ½) h.
	c := f3.Imbibition.Largest[0].CentroidM
	for a, want := range []float64{7e-6, 8e-6, 8e-6} {
		if math.Abs(c[a]-want) > 1e-18 {
			t.Errorf("s3 imbibition centroid %v m, want (7, 8, 8) µm", c)
		}
	}
	// Ganglion tracking (Source: by construction): s2's box is one trapped
	// ganglion that appeared (born s2); in s3 its remaining half z 8–9 (32
	// voxels) is its one-to-one successor, moved, still born s2 (lifetime
	// 10 s), the new 8-voxel box appeared, and G is born s1 (read back from
	// s2's result: lifetime 20 s); trapped saturation (32 + 8 + 8) /
	// (16³ − 512 wall voxels) = 48/3584.
	s3, _ := e.c.Step("s3")
	var r3 struct {
		T *tracking.Result `json:"ganglion_tracking"`
	}
	if err := campaign.GetJSON(context.Background(), e.st, campaign.RunResultKey(s3, e.hash), &r3); err != nil || r3.T == nil {
		t.Fatalf("s3 tracking: %v", err)
	}
	g := r3.T
	if g.OneToOne != 2 || g.Appeared != 1 || g.Splits+g.Merges+g.Vanished != 0 || len(g.Trapped) != 3 ||
		g.Trapped[0].BornStep != "s2" || g.Trapped[0].LifetimeS != 10 || !g.Trapped[0].Moved ||
		g.Trapped[1].BornStep != "s1" || g.Trapped[1].LifetimeS != 20 || g.Trapped[1].Moved || g.Trapped[2].BornStep != "s3" ||
		g.TrappedMovedFraction == nil || *g.TrappedMovedFraction != 0.5 || g.TrappedSaturation == nil || *g.TrappedSaturation != 48.0/3584 {
		t.Errorf("s3 tracking %+v", g)
	}
	rows, err := series.Load(context.Background(), e.st, "c")
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 3 {
		t.Fatalf("%d series rows", len(rows))
	}
	csv, err := series.EncodeCSV(rows)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(csv)), "\n")
	hdr := strings.Split(lines[0], ",")
	col := map[string]int{}
	for i, h := range hdr {
		col[h] = i
	}
	last := strings.Split(lines[3], ",")
	if last[col["tracking_one_to_one"]] != "2" || last[col["tracking_trapped_moved_fraction"]] != "0.5" || last[col["tracking_appeared"]] != "1" {
		t.Errorf("CSV tracking columns: %s", lines[3])
	}
	if last[col["pore_filling_drainage_count"]] != "1" || last[col["pore_filling_imbibition_count"]] != "1" ||
		last[col["pore_filling_imbibition_rate_per_s"]] != "0.1" || strings.Split(lines[1], ",")[col["pore_filling_drainage_count"]] != "" {
		t.Errorf("CSV:\n%s", csv)
	}
}

// TestFillingWaitsForPreviousStep: steps whose tiles arrive in reverse
// order wait for their previous step's labels (no result, a waiting note)
// and are completed, in a chain, when it is done — with the same results
// as in order.
func TestFillingWaitsForPreviousStep(t *testing.T) {
	ref := newFillingEnv(t)
	for _, s := range fillingSteps {
		ref.deliver(t, s)
	}
	e := newFillingEnv(t)
	e.deliver(t, "s3")
	e.deliver(t, "s2")
	for _, s := range []string{"s2", "s3"} {
		if e.result(t, s) != nil {
			t.Fatalf("%s completed before its previous step", s)
		}
	}
	s1, _ := e.c.Step("s1")
	var w waiting
	if err := campaign.GetJSON(context.Background(), e.st, campaign.WaitingKey(s1, e.hash), &w); err != nil || w.Step != "s2" {
		t.Fatalf("waiting note on s1: %+v, %v", w, err)
	}
	// One result of s1 completes it, and with it s2 and then s3 (a
	// redelivered result would also find the waiting note: not needed here).
	e.deliverTiles(t, "s1", 1)
	for _, s := range fillingSteps {
		if got, want := e.filling(t, s), ref.filling(t, s); !reflect.DeepEqual(got, want) {
			t.Errorf("%s out of order: %+v, in order %+v", s, got, want)
		}
	}
}

// TestFillingAfterFailedStep: a step waiting for a step that then fails
// completes without events, with a note naming the failed step.
func TestFillingAfterFailedStep(t *testing.T) {
	e := newFillingEnv(t)
	e.deliver(t, "s2")
	if e.result(t, "s2") != nil {
		t.Fatal("s2 completed before s1")
	}
	err := e.a.StepFailed(context.Background(), &sluicepb.DeadLetter{Task: &sluicepb.TileTask{Campaign: "c", Step: "s1", Tile: 3, ParamHash: e.hash},
		Reason: "worker died", Deliveries: 5})
	if err != nil {
		t.Fatal(err)
	}
	f := e.filling(t, "s2")
	if f.PreviousStep == nil || *f.PreviousStep != "s1" || f.Drainage != nil || !strings.Contains(f.Note, "s1 failed") {
		t.Errorf("s2 after a failed s1: %+v", f)
	}
}

// TestFillingMarks: the preview marks the centroids of the largest events
// of the step's result as voxel indices (Source: by hand, s3's drainage
// box z 12–13, y 2–3, x 12–13 has its centroid at (12.5, 2.5, 12.5) →
// (13.0, 3.0, 13.0) µm → voxel (13, 3, 13) rounding half away from zero;
// the imbibed half z 6–7 at (7, 8, 8) µm → (7, 8, 8)), and the served
// preview carries them.
func TestFillingMarks(t *testing.T) {
	e := newFillingEnv(t)
	for _, s := range fillingSteps {
		e.deliver(t, s)
	}
	s3, _ := e.c.Step("s3")
	b, err := e.st.Get(context.Background(), s3.Result())
	if err != nil {
		t.Fatal(err)
	}
	got := FillingMarks(b, 1e-6, PreviewMarks)
	want := []preview.Mark{{At: [3]int{13, 3, 13}}, {At: [3]int{7, 8, 8}, Imbibition: true}}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("marks %v, want %v", got, want)
	}
	if m := FillingMarks([]byte(`{"pore_filling":{"previous_step":null,"drainage":null,"imbibition":null}}`), 1e-6, 3); m != nil {
		t.Errorf("first step: marks %v", m)
	}
}
