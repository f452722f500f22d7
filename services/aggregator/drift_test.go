package aggregator

import (
	"context"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/segment"
	"sluice/pkg/series"
)

// A step planned in threshold scope campaign carries its grey-level drift
// from the plan into the result, the series row (grey units and fraction
// of the contrast) and, beyond the bound, a grey_drift event published and
// recorded once.
func TestGreyDriftReachesSeriesAndEvents(t *testing.T) {
	e := newEventsEnv(t)
	ctx := context.Background()
	s2, _ := e.c.Step("s2")
	var plan campaign.Plan
	if err := campaign.GetJSON(ctx, e.st, campaign.PlanKey(s2, e.hash), &plan); err != nil {
		t.Fatal(err)
	}
	f := func(v float64) *float64 { return &v }
	plan.Thresholds.Campaign = &segment.StepCampaign{Source: segment.SourceFirstStep, From: "s1", Order: "nws", T: []float64{19000, 32000},
		Drift: segment.Drift{Delta: []*float64{f(-1925), nil, f(-5594)}, Fraction: []*float64{f(-0.19), nil, f(-0.55)},
			Shift: []float64{-1925, -3900}, Beyond: true, Note: "grey-level drift beyond the bound: threshold 2 (w|s) capped"}}
	if err := campaign.PutJSON(ctx, e.st, campaign.PlanKey(s2, e.hash), plan); err != nil {
		t.Fatal(err)
	}
	for _, s := range []string{"s1", "s2"} {
		if err := e.done(s); err != nil {
			t.Fatal(err)
		}
	}
	if got := e.stored(t); !equal(got, "COMPLETED s1", "COMPLETED s2", "BREAKTHROUGH s2", "GREY_DRIFT s2") {
		t.Errorf("stored events %q", got)
	}
	if got := e.recorded(t); !equal(got, "BREAKTHROUGH s2", "GREY_DRIFT s2") {
		t.Errorf("recorded events %q", got)
	}
	rows, err := series.Load(ctx, e.st, "c")
	if err != nil {
		t.Fatal(err)
	}
	r1, r2 := rows[0], rows[1]
	if r1.DriftBeyond != nil || r1.DriftS != nil {
		t.Errorf("s1 (scope step plan): drift %v %v, want null", r1.DriftBeyond, r1.DriftS)
	}
	if r2.DriftBeyond == nil || !*r2.DriftBeyond || r2.DriftS == nil || *r2.DriftS != -5594 || r2.DriftW != nil || r2.DriftNFraction == nil || *r2.DriftNFraction != -0.19 {
		t.Errorf("s2 row drift: beyond %v, n %v w %v s %v", r2.DriftBeyond, r2.DriftNFraction, r2.DriftW, r2.DriftS)
	}
}
