package segment

import (
	"fmt"
	"math"
	"strings"

	"sluice/pkg/volume"
)

// Campaign thresholds and grey-level drift
//
// The grey levels of the three phases belong to the campaign (scanner,
// energy, doping), not to the step. Per-step Otsu (Params.ThresholdScope
// "step", the default) moves the thresholds with the phase fractions: the
// between-class variance is weighted by the class sizes, so a split moves
// towards the smaller class. With ThresholdScope "campaign" the thresholds
// are fixed once for the campaign (CampaignThresholds) and every step uses
// them, shifted only by a measured drift of the phase grey levels:
//
//   - Source "first-step": the first step (in time order) whose merged
//     histogram yields a grey level for every class (see Levels). The
//     per-step split of that step (3-class Otsu, or 2-class in reference
//     mode) only delimits the classes; the grey level of each class is the
//     vertex of a parabola fitted to the log counts of its peak (bins above
//     half its maximum), and the campaign thresholds are the midpoints of
//     adjacent levels: the equal-prior split of two classes of equal
//     spread (Ridler & Calvard 1978, IEEE Trans. SMC 8:630), which does not
//     depend on the phase fractions of the step it came from.
//   - Source "user": Params.Threshold "fixed" (segment.fixed); the levels
//     used for drift come from the first step's histogram within the user's
//     classes (a class with no peak there has no level and no drift).
//
// Drift. For every step the level of each class is measured the same way
// inside the campaign class (between the campaign thresholds) and compared
// with the campaign level: drift d_k in grey units and as a fraction of the
// smallest contrast between adjacent campaign levels. Threshold i, between
// classes a and b, is shifted by the mean drift of a and b (the one
// measured drift when only one is), unless that shift is below
// DriftIgnore·C_i (C_i = level_b − level_a; estimator noise: thresholds
// stay exactly the campaign values) and at most DriftMax·C_i. A larger
// shift is capped there and the step is flagged (Drift.Beyond).
//
// Why DriftMax = 0.25: the campaign thresholds sit half a contrast from
// each level; a peak that moved by a quarter of the contrast is halfway to
// the edge of the window its level is searched in, and at CNR 5 after a
// median filter the half width at half maximum of a peak is about a tenth
// of the contrast, so beyond a quarter the window starts to cut the peak's
// flank and the estimate is no longer trusted. Unadjusted, a quarter
// contrast moves a threshold to a quarter contrast from a peak, 1.25 σ at
// CNR 5 before filtering: about a tenth of that phase's voxels would be
// misclassified, far beyond a saturation target of 0.01. Why DriftIgnore =
// 0.02: without any drift, the levels measured on forward-model scans of
// one rock at CNR 5 move with the fluid fractions (S_n 0.05 → 0.7) by up
// to 59 grey (nonwetting) and 145 grey (brine), 1.45 % of the smallest
// contrast (TestCampaignDrift); a shift below 2 % is not told apart from
// that, and at CNR 5 it is 0.1 σ, a few misclassified voxels in ten
// thousand. Below it the thresholds stay exactly the campaign's.

// DecidedCampaign is Phases.Decided of a step segmented with campaign
// thresholds: every class is segmented, whatever phases the step holds (a
// phase that is absent gets only the few voxels of the noise tail).
const DecidedCampaign = "campaign"

// Threshold scopes of Params.ThresholdScope.
const (
	ScopeStep     = "step"
	ScopeCampaign = "campaign"
)

// Sources of campaign thresholds.
const (
	SourceFirstStep = "first-step"
	SourceUser      = "user"
)

// DriftIgnore and DriftMax bound the threshold shift for drift, as
// fractions of the contrast between the two classes of a threshold (see
// above).
const (
	DriftIgnore = 0.02
	DriftMax    = 0.25
)

// MaxOutOfRange is the largest share of a float32 step's voxels that may
// fall outside the campaign's grey range (into the end bins) before the
// step is flagged as drifted beyond the bound: the widened range
// (FloatMargin) holds every voxel of the step that fixed it.
const MaxOutOfRange = 0.001

// MinLevelFraction is the smallest share of the histogram's voxels a class
// must hold for its grey level to be measured.
const MinLevelFraction = 0.01

// CampaignThresholds are the thresholds of a campaign in scope "campaign",
// stored once per campaign run (layout key Campaign.Thresholds).
type CampaignThresholds struct {
	// Source is SourceFirstStep or SourceUser; Step the step whose
	// histogram gave the levels (and, for first-step, the thresholds).
	Source string `json:"source"`
	Step   string `json:"step"`
	// TimeS is that step's time: steps before it (time, then name) keep
	// their own split, as when they were first planned, so that planning
	// again reproduces them.
	TimeS float64 `json:"time_s"`
	// Order lists the classes of T in grey order (Params.Order, without
	// the solid in reference mode).
	Order string `json:"order"`
	// T are the thresholds (ascending); Levels the grey level of each class
	// (null when not measured); Contrast[i] = Levels[i+1] − Levels[i].
	T        []float64  `json:"t"`
	Levels   []*float64 `json:"levels"`
	Contrast []*float64 `json:"contrast"`
	// Split are the per-step thresholds that delimited the classes when
	// the levels were measured.
	Split []float64 `json:"split"`
	// Hist is the merged histogram the levels came from (without the
	// sample-detection columns).
	Hist Hist `json:"histogram"`
	// Range and Bins are the float32 binning of the campaign (zero for
	// integer scans, whose binning follows from the dtype): every step
	// from Step on bins its filtered grey over Range in Bins bins, so its
	// histogram, levels and drift are read on the same scale (see
	// CampaignBinning).
	Range [2]float64 `json:"range,omitempty"`
	Bins  int        `json:"bins,omitempty"`
}

// FloatMargin widens the measured grey range of a float32 step in scope
// "campaign" on either side, as a fraction of the range, before it is
// binned: the step may fix the campaign's binning, which later steps keep,
// and their levels may drift. A level that drifts by DriftMax of a contrast
// (the most that is followed) moves by less than a quarter of the range,
// since every contrast lies inside it, so its peak stays inside the
// widened range. The bins are 1.5 times wider than over the bare range:
// 1024 bins over 1.5 × (12 500 … 41 500) grey of the forward model's scans
// after the median are 42 grey wide, finer than uint16's 64.
const FloatMargin = 0.25

// before reports whether a step (time, then name) comes before the one
// that fixed ct.
func (ct CampaignThresholds) before(step string, timeS float64) bool {
	return timeS < ct.TimeS || (timeS == ct.TimeS && step < ct.Step)
}

// CampaignBinning returns p with the grey binning a step of a campaign in
// scope "campaign" must use. Integer scans bin by their dtype and keep p.
// A float32 step at or after the step that fixed stored bins over the
// stored range (unless p gives a range, which the record then holds too);
// without a record, or for a step before it, p is returned unchanged and
// the step's range is measured (scan.Prepare widens it by FloatMargin).
// A record fixed on scans of another dtype is refused: its thresholds are
// grey values on another scale.
func CampaignBinning(p Params, dtype volume.DType, stored *CampaignThresholds, step string, timeS float64) (Params, error) {
	if p.ThresholdScope != ScopeCampaign || stored == nil {
		return p, nil
	}
	if d := stored.Hist.DType; d != "" && d != dtype.String() {
		return p, fmt.Errorf("campaign thresholds (from step %s) were fixed on %s scans; this scan is %s, whose grey values are on another scale (reprocess the campaign from one scan type)", stored.Step, d, dtype)
	}
	if dtype != volume.Float32 || p.Range != [2]float64{} || stored.before(step, timeS) {
		return p, nil
	}
	r, n := stored.Range, stored.Bins
	if n == 0 {
		// A record written before Range was stored: its histogram's own
		// binning.
		n = len(stored.Hist.Counts)
		r = [2]float64{stored.Hist.Lo, stored.Hist.Lo + float64(n)*stored.Hist.Width}
	}
	if !(r[1] > r[0]) || n < 2 || math.IsInf(r[0], 0) || math.IsInf(r[1], 0) {
		return p, fmt.Errorf("campaign thresholds (from step %s): float32 range %v in %d bins is unusable", stored.Step, r, n)
	}
	p.Range, p.Bins = r, n
	return p, nil
}

// Drift is the drift measured on one step against the campaign levels.
type Drift struct {
	// Levels, Delta (grey units) and Fraction (of the smallest campaign
	// contrast) per class in campaign order; null when not measured.
	Levels   []*float64 `json:"levels"`
	Delta    []*float64 `json:"delta"`
	Fraction []*float64 `json:"fraction"`
	// Shift is the shift applied to each campaign threshold.
	Shift []float64 `json:"shift"`
	// Beyond is true when a shift exceeded DriftMax of its contrast and
	// was capped; Note says which in one line.
	Beyond bool   `json:"beyond,omitempty"`
	Note   string `json:"note,omitempty"`
}

// classOrder returns the classes thresholds separate, in grey order.
func classOrder(p Params) string {
	if p.Reference {
		return strings.ReplaceAll(p.Order, "s", "")
	}
	return p.Order
}

// cuts returns the bin boundaries of the classes split at T: class k holds
// bins [cut[k], cut[k+1]).
func cuts(h Hist, T []float64) []int {
	c := []int{0}
	for _, t := range T {
		c = append(c, binOf(t, h.Lo, h.Width, len(h.Counts))+1)
	}
	return append(c, len(h.Counts))
}

// PeakLevel returns the grey level of the peak of counts[lo:hi]: the vertex
// of a parabola fitted by weighted least squares to the log counts of the
// contiguous bins around the (5-bin smoothed) mode that hold at least half
// its count. For a Gaussian peak the log counts are a parabola whose vertex
// is the mean, so the fit reads the level to a fraction of a bin. ok is
// false when the range holds less than MinLevelFraction of total, or when
// the counts at either end of the range are still above half the maximum
// (the range holds a flank: a peak cut by a threshold, or one that moved
// out).
func PeakLevel(h Hist, lo, hi int, total int64) (float64, bool) {
	lo, hi = max(lo, 0), min(hi, len(h.Counts))
	if hi-lo < 5 || total <= 0 {
		return 0, false
	}
	var mass int64
	for _, c := range h.Counts[lo:hi] {
		mass += c
	}
	if float64(mass) < MinLevelFraction*float64(total) {
		return 0, false
	}
	sm := make([]float64, hi-lo)
	for i := lo; i < hi; i++ {
		var s float64
		n := 0
		for j := max(i-2, lo); j <= min(i+2, hi-1); j++ {
			s += float64(h.Counts[j])
			n++
		}
		sm[i-lo] = s / float64(n)
	}
	m := 0
	for i, v := range sm {
		if v > sm[m] {
			m = i
		}
	}
	if m < 2 || m > len(sm)-3 {
		return 0, false
	}
	half := sm[m] / 2
	a, b := m, m
	for a > 0 && sm[a-1] >= half {
		a--
	}
	for b < len(sm)-1 && sm[b+1] >= half {
		b++
	}
	if a == 0 || b == len(sm)-1 {
		// The range ends above half the maximum: it holds a flank (a
		// peak cut by a threshold, or one that moved out), not a peak.
		return 0, false
	}
	// Weighted least squares of log(count) = c0 + c1·u + c2·u², u in bins
	// from the mode, weights the counts (the variance of a log count is
	// about 1/count).
	var S [5]float64
	var T [3]float64
	for i := a; i <= b; i++ {
		c := float64(h.Counts[lo+i])
		if c <= 0 {
			continue
		}
		u := float64(i - m)
		y := math.Log(c)
		pw := 1.0
		for k := 0; k < 5; k++ {
			S[k] += c * pw
			if k < 3 {
				T[k] += c * pw * y
			}
			pw *= u
		}
	}
	mode := h.Centre(lo + m)
	// Normal equations [S0 S1 S2; S1 S2 S3; S2 S3 S4]·c = T, by Cramer.
	det3 := func(m [3][3]float64) float64 {
		return m[0][0]*(m[1][1]*m[2][2]-m[1][2]*m[2][1]) - m[0][1]*(m[1][0]*m[2][2]-m[1][2]*m[2][0]) + m[0][2]*(m[1][0]*m[2][1]-m[1][1]*m[2][0])
	}
	A := [3][3]float64{{S[0], S[1], S[2]}, {S[1], S[2], S[3]}, {S[2], S[3], S[4]}}
	d := det3(A)
	if b-a < 2 || d == 0 {
		return mode, true
	}
	col := func(j int) float64 {
		B := A
		for r := 0; r < 3; r++ {
			B[r][j] = T[r]
		}
		return det3(B) / d
	}
	c1, c2 := col(1), col(2)
	if !(c2 < 0) {
		return mode, true
	}
	u := -c1 / (2 * c2)
	if u < float64(a-m) || u > float64(b-m) {
		return mode, true
	}
	return mode + u*h.Width, true
}

// Levels measures the grey level of each class of h split at T (PeakLevel
// over each class's bins); nil entries were not measured.
func Levels(h Hist, T []float64) []*float64 {
	c := cuts(h, T)
	total := h.Total()
	out := make([]*float64, len(T)+1)
	for k := range out {
		if v, ok := PeakLevel(h, c[k], c[k+1], total); ok {
			out[k] = &v
		}
	}
	return out
}

// NewCampaignThresholds fixes a campaign's thresholds from the merged
// histogram h of step and the step's own split th (per-step Otsu), or from
// the user's thresholds (Params.Threshold "fixed"). ok is false when a
// first-step source cannot use this step (a class without a level: the step
// holds fewer phases than the campaign); the caller then waits for a later
// step. An error is a refusal: user thresholds outside the data or out of
// order.
func NewCampaignThresholds(h Hist, th Thresholds, p Params, step string, timeS float64) (CampaignThresholds, bool, error) {
	order := classOrder(p)
	ct := CampaignThresholds{Step: step, TimeS: timeS, Order: order, Hist: Hist{DType: h.DType, Lo: h.Lo, Width: h.Width, Counts: h.Counts}}
	if h.DType == volume.Float32.String() {
		ct.Range, ct.Bins = p.Range, p.Bins
	}
	if p.Threshold == "fixed" {
		ct.Source = SourceUser
		if err := checkUserThresholds(h, p.Fixed, len(order)-1); err != nil {
			return ct, false, err
		}
		ct.T = append([]float64(nil), p.Fixed...)
		ct.Split = ct.T
		ct.Levels = Levels(h, ct.T)
		ct.Contrast = contrasts(ct.Levels)
		return ct, true, nil
	}
	ct.Source = SourceFirstStep
	if len(th.T) != len(order)-1 || th.Fluids() != FluidsBoth {
		return ct, false, nil
	}
	ct.Split = append([]float64(nil), th.T...)
	ct.Levels = Levels(h, th.T)
	ct.T = make([]float64, len(th.T))
	for i := range th.T {
		a, b := ct.Levels[i], ct.Levels[i+1]
		if a == nil || b == nil || !(*b > *a) {
			return ct, false, nil
		}
		ct.T[i] = (*a + *b) / 2
	}
	ct.Contrast = contrasts(ct.Levels)
	return ct, true, nil
}

func contrasts(l []*float64) []*float64 {
	out := make([]*float64, len(l)-1)
	for i := range out {
		if l[i] != nil && l[i+1] != nil {
			v := *l[i+1] - *l[i]
			out[i] = &v
		}
	}
	return out
}

// checkUserThresholds refuses user thresholds that are out of order or lie
// outside the occupied grey range of the histogram (a typo, or values of
// another scaling).
func checkUserThresholds(h Hist, T []float64, want int) error {
	if len(T) != want {
		return fmt.Errorf("segment.fixed holds %d thresholds, the campaign needs %d", len(T), want)
	}
	for i, t := range T {
		if math.IsNaN(t) || math.IsInf(t, 0) || (i > 0 && !(t > T[i-1])) {
			return fmt.Errorf("segment.fixed %v must be finite and ascending", T)
		}
	}
	a, b := trim(h.Counts)
	if b <= a {
		return fmt.Errorf("segment.fixed %v: the histogram is empty", T)
	}
	lo, hi := h.Lo+float64(a)*h.Width, h.Lo+float64(b)*h.Width
	for _, t := range T {
		if !(t > lo && t < hi) {
			return fmt.Errorf("segment.fixed threshold %g lies outside the grey range %g…%g of the data", t, lo, hi)
		}
	}
	return nil
}

// Validate refuses a stored record that cannot be used with p: a wrong
// number of thresholds, thresholds out of order, another class order.
func (ct CampaignThresholds) Validate(p Params) error {
	order := classOrder(p)
	if ct.Order != order || len(ct.T) != len(order)-1 || len(ct.Levels) != len(order) {
		return fmt.Errorf("holds %d thresholds for classes %q, the configuration needs %d for %q", len(ct.T), ct.Order, len(order)-1, order)
	}
	for i, t := range ct.T {
		if math.IsNaN(t) || math.IsInf(t, 0) || (i > 0 && !(t > ct.T[i-1])) {
			return fmt.Errorf("thresholds %v are not finite and ascending", ct.T)
		}
	}
	return nil
}

// Follow measures the drift of step histogram h against ct and returns the
// thresholds shifted within the bound (see above).
func (ct CampaignThresholds) Follow(h Hist) ([]float64, Drift) {
	lv := Levels(h, ct.T)
	n := len(lv)
	d := Drift{Levels: lv, Delta: make([]*float64, n), Fraction: make([]*float64, n), Shift: make([]float64, len(ct.T))}
	cmin := math.Inf(1)
	for _, c := range ct.Contrast {
		if c != nil && *c > 0 {
			cmin = math.Min(cmin, *c)
		}
	}
	delta := make([]float64, n)
	have := make([]bool, n)
	for k := range lv {
		if lv[k] == nil || ct.Levels[k] == nil {
			continue
		}
		v := *lv[k] - *ct.Levels[k]
		delta[k], have[k] = v, true
		d.Delta[k] = &v
		if !math.IsInf(cmin, 1) {
			f := v / cmin
			d.Fraction[k] = &f
		}
	}
	T := append([]float64(nil), ct.T...)
	var notes []string
	for i := range ct.T {
		var s float64
		switch {
		case have[i] && have[i+1]:
			s = (delta[i] + delta[i+1]) / 2
		case have[i]:
			s = delta[i]
		case have[i+1]:
			s = delta[i+1]
		default:
			continue
		}
		c := ct.Contrast[i]
		if c == nil || !(*c > 0) {
			continue
		}
		if math.Abs(s) < DriftIgnore**c {
			continue
		}
		if math.Abs(s) > DriftMax**c {
			notes = append(notes, fmt.Sprintf("threshold %d (%c|%c) would move %.0f grey, %.0f %% of the contrast: capped at %.0f %%",
				i+1, ct.Order[i], ct.Order[i+1], s, 100*math.Abs(s) / *c, 100*DriftMax))
			s = math.Copysign(DriftMax**c, s)
			d.Beyond = true
		}
		d.Shift[i] = s
		T[i] += s
	}
	for i := 1; i < len(T); i++ {
		if !(T[i] > T[i-1]) {
			// Shifts cannot cross (each is under a quarter of the
			// contrast), but keep the order whatever happens.
			T[i] = math.Nextafter(T[i-1], math.Inf(1))
		}
	}
	if h.DType == volume.Float32.String() && len(h.Counts) > 1 {
		// Voxels beyond the campaign's float32 range sit in the end bins,
		// where no level can be read.
		if tot := h.Total(); tot > 0 {
			if f := float64(h.Counts[0]+h.Counts[len(h.Counts)-1]) / float64(tot); f > MaxOutOfRange {
				notes = append(notes, fmt.Sprintf("%.2f %% of the voxels lie outside the campaign's float32 range %g…%g", 100*f, h.Lo, h.Lo+float64(len(h.Counts))*h.Width))
				d.Beyond = true
			}
		}
	}
	if len(notes) > 0 {
		d.Note = "grey-level drift beyond the bound: " + strings.Join(notes, "; ")
	}
	return T, d
}

// CampaignStep returns a step's thresholds in scope "campaign". h is the
// step's merged histogram and own its per-step thresholds (ComputeThresholds
// under p). With stored (the campaign's record) nil the step may fix the
// campaign thresholds: the new record is returned (nil while the step holds
// fewer phases than the campaign; the step then keeps its own split and is
// marked pending, as is a step earlier than the one that fixed stored). stored comes back refused in one line when it does not
// fit p.
func CampaignStep(h Hist, own Thresholds, stored *CampaignThresholds, p Params, step string, timeS float64) (Thresholds, *CampaignThresholds, error) {
	var fresh *CampaignThresholds
	if stored != nil && stored.before(step, timeS) {
		// A step before the one that fixed the campaign thresholds.
		own.Campaign = &StepCampaign{Source: stored.Source, Pending: true}
		return own, nil, nil
	}
	if stored == nil {
		ct, ok, err := NewCampaignThresholds(h, own, p, step, timeS)
		if err != nil {
			return Thresholds{}, nil, err
		}
		if !ok {
			own.Campaign = &StepCampaign{Source: ct.Source, Pending: true}
			return own, nil, nil
		}
		fresh, stored = &ct, &ct
	} else if err := stored.Validate(p); err != nil {
		return Thresholds{}, nil, fmt.Errorf("campaign thresholds (from step %s): %w", stored.Step, err)
	}
	T, d := stored.Follow(h)
	q := p
	q.Threshold, q.Fixed, q.Fluids = "fixed", T, FluidsBoth
	th, err := ComputeThresholds(h, q)
	if err != nil {
		return Thresholds{}, nil, err
	}
	th.Method = "campaign"
	th.Phases.Decided = DecidedCampaign
	th.Campaign = &StepCampaign{Source: stored.Source, From: stored.Step, Order: stored.Order, T: append([]float64(nil), stored.T...), Drift: d}
	return th, fresh, nil
}
