package series

import (
	"bytes"
	"context"
	"encoding/csv"
	"math"
	"testing"
)

// TestFrontVelocity: the front velocity is the finite difference of the
// front positions of consecutive steps over their times (Source: the
// definition, v = Δx/Δt), null for the first step and next to a step
// without a front, and rederived when a step arrives out of order.
func TestFrontVelocity(t *testing.T) {
	f := func(v float64) *float64 { return &v }
	row := func(step string, time float64, front *float64) Row {
		r := mustRow(t, step, time)
		r.FrontPosition = front
		return r
	}
	ctx := context.Background()
	st := Dir(t.TempDir())
	// Arrive out of order: s4 first follows s1 (a velocity), then s3
	// without a front comes between them and s4's velocity must go.
	for _, r := range []Row{
		row("s1", 0, f(1e-3)),
		row("s4", 180, f(4e-3)),
		row("s3", 120, nil),
		row("s5", 240, f(3.4e-3)),
		row("s2", 60, f(2.5e-3)),
	} {
		if _, err := Upsert(ctx, st, "c", r); err != nil {
			t.Fatal(err)
		}
	}
	rows, err := Load(ctx, st, "c")
	if err != nil {
		t.Fatal(err)
	}
	// By hand: (2.5 − 1.0) mm / 60 s = 2.5e-5 m/s; s3 has no front, so s3
	// and s4 have no velocity; (3.4 − 4.0) mm / 60 s = −1e-5 m/s.
	want := []float64{math.NaN(), 2.5e-5, math.NaN(), math.NaN(), -1e-5}
	for i, r := range rows {
		got := F(r.FrontVelocity)
		if math.IsNaN(want[i]) != math.IsNaN(got) || (!math.IsNaN(got) && math.Abs(got-want[i]) > 1e-12*math.Abs(want[i])) {
			t.Errorf("%s: front velocity %v m/s, want %v", r.Step, got, want[i])
		}
	}
	b, err := st.Get(ctx, "campaigns/c/series.csv")
	if err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for i, k := range recs[0] {
		col[k] = i
	}
	if recs[2][col["front_position_m"]] != "0.0025" || recs[3][col["front_position_m"]] != "" || recs[1][col["front_velocity_m_per_s"]] != "" ||
		recs[2][col["front_velocity_m_per_s"]] == "" {
		t.Errorf("CSV front columns: %v / %v / %v", recs[1], recs[2], recs[3])
	}
	// Equal times give no velocity, not an infinity.
	rs := []Row{row("a", 5, f(1e-3)), row("b", 5, f(2e-3))}
	Sort(rs)
	if rs[1].FrontVelocity != nil {
		t.Errorf("equal times: velocity %v", *rs[1].FrontVelocity)
	}
}
