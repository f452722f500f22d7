package segment

import (
	"fmt"
	"math"
	"sort"
)

// trim returns the first and one-past-last non-empty bins.
func trim(counts []int64) (int, int) {
	a, b := 0, len(counts)
	for a < b && counts[a] == 0 {
		a++
	}
	for b > a && counts[b-1] == 0 {
		b--
	}
	return a, b
}

// Otsu returns the bin index t maximising the between-class variance
// w₀w₁(μ₀ − μ₁)² of the split {bins <= t} | {bins > t} (Otsu 1979, IEEE Trans.
// SMC 9:62). Empty bins at both ends are ignored; ties go to the lowest t.
func Otsu(counts []int64) (int, error) {
	a, b := trim(counts)
	if b-a < 2 {
		return 0, fmt.Errorf("segment: Otsu needs at least two occupied bins, got %d", b-a)
	}
	var n, m float64
	for i := a; i < b; i++ {
		n += float64(counts[i])
		m += float64(counts[i]) * float64(i)
	}
	best, bt := -1.0, a
	var w0, m0 float64
	for t := a; t < b-1; t++ {
		w0 += float64(counts[t])
		m0 += float64(counts[t]) * float64(t)
		w1 := n - w0
		if w0 == 0 || w1 == 0 {
			continue
		}
		d := m0/w0 - (m-m0)/w1
		v := w0 * w1 * d * d
		if v > best {
			best, bt = v, t
		}
	}
	return bt, nil
}

// Isodata returns the lowest bin t that is a fixed point of Ridler &
// Calvard's iteration (1978, IEEE Trans. SMC 8:630): the mean m of the mean
// of the bins <= t and the mean of the bins > t satisfies
// centre(t) <= m < centre(t) + width, in bin units 0 <= m − t < 1 — the
// criterion of scikit-image's threshold_isodata. Unlike Otsu's threshold,
// the fixed point sits midway between the class means whatever the class
// sizes, the minimum-error split for two classes of equal noise. Empty end
// bins are ignored.
func Isodata(counts []int64) (int, error) {
	a, b := trim(counts)
	if b-a < 2 {
		return 0, fmt.Errorf("segment: isodata needs at least two occupied bins, got %d", b-a)
	}
	var n, m float64
	for i := a; i < b; i++ {
		n += float64(counts[i])
		m += float64(counts[i]) * float64(i)
	}
	var w0, m0 float64
	for t := a; t < b-1; t++ {
		w0 += float64(counts[t])
		m0 += float64(counts[t]) * float64(t)
		mid := (m0/w0 + (m-m0)/(n-w0)) / 2
		if d := mid - float64(t); d >= 0 && d < 1 {
			return t, nil
		}
	}
	return 0, fmt.Errorf("segment: isodata found no fixed point")
}

// MultiOtsu3 returns the bin indices t₀ < t₁ splitting the histogram into
// three classes {<= t₀}, (t₀, t₁], {> t₁} with the largest between-class
// variance, i.e. the largest Σ_k S_k²/P_k (P_k, S_k the zeroth and first
// moments of class k), each class term taken in O(1) from prefix sums as in
// Liao, Chen & Chung 2001 (J. Inf. Sci. Eng. 17:713). All candidate pairs are
// tried; ties go to the lexicographically lowest pair.
//
// Empty end bins are ignored. The arithmetic follows scikit-image 0.19's
// threshold_multiotsu so that both pick the same bins: float32 prefix sums
// of the counts and of index·count (its first-moment sum starts at the count
// of the first bin, and a first class made of the first bin alone scores 0),
// float32 class terms and sums. The maximum is often flat to float32
// precision, so a float64 evaluation can differ by a few bins there.
func MultiOtsu3(counts []int64) (int, int, error) {
	a, b := trim(counts)
	occ := 0
	for i := a; i < b; i++ {
		if counts[i] > 0 {
			occ++
		}
	}
	if occ < 3 {
		return 0, 0, fmt.Errorf("segment: 3-class Otsu needs at least three occupied bins, got %d", occ)
	}
	n := b - a
	P := make([]float32, n)
	S := make([]float32, n)
	P[0], S[0] = float32(counts[a]), float32(counts[a])
	for i := 1; i < n; i++ {
		p := float32(counts[a+i])
		P[i] = P[i-1] + p
		S[i] = S[i-1] + float32(i)*p
	}
	// H(u, v) for the class of bins u..v (inclusive, trimmed indices).
	H := func(u, v int) float32 {
		if u == 0 {
			if v == 0 || !(P[v] > 0) {
				return 0
			}
			return S[v] * S[v] / P[v]
		}
		p := P[v] - P[u-1]
		if !(p > 0) {
			return 0
		}
		s := S[v] - S[u-1]
		return s * s / p
	}
	var best float32
	b0, b1 := 0, 1
	for t0 := 0; t0 < n-2; t0++ {
		for t1 := t0 + 1; t1 < n-1; t1++ {
			v := H(0, t0) + H(t1+1, n-1)
			v += H(t0+1, t1)
			if v > best {
				best, b0, b1 = v, t0, t1
			}
		}
	}
	return a + b0, a + b1, nil
}

// Thresholds are the grey thresholds of one step, the same for every tile.
// A voxel whose filtered value v satisfies v > T[i] lies above threshold i.
type Thresholds struct {
	// T are ascending grey thresholds: two (three classes, darkest to
	// brightest as in Params.Order) or one in reference mode (the two fluids
	// in the order of Params.Order).
	T []float64 `json:"t"`
	// Method is "otsu" or "fixed".
	Method string `json:"method"`
	// SolidGrey is μ_s for the partial-volume correction (0 when off).
	SolidGrey float64 `json:"solid_grey,omitempty"`
	// NonwettingGrey and WettingGrey are μ_n and μ_w for the local-fluid
	// passes (peaks of the fluid classes of the merged histogram; 0 when
	// off).
	NonwettingGrey float64 `json:"nonwetting_grey,omitempty"`
	WettingGrey    float64 `json:"wetting_grey,omitempty"`
	// Sample is the cylinder used (copied from Params).
	Sample Sample `json:"sample"`
	// Phases is the decision on the phases the step holds (see
	// DecidePhases); T holds one threshold fewer per missing fluid. Plans
	// written before the decision existed hold the zero value: both fluids.
	Phases Phases `json:"phases"`
	// Campaign is set in threshold scope "campaign": where the campaign
	// thresholds came from and the drift of this step against them.
	Campaign *StepCampaign `json:"campaign,omitempty"`
}

// StepCampaign records, in a step's thresholds, the campaign thresholds it
// followed and the drift measured.
type StepCampaign struct {
	Source string `json:"source"`
	From   string `json:"from_step"`
	// Order lists the classes of T and of the drift arrays in grey order.
	Order string    `json:"order,omitempty"`
	T     []float64 `json:"t"`
	// Pending is true while no step has fixed the campaign thresholds yet
	// (this step holds fewer phases): the step used its own split.
	Pending bool  `json:"pending,omitempty"`
	Drift   Drift `json:"drift"`
}

// Fluids returns the fluids of the step: FluidsBoth, FluidsWetting or
// FluidsNonwetting.
func (th Thresholds) Fluids() string {
	if th.Phases.Fluids == "" {
		return FluidsBoth
	}
	return th.Phases.Fluids
}

// ComputeThresholds decides how many phases the step holds (DecidePhases)
// and computes the step thresholds from the merged histogram (Threshold
// "otsu": 3-class Otsu, or 2-class Otsu in reference mode; one class fewer
// per missing fluid) or takes them from Params (Threshold "fixed"). Otsu
// thresholds are bin centres, as scikit-image returns them.
func ComputeThresholds(h Hist, p Params) (Thresholds, error) {
	if err := p.Validate(); err != nil {
		return Thresholds{}, err
	}
	ph := DecidePhases(h, p)
	th := Thresholds{Method: p.Threshold, Sample: p.Sample, Phases: ph}
	switch {
	case p.Threshold == "fixed":
		th.T = append([]float64(nil), p.Fixed...)
	case ph.OneFluid() && p.Reference:
		// Every pore voxel holds the one fluid: no threshold.
		th.T = []float64{}
	case ph.OneFluid():
		// Solid and one fluid: Otsu's 2-class threshold.
		t, err := Otsu(h.Counts)
		if err != nil {
			return Thresholds{}, err
		}
		th.T = []float64{h.Centre(t)}
	case p.Reference && len(ph.Splits) == 1 && ph.Splits[0].Valley:
		// A minority fluid found by the far-side test: split at the valley.
		th.T = []float64{h.Centre(ph.Splits[0].T)}
	case p.Threshold == "isodata":
		t, err := Isodata(h.Counts)
		if err != nil {
			return Thresholds{}, err
		}
		th.T = []float64{h.Centre(t)}
	case p.Reference:
		t, err := Otsu(h.Counts)
		if err != nil {
			return Thresholds{}, err
		}
		th.T = []float64{h.Centre(t)}
	default:
		t0, t1, err := MultiOtsu3(h.Counts)
		if err != nil {
			return Thresholds{}, err
		}
		if r, ok := nestedThresholds(h.Counts, ph); ok && !between(h.Counts, r, t0, t1) {
			// 3-class Otsu split a large phase rather than find a small one
			// (e.g. the rock into halves while the pore space holds a few
			// per cent of nonwetting fluid): the nested Otsu splits that
			// found three phases are used instead.
			t0, t1 = r[0], r[1]
		}
		th.T = []float64{h.Centre(t0), h.Centre(t1)}
	}
	order := presentOrder(p, ph.Fluids)
	if len(th.T) != len(order)-1 {
		return Thresholds{}, fmt.Errorf("segment: %d thresholds for the %d classes %q", len(th.T), len(order), order)
	}
	if p.PartialVolume.Blur > 0 {
		th.SolidGrey = p.PartialVolume.SolidGrey
		if th.SolidGrey == 0 {
			// Peak of the solid class: the reference mask's solid voxels, or
			// the bins of the solid class of the 3-class split.
			counts, lo, hi := h.Solid, 0, len(h.Counts)
			if !p.Reference {
				counts = h.Counts
				if order[0] == 's' {
					hi = binOf(th.T[0], h.Lo, h.Width, len(h.Counts)) + 1
				} else {
					lo = binOf(th.T[len(th.T)-1], h.Lo, h.Width, len(h.Counts)) + 1
				}
			}
			peak := peakBin(counts, lo, hi)
			if peak < 0 {
				return Thresholds{}, fmt.Errorf("segment: no solid voxels in the histogram for the partial-volume correction (set partial_volume.solid_grey)")
			}
			th.SolidGrey = h.Centre(peak)
		}
	}
	if p.PartialVolume.LocalFluid > 0 {
		// Peaks of the classes of the split, in grey order. With one fluid
		// both fluid greys are its peak (the local fluid is that fluid).
		cut := []int{0}
		for _, t := range th.T {
			cut = append(cut, binOf(t, h.Lo, h.Width, len(h.Counts))+1)
		}
		cut = append(cut, len(h.Counts))
		for k := 0; k < len(order); k++ {
			peak := peakBin(h.Counts, cut[k], cut[k+1])
			if peak < 0 {
				return Thresholds{}, fmt.Errorf("segment: class %d of the %d-class split is empty; local-fluid passes need the grey of the fluids", k, len(order))
			}
			switch {
			case order[k] == 'n' && ph.OneFluid():
				th.NonwettingGrey, th.WettingGrey = h.Centre(peak), h.Centre(peak)
			case order[k] == 'w' && ph.OneFluid():
				th.NonwettingGrey, th.WettingGrey = h.Centre(peak), h.Centre(peak)
			case order[k] == 'n':
				th.NonwettingGrey = h.Centre(peak)
			case order[k] == 'w':
				th.WettingGrey = h.Centre(peak)
			}
		}
	}
	return th, nil
}

// peakBin returns the fullest bin of counts[lo:hi] (the first of equals), or
// −1 when they are all empty.
func peakBin(counts []int64, lo, hi int) int {
	peak := -1
	for i := max(lo, 0); i < hi && i < len(counts); i++ {
		if counts[i] > 0 && (peak < 0 || counts[i] > counts[peak]) {
			peak = i
		}
	}
	return peak
}

// MinSampleContrast is the smallest ratio between the typical grey-level
// spread of sample blocks and of outside blocks that DetectSample accepts
// as a sample boundary in view.
const MinSampleContrast = 3.0

// MaxOutsideSpread bounds the mean deviation of blocks taken as outside,
// in units of the noise floor (see DetectSample). Measured: 2.5 on a view
// with a wide outside ring, 6 when the linear split cut into a sample that
// filled the view.
const MaxOutsideSpread = 4.0

// otsuValues splits sorted-or-not values by 2-class Otsu with each value
// its own bin; it returns the largest value of the low class and the
// difference of the class means.
func otsuValues(v []float64) (cut, gap float64) {
	sorted := append([]float64(nil), v...)
	sort.Float64s(sorted)
	n := float64(len(sorted))
	var tot float64
	for _, x := range sorted {
		tot += x
	}
	best := -1.0
	cut = sorted[0]
	var w0, m0 float64
	for i := 0; i < len(sorted)-1; i++ {
		w0++
		m0 += sorted[i]
		if sorted[i] == sorted[i+1] {
			continue
		}
		w1 := n - w0
		d := m0/w0 - (tot-m0)/w1
		if q := w0 * w1 * d * d; q > best {
			best, cut, gap = q, sorted[i], -d
		}
	}
	return cut, gap
}

// DetectSample finds the cylindrical sample from the column statistics of a
// merged histogram: the grey standard deviation of each (y, x) block over z is
// large inside the rock (solid and pores alternate) and small in air and in
// the cell wall (noise only). Blocks are split by 2-class Otsu on their
// standard deviations (linear, or log when the linear low class is not
// noise-like); the sample is the disc with the centroid and the area of the
// high-variance blocks, less half a block. The radius is then reduced by
// margin voxels. Accuracy is about half a block. When no outside is in view
// (log classes less than MinSampleContrast apart) the zero Sample (no mask)
// is returned.
func DetectSample(h Hist, p Params, margin float64) (Sample, error) {
	if len(h.Columns) < 4 {
		return Sample{}, fmt.Errorf("segment: too few column blocks (%d) to detect the sample", len(h.Columns))
	}
	sd := make([]float64, len(h.Columns))
	for i, c := range h.Columns {
		if c.N == 0 {
			continue
		}
		m := float64(c.Sum) / float64(c.N)
		sd[i] = math.Sqrt(math.Max(float64(c.SumSq)/float64(c.N)-m*m, 0)) * h.Width
	}
	// Two splits of the block deviations, by 2-class Otsu: on a linear
	// scale (which follows the rim well when a fair share of the view is
	// outside) and on a log scale (outside blocks hold noise only and form a
	// tight cluster far below the sample's, whose wide linear spread is
	// compact on a log scale).
	logs := make([]float64, len(sd))
	for i, v := range sd {
		logs[i] = math.Log(math.Max(v, 1e-9))
	}
	cutLin, _ := otsuValues(sd)
	cutLog, gap := otsuValues(logs)
	// No outside in view: the log classes are not a noise cluster and a
	// sample cluster (means less than MinSampleContrast apart), so every
	// voxel in view belongs to the sample.
	if gap < math.Log(MinSampleContrast) {
		return Sample{}, nil
	}
	// The linear low class must look like noise: when its mean exceeds
	// MaxOutsideSpread times the noise floor (geometric mean of the log low
	// class), the linear split cut through the sample's own spread (little
	// outside in view) and the log split is used.
	var floor, nf, lowLin, nl float64
	for i := range sd {
		if logs[i] <= cutLog {
			floor += logs[i]
			nf++
		}
		if sd[i] <= cutLin {
			lowLin += sd[i]
			nl++
		}
	}
	inside := func(i int) bool { return sd[i] > cutLin }
	if nl > 0 && nf > 0 && lowLin/nl > MaxOutsideSpread*math.Exp(floor/nf) {
		inside = func(i int) bool { return logs[i] > cutLog }
	}
	B := float64(p.SampleBlock)
	var cnt, sy, sx float64
	for i, c := range h.Columns {
		if inside(i) {
			cnt++
			sy += (float64(c.BY) + 0.5) * B
			sx += (float64(c.BX) + 0.5) * B
		}
	}
	if cnt == 0 {
		return Sample{}, fmt.Errorf("segment: no sample found in the column statistics")
	}
	// Blocks cut by the rim mix two populations, so their deviation is high
	// and nearly all count as inside: the counted area is the disc grown by
	// about half a block.
	r := math.Sqrt(cnt*B*B/math.Pi) - B/2 - margin
	if r <= 0 {
		return Sample{}, fmt.Errorf("segment: detected sample radius %g <= margin %g", r+margin, margin)
	}
	// Block centres are at (b + ½)·B in voxel-corner coordinates; voxel
	// centres are integers, so shift by −½.
	return Sample{Y: sy/cnt - 0.5, X: sx/cnt - 0.5, Radius: r}, nil
}
