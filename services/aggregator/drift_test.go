package aggregator

import (
	"context"
	"math"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/register"
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

// A step's registration travels from its plan into the result and the
// series row (voxels, metres, peak, beyond); a step beyond the limit raises
// a registration_shift event, published and recorded once, and the record
// reads back for the next step's completion.
func TestRegistrationReachesSeriesAndEvents(t *testing.T) {
	e := newEventsEnv(t)
	ctx := context.Background()
	for i, s := range []string{"s1", "s2"} {
		step, _ := e.c.Step(s)
		var plan campaign.Plan
		if err := campaign.GetJSON(ctx, e.st, campaign.PlanKey(step, e.hash), &plan); err != nil {
			t.Fatal(err)
		}
		est := register.Estimate{Shift: register.Shift{0.5, -0.25, 0.04}, Peak: 0.4}
		limit := 5.0
		if i == 1 {
			est.Shift, limit = register.Shift{6.5, -0.25, 0}, 5
		}
		r := register.Decide(est, limit)
		plan.Registration = &r
		if err := campaign.PutJSON(ctx, e.st, campaign.PlanKey(step, e.hash), plan); err != nil {
			t.Fatal(err)
		}
	}
	for _, s := range []string{"s1", "s2"} {
		if err := e.done(s); err != nil {
			t.Fatal(err)
		}
	}
	if got := e.stored(t); !equal(got, "COMPLETED s1", "COMPLETED s2", "BREAKTHROUGH s2", "REGISTRATION_SHIFT s2") {
		t.Errorf("stored events %q", got)
	}
	if got := e.recorded(t); !equal(got, "BREAKTHROUGH s2", "REGISTRATION_SHIFT s2") {
		t.Errorf("recorded events %q", got)
	}
	if known, err := e.a.announced(ctx, e.c); err != nil || len(known) != 2 {
		t.Errorf("recorded events read back as %v, %v", known, err)
	}
	rows, err := series.Load(ctx, e.st, "c")
	if err != nil {
		t.Fatal(err)
	}
	r1, r2 := rows[0], rows[1]
	if r1.RegZ == nil || *r1.RegZ != 0.5 || r1.RegXM == nil || math.Abs(*r1.RegXM-0.04e-6) > 1e-18 || r1.RegPeak == nil || *r1.RegPeak != 0.4 || r1.RegBeyond == nil || *r1.RegBeyond {
		t.Errorf("s1 row: registration %v %v %v %v", r1.RegZ, r1.RegXM, r1.RegPeak, r1.RegBeyond)
	}
	if r2.RegBeyond == nil || !*r2.RegBeyond || r2.RegZM == nil || math.Abs(*r2.RegZM-6.5e-6) > 1e-18 {
		t.Errorf("s2 row: beyond %v, z %v m", r2.RegBeyond, r2.RegZM)
	}
}
