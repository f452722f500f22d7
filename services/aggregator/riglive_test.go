package aggregator

import (
	"context"
	"io"
	"log/slog"
	"math"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/riglog"
	"sluice/pkg/series"
	"sluice/pkg/store"
)

// TestRigLogGrowthAfterLastStep: the rig log covers only the first of two
// measured steps when the last step completes; once the log grows past the
// second step's time, RefreshRig fills that row's rig columns (contract
// series and run series) with the value the log gives at that time — a
// linear interpolation computed here by hand — and a second call with the
// same stored log changes nothing.
func TestRigLogGrowthAfterLastStep(t *testing.T) {
	ctx := context.Background()
	st, err := store.Open(ctx, t.TempDir(), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	c, _ := layout.NewCampaign("rig")
	cfg := campaign.Default()
	rc := riglog.Config{Columns: riglog.Columns{
		Time:                 riglog.Column{Column: "t", Unit: "s"},
		Rate:                 &riglog.Column{Column: "q", Unit: "ml/min"},
		DifferentialPressure: &riglog.Column{Column: "dp", Unit: "kPa"},
	}}
	cfg.RigLog = &rc
	hash := cfg.Hash()
	if err := campaign.PutJSON(ctx, st, c.Config(), campaign.Record{Name: "rig", Current: hash, Config: cfg, Runs: []string{hash}}); err != nil {
		t.Fatal(err)
	}
	rows := []series.Row{{Step: "s1", Time: 10}, {Step: "s2", Time: 20}}
	if _, err := campaign.StoreRigLog(ctx, st, c, "rig.csv", []byte("t,q,dp\n0,1,1.0\n12,1,2.2\n"), rc); err != nil {
		t.Fatal(err)
	}
	if err := campaign.ApplyRigLog(ctx, st, c, &rc, rows); err != nil {
		t.Fatal(err)
	}
	if err := series.Save(ctx, st, "rig", rows); err != nil {
		t.Fatal(err)
	}
	jk, ck := campaign.RunSeriesKeys(c, hash)
	jb, _ := series.EncodeJSON(rows)
	cb, _ := series.EncodeCSV(rows)
	if err := st.Put(ctx, jk, jb); err != nil {
		t.Fatal(err)
	}
	if err := st.Put(ctx, ck, cb); err != nil {
		t.Fatal(err)
	}
	a := &Aggregator{Store: st, Log: slog.New(slog.NewTextHandler(io.Discard, nil))}
	if err := a.Start(ctx); err != nil {
		t.Fatal(err)
	}

	dp := func(rows []series.Row, step string) *float64 {
		for _, r := range rows {
			if r.Step == step {
				return r.RigDiffPressure
			}
		}
		t.Fatalf("no row %s", step)
		return nil
	}
	// Before growth: s1 at 10 s inside the log (1.0 + 10/12·1.2 = 2.0 kPa),
	// s2 at 20 s beyond its end (empty).
	if changed, err := a.RefreshRig(ctx, "rig"); err != nil || changed {
		t.Fatalf("log unchanged since the rows were written: changed %v, %v", changed, err)
	}
	got, err := series.Load(ctx, st, "rig")
	if err != nil {
		t.Fatal(err)
	}
	if v := dp(got, "s1"); v == nil || math.Abs(*v-2000) > 1e-9 {
		t.Fatalf("s1 Δp %v Pa, want 2000", v)
	}
	if v := dp(got, "s2"); v != nil {
		t.Fatalf("s2 beyond the log: Δp %v, want empty", *v)
	}

	// The rig writes two more lines; the tail stores them.
	if _, err := campaign.StoreRigLog(ctx, st, c, "rig.csv", []byte("t,q,dp\n0,1,1.0\n12,1,2.2\n18,1,2.8\n24,1,4.0\n"), rc); err != nil {
		t.Fatal(err)
	}
	changed, err := a.RefreshRig(ctx, "rig")
	if err != nil || !changed {
		t.Fatalf("grown log: changed %v, %v", changed, err)
	}
	// 20 s lies between 18 s (2.8 kPa) and 24 s (4.0 kPa): 2.8 + 2/6·1.2 = 3.2 kPa.
	for name, load := range map[string]func() ([]series.Row, error){
		"contract series": func() ([]series.Row, error) { return series.Load(ctx, st, "rig") },
		"run series": func() ([]series.Row, error) {
			b, err := st.Get(ctx, jk)
			if err != nil {
				return nil, err
			}
			return series.Decode(b)
		},
	} {
		got, err := load()
		if err != nil {
			t.Fatal(err)
		}
		if v := dp(got, "s2"); v == nil || math.Abs(*v-3200) > 1e-9 {
			t.Errorf("%s: s2 Δp %v Pa after the log grew, want 3200", name, v)
		}
		if v := dp(got, "s1"); v == nil || math.Abs(*v-2000) > 1e-9 {
			t.Errorf("%s: s1 Δp %v Pa, want 2000 still", name, v)
		}
	}
	if changed, err := a.RefreshRig(ctx, "rig"); err != nil || changed {
		t.Errorf("same stored log again: changed %v, %v", changed, err)
	}
}
