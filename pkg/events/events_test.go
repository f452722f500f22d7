package events

import (
	"encoding/json"
	"math"
	"math/rand"
	"reflect"
	"strings"
	"testing"

	"sluice/pkg/series"
)

func fp(v float64) *float64 { return &v }
func bp(v bool) *bool       { return &v }

func row(i int) series.Row {
	return series.Row{Step: "s" + string(rune('a'+i/26)) + string(rune('a'+i%26)), Time: 45 * float64(i)}
}

// relaxing builds a series relaxing exponentially towards a plateau:
//
//	S_w(n) = S∞ + A·e^(−n/τs),   Pc(n) = P∞·(1 + B·e^(−n/τp)).
func relaxing(n int, sInf, a, tauS, pInf, b, tauP float64) []series.Row {
	rows := make([]series.Row, n)
	for i := range rows {
		rows[i] = row(i)
		rows[i].SatWetting = fp(sInf + a*math.Exp(-float64(i)/tauS))
		rows[i].Pc = fp(pInf * (1 + b*math.Exp(-float64(i)/tauP)))
	}
	return rows
}

// firstSteadyIndex is the analytic onset for relaxing(): the difference
// between steps n−1 and n is
//
//	|ΔS_w| = A·e^(−n/τs)·(e^(1/τs) − 1)                       ≤ ts ⇔ n ≥ τs·ln(A(e^(1/τs)−1)/ts)
//	|ΔPc|/Pc(n−1) = B·x·(e^(1/τp)−1)/(1 + B·x·e^(1/τp)), x = e^(−n/τp)
//	                                                          ≤ r  ⇔ n ≥ −τp·ln(r / (B(e^(1/τp)(1−r) − 1)))
//
// both decrease monotonically in n, so the first K consecutive passing
// differences end at max(nS, nP) + K − 1 (derived by hand for this test).
func firstSteadyIndex(t *testing.T, a, tauS, b, tauP float64, o Options) int {
	nS := tauS * math.Log(a*(math.Exp(1/tauS)-1)/o.MaxDeltaSw)
	nP := -tauP * math.Log(o.MaxRelDeltaPc/(b*(math.Exp(1/tauP)*(1-o.MaxRelDeltaPc)-1)))
	for _, v := range []float64{nS, nP} {
		if math.Abs(v-math.Round(v)) < 1e-3 {
			t.Fatalf("test series puts a threshold crossing on an integer (%v): pick other constants", v)
		}
	}
	return int(math.Max(math.Ceil(nS), math.Ceil(nP))) + o.K - 1
}

func only(evs []Event, k Kind) []Event {
	var out []Event
	for _, e := range evs {
		if e.Kind == k {
			out = append(out, e)
		}
	}
	return out
}

func TestSteadyStateOnsetMatchesAnalytic(t *testing.T) {
	o := Defaults()
	for _, c := range []struct {
		name             string
		a, tauS, b, tauP float64
		k                int
	}{
		{"saturation limits", 0.4, 4, 0.5, 6, 3}, // nS = 12.49, nP = 8.23
		{"pressure limits", 0.3, 2, 0.8, 9, 3},   // nP governs
		{"K=5", 0.4, 4, 0.5, 6, 5},
		{"K=1", 0.25, 3.3, 0.6, 2.7, 1},
	} {
		t.Run(c.name, func(t *testing.T) {
			o.K = c.k
			rows := relaxing(40, 0.5, c.a, c.tauS, 5000, c.b, c.tauP)
			want := firstSteadyIndex(t, c.a, c.tauS, c.b, c.tauP, o)
			evs, err := Detect(rows, o)
			if err != nil {
				t.Fatal(err)
			}
			ss := only(evs, SteadyState)
			if len(ss) != 1 || ss[0].Step != rows[want].Step {
				t.Fatalf("steady events %+v, want one at %s (row %d)", ss, rows[want].Step, want)
			}
			// One row earlier must not be steady.
			if w := Steady(rows, want-1, o); w.Steady {
				t.Fatalf("row %d already steady: %+v", want-1, w)
			}
		})
	}
}

func TestCurvatureStandsInForMissingPc(t *testing.T) {
	o := Defaults()
	const sigma = 0.03 // N/m; Pc = σκ, so relative changes are equal
	rows := relaxing(40, 0.5, 0.4, 4, 5000, 0.5, 6)
	want := firstSteadyIndex(t, 0.4, 4, 0.5, 6, o)
	for i := range rows {
		rows[i].CurvMean = fp(*rows[i].Pc / sigma)
		rows[i].Pc = nil
	}
	evs, _ := Detect(rows, o)
	ss := only(evs, SteadyState)
	if len(ss) != 1 || ss[0].Step != rows[want].Step {
		t.Fatalf("curvature fallback: %+v, want row %d", ss, want)
	}
	if w := Steady(rows, want, o); w.Quantity != "curvature_wn_mean_per_m" {
		t.Fatalf("quantity %q", w.Quantity)
	}
	// A row with neither Pc nor curvature makes every window holding it
	// ineligible: onset moves to the first window past it.
	hole := want - 1
	rows[hole].CurvMean = nil
	evs, _ = Detect(rows, o)
	ss = only(evs, SteadyState)
	if len(ss) != 1 || ss[0].Step != rows[hole+o.K+1].Step {
		t.Fatalf("with hole at %d: %+v, want row %d", hole, ss, hole+o.K+1)
	}
	// Pc only in some rows of the window: curvature is used for the window.
	rows[hole].CurvMean = fp(*rows[hole-1].CurvMean)
	for i := range rows {
		if i%2 == 0 {
			rows[i].Pc = fp(*rows[i].CurvMean * sigma)
		}
	}
	if w := Steady(rows, 30, o); !w.Eligible || w.Quantity != "curvature_wn_mean_per_m" {
		t.Fatalf("mixed window %+v", w)
	}
}

func TestNoiseBelowAndAboveTolerance(t *testing.T) {
	o := Defaults()
	rng := rand.New(rand.NewSource(7))
	const n = 30
	// Below: |noise| ≤ 0.002 in S_w gives |ΔS_w| ≤ 0.004 < 0.005; Pc noise
	// ≤ 0.9 % gives relative Δ ≤ 2·0.009/0.991 = 1.82 % < 2 %.
	below := make([]series.Row, n)
	for i := range below {
		below[i] = row(i)
		below[i].SatWetting = fp(0.6 + 0.002*(2*rng.Float64()-1))
		below[i].Pc = fp(4000 * (1 + 0.009*(2*rng.Float64()-1)))
	}
	evs, _ := Detect(below, o)
	ss := only(evs, SteadyState)
	if len(ss) != 1 || ss[0].Step != below[o.K].Step {
		t.Fatalf("noise below tolerance: %+v, want one event at row %d", ss, o.K)
	}
	// Above in S_w: alternating ±0.003 gives |ΔS_w| = 0.006 > 0.005.
	aboveS := make([]series.Row, n)
	for i := range aboveS {
		aboveS[i] = row(i)
		aboveS[i].SatWetting = fp(0.6 + 0.003*float64(1-2*(i%2)))
		aboveS[i].Pc = fp(4000)
	}
	// Above in Pc: alternating ±1.5 % gives relative Δ = 0.03/1.015 = 2.96 %.
	aboveP := make([]series.Row, n)
	for i := range aboveP {
		aboveP[i] = row(i)
		aboveP[i].SatWetting = fp(0.6)
		aboveP[i].Pc = fp(4000 * (1 + 0.015*float64(1-2*(i%2))))
	}
	for name, rows := range map[string][]series.Row{"S_w": aboveS, "Pc": aboveP} {
		evs, _ := Detect(rows, o)
		if ss := only(evs, SteadyState); len(ss) != 0 {
			t.Errorf("noise above tolerance in %s: %+v", name, ss)
		}
	}
}

func TestNewPlateauGivesNewEvent(t *testing.T) {
	o := Defaults()
	// Plateau, a rate change at row 10 (S_w steps down by 0.1 per step for
	// 3 steps), then a new plateau.
	rows := make([]series.Row, 25)
	sw := 0.8
	for i := range rows {
		if i >= 10 && i < 13 {
			sw -= 0.1
		}
		rows[i] = row(i)
		rows[i].SatWetting = fp(sw)
		rows[i].Pc = fp(3000)
	}
	evs, _ := Detect(rows, o)
	ss := only(evs, SteadyState)
	// Steady from row 3; the differences at rows 10, 11, 12 fail; the next
	// window of 3 passing differences (rows 13, 14, 15) ends at row 15.
	if len(ss) != 2 || ss[0].Step != rows[3].Step || ss[1].Step != rows[15].Step {
		t.Fatalf("events %+v, want rows 3 and 15", ss)
	}
}

func TestBreakthroughOnceOnly(t *testing.T) {
	T, F := true, false
	for _, c := range []struct {
		name string
		perc []*bool
		want int // row of the breakthrough, −1 none
	}{
		{"disconnects and reconnects", []*bool{&F, &F, &F, &T, &T, &F, &T, &T}, 3},
		{"already percolating", []*bool{&T, &T, &F, &T}, -1},
		{"unknown first", []*bool{nil, &F, nil, &T, &F}, 3},
		{"never", []*bool{&F, &F, nil, &F}, -1},
		{"unknown then true", []*bool{nil, &T, &T}, -1},
	} {
		t.Run(c.name, func(t *testing.T) {
			rows := make([]series.Row, len(c.perc))
			for i := range rows {
				rows[i] = row(i)
				rows[i].Percolates = c.perc[i]
			}
			evs, err := Detect(rows, Defaults())
			if err != nil {
				t.Fatal(err)
			}
			bt := only(evs, Breakthrough)
			if c.want < 0 {
				if len(bt) != 0 {
					t.Fatalf("unexpected %+v", bt)
				}
				return
			}
			if len(bt) != 1 || bt[0].Step != rows[c.want].Step || bt[0].Time != rows[c.want].Time {
				t.Fatalf("breakthrough %+v, want row %d", bt, c.want)
			}
			if bt[0].ID() != "breakthrough/"+rows[c.want].Step {
				t.Fatalf("id %q", bt[0].ID())
			}
		})
	}
}

func TestDetectIsPureAndOrderIndependent(t *testing.T) {
	rows := relaxing(30, 0.5, 0.4, 4, 5000, 0.5, 6)
	for i := range rows {
		rows[i].Percolates = bp(i >= 7)
	}
	a, _ := Detect(rows, Defaults())
	b, _ := Detect(rows, Defaults())
	shuffled := append([]series.Row(nil), rows...)
	rand.New(rand.NewSource(3)).Shuffle(len(shuffled), func(i, j int) { shuffled[i], shuffled[j] = shuffled[j], shuffled[i] })
	c, _ := Detect(shuffled, Defaults())
	if len(a) != 2 || !reflect.DeepEqual(a, b) || !reflect.DeepEqual(a, c) {
		t.Fatalf("runs differ or wrong count:\n%+v\n%+v\n%+v", a, b, c)
	}
	if shuffled[0].Step == rows[0].Step && shuffled[1].Step == rows[1].Step {
		t.Fatal("shuffle did nothing")
	}
}

func TestOptionsValidate(t *testing.T) {
	for _, o := range []Options{{K: 0, MaxDeltaSw: 0.1, MaxRelDeltaPc: 0.1}, {K: 2, MaxDeltaSw: -1}, {K: 2, MaxRelDeltaPc: math.NaN()}} {
		if _, err := Detect(nil, o); err == nil {
			t.Errorf("options %+v accepted", o)
		}
	}
}

// Decode reads what the aggregator records and refuses anything else with
// one line naming the file.
func TestDecode(t *testing.T) {
	const name = "campaigns/c/events.json"
	for _, ok := range []string{`null`, `[]`, `[{"kind":"breakthrough","step":"s2","time_s":20,"detail":"d"}]`,
		`[{"kind":"grey_drift","step":"s3","time_s":30,"detail":"d"}]`, `[{"kind":"registration_shift","step":"s4","time_s":40,"detail":"d"}]`} {
		if _, err := Decode(name, []byte(ok)); err != nil {
			t.Errorf("Decode(%s): %v", ok, err)
		}
	}
	for _, bad := range []string{``, `[{"kind":"breakthrough","step":"s2"`, `{}`, `[] []`,
		`[{"kind":"flood","step":"s2"}]`, `[{"kind":"steady_state","step":""}]`, `[{"kind":"breakthrough","step":"s2","extra":1}]`} {
		_, err := Decode(name, []byte(bad))
		if err == nil || !strings.Contains(err.Error(), name) || strings.Contains(err.Error(), "\n") {
			t.Errorf("Decode(%q) = %v, want one line naming %s", bad, err, name)
		}
	}
}

// TestGreyDriftOnsets: a grey_drift event at every step where the drift
// goes beyond the bound after a step within it (or unknown before), none
// while it stays beyond, none for null rows (scope step).
func TestGreyDriftOnsets(t *testing.T) {
	beyond := []*bool{nil, bp(false), bp(true), bp(true), nil, bp(false), bp(true)}
	var rows []series.Row
	for i, b := range beyond {
		r := row(i)
		r.DriftBeyond = b
		if b != nil && *b {
			r.DriftSFraction = fp(-0.36)
		}
		rows = append(rows, r)
	}
	evs, err := Detect(rows, Defaults())
	if err != nil {
		t.Fatal(err)
	}
	got := only(evs, GreyDrift)
	if len(got) != 2 || got[0].Step != rows[2].Step || got[1].Step != rows[6].Step || !strings.Contains(got[0].Detail, "solid -36.0 %") {
		t.Errorf("grey drift events %+v, want onsets at %s and %s naming the solid drift", got, rows[2].Step, rows[6].Step)
	}
}

// TestRegistrationShiftOnsets: a registration_shift event at every step
// whose shift goes beyond the limit after a step within it (or unknown
// before), none while it stays beyond, none for null rows (registration
// off); the detail gives the shift in voxels and µm.
func TestRegistrationShiftOnsets(t *testing.T) {
	beyond := []*bool{nil, bp(false), bp(true), bp(true), nil, bp(false), bp(true)}
	var rows []series.Row
	for i, b := range beyond {
		r := row(i)
		r.RegBeyond = b
		if b != nil {
			r.RegZ, r.RegY, r.RegX = fp(6.5), fp(-0.25), fp(0)
			r.RegZM, r.RegYM, r.RegXM = fp(26e-6), fp(-1e-6), fp(0)
		}
		rows = append(rows, r)
	}
	evs, err := Detect(rows, Defaults())
	if err != nil {
		t.Fatal(err)
	}
	got := only(evs, RegistrationShift)
	if len(got) != 2 || got[0].Step != rows[2].Step || got[1].Step != rows[6].Step ||
		!strings.Contains(got[0].Detail, "(+6.50, -0.25, +0.00) voxels") || !strings.Contains(got[0].Detail, "(+26.0, -1.0, +0.0) µm") {
		t.Errorf("registration events %+v, want onsets at %s and %s giving the shift", got, rows[2].Step, rows[6].Step)
	}
	// What the aggregator records, it must read back.
	b, _ := json.Marshal(evs)
	if back, err := Decode("events.json", b); err != nil || len(back) != len(evs) {
		t.Errorf("recorded events read back as %v, %v", back, err)
	}
}
