// Package events finds the moments of a displacement experiment worth
// interrupting a scientist for, from the campaign's series alone.
//
// Definitions (the series sorted by time, then step; i indexes its rows):
//
// Breakthrough. The nonwetting phase breaks through when one of its
// clusters first touches both the inlet and the outlet face along the flow
// axis (nonwetting_percolates, computed by the cluster merge). The
// breakthrough step is the first row i with nonwetting_percolates = true
// such that some earlier row had nonwetting_percolates = false. Rows where
// it is null are skipped (unknown, neither true nor false). A series whose
// first known value is already true yields no breakthrough: it happened
// before observation began, at an unknown time. At most one breakthrough is
// ever reported: if the phase disconnects later and reconnects, that is not
// a new breakthrough.
//
// Steady state. Row i is steady when the K consecutive differences between
// rows i−K…i (K+1 rows) all satisfy
//
//	|S_w[j] − S_w[j−1]|                 ≤ MaxDeltaSw            (absolute)
//	|P[j] − P[j−1]| ≤ MaxRelDeltaPc · max(|P[j]|, |P[j−1]|)      (relative)
//
// for j = i−K+1 … i, where P is capillary_pressure_pa when all K+1 rows have
// it, otherwise curvature_wn_mean_per_m when all K+1 rows have that (Pc = σκ
// with constant σ, so the relative change is the same), otherwise the
// window is not eligible. A window with a null saturation is not eligible.
// A steady-state event is reported at every onset: each row i that is
// steady while row i−1 was not (or was not eligible), so a change of
// injection rate followed by a new plateau gives a new event.
//
// Grey drift. In threshold scope "campaign" a step whose phase grey levels
// drifted so far that a threshold shift was capped has grey_drift_beyond =
// true (segment.DriftMax). An event is reported at every onset: a row
// with grey_drift_beyond true whose previous row with a known value had it
// false, or which has no such previous row.
//
// Registration shift. In reference-scan mode a step whose shift against
// the reference scan exceeds register.max_shift along some axis has
// registration_beyond = true; an event is reported at every onset, as for
// grey drift.
//
// Detection is a pure function of the series and the options: running it
// again on the same series gives the same events, and each event has an ID
// (kind/step) that downstream publishers use to deduplicate. Defaults
// (|ΔS_w| ≤ 0.005, |ΔPc|/Pc ≤ 2 %, K = 3) are common practice for
// "no further change within measurement noise", not a published standard;
// tune them per campaign.
package events

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"

	"sluice/pkg/series"
)

// Kind names an event.
type Kind string

// The event kinds.
const (
	Breakthrough Kind = "breakthrough"
	SteadyState  Kind = "steady_state"
	GreyDrift    Kind = "grey_drift"
	// RegistrationShift: a step moved against the reference scan by more
	// than the campaign's limit.
	RegistrationShift Kind = "registration_shift"
)

// Kinds lists every event kind.
var Kinds = []Kind{Breakthrough, SteadyState, GreyDrift, RegistrationShift}

func knownKind(k Kind) bool {
	for _, x := range Kinds {
		if k == x {
			return true
		}
	}
	return false
}

// Event is one detected event, anchored to a step of the series.
type Event struct {
	Kind   Kind    `json:"kind"`
	Step   string  `json:"step"`
	Time   float64 `json:"time_s"`
	Detail string  `json:"detail"`
}

// ID is "kind/step": stable across re-runs, usable as a message id.
func (e Event) ID() string { return string(e.Kind) + "/" + e.Step }

// Decode reads a list of events as the aggregator records them (the
// campaign's events.json: a JSON array of events in detection order; null,
// as an empty list was once written, means none). name is the file's name for the error, which is one line:
// a record that cannot be read must stop the caller, not be taken for
// "no events yet" (every event would be announced again) or skipped.
func Decode(name string, data []byte) ([]Event, error) {
	var evs []Event
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&evs); err != nil {
		return nil, fmt.Errorf("events: %s: not a list of events: %w", name, err) // encoding/json quotes what it cites: one line
	}
	if dec.More() {
		return nil, fmt.Errorf("events: %s: data after the list of events", name)
	}
	for i, e := range evs {
		if !knownKind(e.Kind) || e.Step == "" {
			return nil, fmt.Errorf("events: %s: event %d has kind %q and step %q", name, i, e.Kind, e.Step)
		}
	}
	return evs, nil
}

// Options are the steady-state tolerances.
type Options struct {
	// K is the number of consecutive step-to-step differences that must
	// all be within tolerance (K+1 rows).
	K int
	// MaxDeltaSw bounds |ΔS_w| between consecutive steps (fraction, not %).
	MaxDeltaSw float64
	// MaxRelDeltaPc bounds |ΔPc| / max(|Pc|) between consecutive steps
	// (0.02 = 2 %); applied to the mean curvature when Pc is null.
	MaxRelDeltaPc float64
}

// Defaults returns K = 3, |ΔS_w| ≤ 0.005, |ΔPc|/Pc ≤ 0.02.
func Defaults() Options { return Options{K: 3, MaxDeltaSw: 0.005, MaxRelDeltaPc: 0.02} }

// Validate reports options that cannot define a steady state.
func (o Options) Validate() error {
	if o.K < 1 {
		return fmt.Errorf("events: K = %d, want ≥ 1", o.K)
	}
	if !(o.MaxDeltaSw >= 0) || !(o.MaxRelDeltaPc >= 0) || math.IsInf(o.MaxDeltaSw, 0) || math.IsInf(o.MaxRelDeltaPc, 0) {
		return fmt.Errorf("events: tolerances must be finite and ≥ 0 (ΔS_w %v, ΔPc/Pc %v)", o.MaxDeltaSw, o.MaxRelDeltaPc)
	}
	return nil
}

// Window is the steady-state verdict of the K differences ending at a row.
type Window struct {
	// Eligible is false when the window is too short or lacks values.
	Eligible bool
	// Steady is true when every difference is within tolerance.
	Steady bool
	// Quantity is "capillary_pressure_pa" or "curvature_wn_mean_per_m".
	Quantity string
	// MaxDeltaSw and MaxRelDelta are the largest |ΔS_w| and relative
	// |ΔP| over the window.
	MaxDeltaSw, MaxRelDelta float64
}

// Steady evaluates the window of K differences ending at rows[i]; rows
// must be sorted (series.Sort).
func Steady(rows []series.Row, i int, o Options) Window {
	var w Window
	if o.K < 1 || i < o.K || i >= len(rows) {
		return w
	}
	win := rows[i-o.K : i+1]
	pick := func(get func(*series.Row) *float64) bool {
		for j := range win {
			if get(&win[j]) == nil {
				return false
			}
		}
		return true
	}
	var get func(*series.Row) *float64
	switch {
	case pick(func(r *series.Row) *float64 { return r.Pc }):
		get, w.Quantity = func(r *series.Row) *float64 { return r.Pc }, "capillary_pressure_pa"
	case pick(func(r *series.Row) *float64 { return r.CurvMean }):
		get, w.Quantity = func(r *series.Row) *float64 { return r.CurvMean }, "curvature_wn_mean_per_m"
	default:
		return w
	}
	if !pick(func(r *series.Row) *float64 { return r.SatWetting }) {
		return Window{}
	}
	w.Eligible, w.Steady = true, true
	for j := 1; j < len(win); j++ {
		ds := math.Abs(*win[j].SatWetting - *win[j-1].SatWetting)
		a, b := *get(&win[j]), *get(&win[j-1])
		scale := math.Max(math.Abs(a), math.Abs(b))
		var rel float64
		switch {
		case a == b:
			rel = 0
		case scale == 0:
			rel = math.Inf(1)
		default:
			rel = math.Abs(a-b) / scale
		}
		w.MaxDeltaSw = math.Max(w.MaxDeltaSw, ds)
		w.MaxRelDelta = math.Max(w.MaxRelDelta, rel)
		if ds > o.MaxDeltaSw || rel > o.MaxRelDeltaPc {
			w.Steady = false
		}
	}
	return w
}

// Detect returns the events of a series in time order. The input is not
// modified; it is sorted by time then step before detection.
func Detect(rows []series.Row, o Options) ([]Event, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	rs := append([]series.Row(nil), rows...)
	series.Sort(rs)
	var out []Event
	seenFalse, broke := false, false
	prevSteady, prevBeyond, prevShift := false, false, false
	for i := range rs {
		r := &rs[i]
		if p := r.Percolates; p != nil && !broke {
			if !*p {
				seenFalse = true
			} else if seenFalse {
				broke = true
				out = append(out, Event{Kind: Breakthrough, Step: r.Step, Time: r.Time,
					Detail: "nonwetting phase first connects inlet and outlet"})
			} else {
				// Percolating from the first known step on: breakthrough
				// happened before observation; never report it.
				broke = true
			}
		}
		if b := r.DriftBeyond; b != nil {
			if *b && !prevBeyond {
				out = append(out, Event{Kind: GreyDrift, Step: r.Step, Time: r.Time, Detail: driftDetail(r)})
			}
			prevBeyond = *b
		}
		if b := r.RegBeyond; b != nil {
			if *b && !prevShift {
				out = append(out, Event{Kind: RegistrationShift, Step: r.Step, Time: r.Time, Detail: shiftDetail(r)})
			}
			prevShift = *b
		}
		w := Steady(rs, i, o)
		if w.Steady && !prevSteady {
			out = append(out, Event{Kind: SteadyState, Step: r.Step, Time: r.Time,
				Detail: fmt.Sprintf("over the last %d steps max |ΔS_w| = %.4g, max relative Δ(%s) = %.3g %%",
					o.K, w.MaxDeltaSw, w.Quantity, 100*w.MaxRelDelta)})
		}
		prevSteady = w.Steady
	}
	return out, nil
}

// shiftDetail gives the step's shift against the reference scan.
func shiftDetail(r *series.Row) string {
	d := "the sample moved against the reference scan by more than the campaign's limit (register.max_shift)"
	if r.RegZ != nil && r.RegY != nil && r.RegX != nil {
		d += fmt.Sprintf(": shift (z, y, x) = (%+.2f, %+.2f, %+.2f) voxels", *r.RegZ, *r.RegY, *r.RegX)
		if r.RegZM != nil && r.RegYM != nil && r.RegXM != nil {
			d += fmt.Sprintf(" = (%+.1f, %+.1f, %+.1f) µm", *r.RegZM*1e6, *r.RegYM*1e6, *r.RegXM*1e6)
		}
	}
	return d + "; the step is resampled by it all the same: check the scan"
}

// driftDetail says which phase levels drifted, as fractions of the
// contrast.
func driftDetail(r *series.Row) string {
	d := "phase grey levels drifted beyond the bound the campaign thresholds follow (shift capped):"
	for _, p := range []struct {
		name string
		v    *float64
	}{{"nonwetting", r.DriftNFraction}, {"wetting", r.DriftWFraction}, {"solid", r.DriftSFraction}} {
		if p.v != nil {
			d += fmt.Sprintf(" %s %+.1f %%", p.name, 100**p.v)
		}
	}
	return d + " of the contrast"
}
