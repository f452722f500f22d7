package segment

import (
	"fmt"
	"math"
	"strings"
)

// How many phases a step holds
//
// A scan need not hold both fluids: the first scan of a drainage is
// brine-saturated, and a scan may hold one fluid only in its pore space.
// Forcing such a histogram into three classes (or, in reference mode, the
// pore space into two) splits the one fluid peak in halves, and sluice then
// reports a nonwetting saturation near 0.5 or worse (and, in 3-class mode,
// a porosity far off). So before thresholds are taken, the merged histogram
// of the step is tested for the number of phases it holds.
//
// The rule has two tests; a histogram (or side of one) holds two phases
// when either finds them.
//
// Separation. Otsu's 2-class split (Otsu 1979, IEEE Trans. SMC 9:62) gives
// two classes; their robust separation is R = (median₁ − median₀) /
// ((IQR₀ + IQR₁)/2), the contrast of the class medians in units of the
// classes' own interquartile range (a contrast-to-noise ratio with robust
// location and spread). One phase of Gaussian noise is split by Otsu at its
// mean into two half-normal classes: medians ±0.6745σ, interquartile range
// 0.8317σ each (half-normal quantiles), so R = 1.622 whatever the noise.
// Two well separated Gaussian phases of contrast c (noise units) give
// R ≈ c/1.349. Test: R >= MinSeparation. Medians and quartiles rather than
// means and standard deviations (D, 2.647 for one Gaussian) or Otsu's
// separability η = σ_B²/σ_T² (2/π for one Gaussian) because the scanner
// blur gives each fluid a partial-volume tail towards the rock that moves
// means and deviations but hardly the quartiles (measured on forward-model
// scans: D up to 4.03 for one fluid, 4.49 for two; R at most 2.95 and at
// least 4.14), and because η falls below 2/π for a small minority even when
// it is well separated. D and η are reported.
//
// Far side. Otsu's split does not find a minority phase of a few per cent
// (it cuts the main peak near its mean instead), and on poorly resolved
// scans (pores a few voxels wide) R of two fluids falls to 2.8. But the
// partial-volume tail runs from a fluid towards the rock only: on the side
// of the main peak away from the rock, one phase has a Gaussian flank.
// farExcess measures the fraction of voxels beyond FarSigmas·σ on that side
// (σ from the half width at half maximum there; 3.2e-5 for a Gaussian).
// Test: excess >= MinExcess. The split is then put at the valley between
// the main peak and the minority's peak (Split.Valley).
//
// Limits. A second fluid darker than the main one (nonwetting in brine,
// order "nws") is found down to about MinExcess = 0.5 % of the side's
// voxels once its grey lies beyond 4σ of the main peak; one on the rock
// side of the main peak (brine in an oil-filled scan) only by R, i.e. when
// Otsu's split finds it and its contrast is at least ≈ 4.7σ. When rock and
// pore themselves do not separate (R of the whole split below
// MinSeparation) nothing is decided and three phases are kept.
//
// Single-scan mode: the whole histogram is split by Otsu into two sides;
// when that split itself is not clean (R < MinSeparation: pores only a few
// voxels wide, everything partial volume) nothing is decided and the three
// phases are kept. Otherwise each side is tested as above. Neither side holding two phases means the
// step holds the solid and one fluid. Otherwise it holds three phases and
// the 3-class Otsu thresholds are used. Reference mode: the solid comes from
// the reference mask; the pore-space histogram of the step is tested. In
// both modes the test runs on the merged histogram of the step, so it is
// the same for every tiling (tile histograms add exactly).
//
// Which fluid a one-fluid step holds cannot be told from its histogram
// alone (no absolute grey scale): Params.Fluids states it; "auto" takes it
// for the wetting phase, as in the brine-saturated first scan of a
// drainage, and the step result says so.

// MinSeparation is the smallest robust separation R of Otsu's 2-class
// split at which a histogram is taken to hold two phases. One Gaussian
// phase gives 1.622 (analytic, see above). Measured on forward-model scans
// of the demo's rock (CNR 5, blur 0.7 voxel, 3×3×3 median;
// TestPhasesDecided): one fluid with its partial-volume tail at most 2.95,
// two fluids at least 4.14; 3.5 lies near their geometric mean.
const MinSeparation = 3.5

// Fluid choices of Params.Fluids.
const (
	FluidsAuto       = "auto"
	FluidsBoth       = "both"
	FluidsWetting    = "wetting"
	FluidsNonwetting = "nonwetting"
)

// Split is Otsu's 2-class split of part of a histogram and how well it
// separates the two classes.
type Split struct {
	// T is the last bin of the low class.
	T int `json:"t"`
	// Eta is Otsu's separability σ_B²/σ_T².
	Eta float64 `json:"eta"`
	// D is the separation (m1 − m0)/√((s0² + s1²)/2) of the class means.
	D float64 `json:"d"`
	// R is the robust separation: distance of the class medians over the
	// mean interquartile range of the classes.
	R float64 `json:"r"`
	// Excess is the fraction of the counts lying more than FarSigmas noise
	// standard deviations beyond the mode on the side away from the rock
	// (see farExcess); −1 when not tested.
	Excess float64 `json:"excess"`
	// Valley is true when T was moved from Otsu's split to the valley
	// between the main peak and a minority phase found by the far-side test
	// alone (Otsu's split cut the main peak there, not the minority off).
	Valley bool `json:"valley,omitempty"`
}

// twoPhases reports whether the split holds two phases by the rule.
func (s Split) twoPhases() bool { return s.R >= MinSeparation || s.Excess >= MinExcess }

// FarSigmas and MinExcess: the far-side test. A Gaussian phase holds
// 3.2e-5 of its voxels beyond 4σ on one side (normal tail); a histogram side
// with more than MinExcess of its voxels there holds a second phase.
// The partial-volume tail runs from each fluid towards the rock only, so
// the side away from the rock is clean for one fluid. Measured on
// forward-model scans (TestPhasesDecided, 96³, CNR 5): one fluid at most
// 7.1e-5; S_n 0.008 of the pore space gave 0.0094.
const (
	FarSigmas = 4.0
	MinExcess = 0.005
)

// farExcess returns the fraction of counts[lo:hi] lying more than FarSigmas
// σ below (down) or above the mode, σ from the half width at half maximum
// on that side (σ = HWHM/1.1774, Gaussian). Counts are smoothed over 5 bins
// to find the mode and the half maximum.
func farExcess(counts []int64, lo, hi int, down bool) float64 {
	f, _ := farTest(counts, lo, hi, down)
	return f
}

// withFar sets sp.Excess for counts[lo:hi] and, when only the far-side
// test finds a second phase, moves sp.T to the valley.
func withFar(sp Split, counts []int64, lo, hi int, down bool) Split {
	f, valley := farTest(counts, lo, hi, down)
	sp.Excess = f
	if sp.R < MinSeparation && f >= MinExcess && valley >= 0 {
		sp.T, sp.Valley = valley, true
	}
	return sp
}

// farTest returns farExcess and the valley bin: the emptiest smoothed bin
// between the mode and the fullest smoothed bin of the far region (−1
// without a far region). Bins <= the valley form the lower class.
func farTest(counts []int64, lo, hi int, down bool) (float64, int) {
	lo, hi = max(lo, 0), min(hi, len(counts))
	if hi-lo < 3 {
		return 0, -1
	}
	sm := make([]float64, hi-lo)
	var total float64
	for i := lo; i < hi; i++ {
		total += float64(counts[i])
		var s float64
		var k int
		for j := max(i-2, lo); j <= min(i+2, hi-1); j++ {
			s += float64(counts[j])
			k++
		}
		sm[i-lo] = s / float64(k)
	}
	if total == 0 {
		return 0, -1
	}
	mode := 0
	for i, v := range sm {
		if v > sm[mode] {
			mode = i
		}
	}
	step := 1
	if down {
		step = -1
	}
	half := sm[mode] / 2
	h := -1.0
	for i := mode + step; i >= 0 && i < len(sm); i += step {
		if sm[i] <= half {
			// Interpolate between i − step and i.
			a, b := sm[i-step], sm[i]
			h = float64((i-mode)*step) - 1 + (a-half)/(a-b)
			break
		}
	}
	if h <= 0 {
		return 0, -1 // the mode sits at the end of the side
	}
	cut := float64(mode) + float64(step)*FarSigmas*h/1.1774
	var far float64
	farMode := -1
	for i := range sm {
		if (down && float64(i) < cut) || (!down && float64(i) > cut) {
			far += float64(counts[lo+i])
			if farMode < 0 || sm[i] > sm[farMode] {
				farMode = i
			}
		}
	}
	if farMode < 0 {
		return far / total, -1
	}
	a, b := min(farMode, mode), max(farMode, mode)
	v := a
	for i := a; i <= b; i++ {
		if sm[i] < sm[v] {
			v = i
		}
	}
	if !down {
		v-- // the valley bin joins the upper (far) class
	}
	return far / total, lo + v
}

// OtsuSplit returns Otsu's 2-class split of counts[lo:hi] with its
// separability η and separations D and R (see the notes in phases.go);
// ok is false when fewer than two bins are occupied.
func OtsuSplit(counts []int64, lo, hi int) (Split, bool) {
	lo, hi = max(lo, 0), min(hi, len(counts))
	if hi-lo < 2 {
		return Split{}, false
	}
	a, b := trim(counts[lo:hi])
	a, b = a+lo, b+lo
	occ := 0
	for i := a; i < b; i++ {
		if counts[i] > 0 {
			occ++
		}
	}
	if occ < 2 {
		return Split{}, false
	}
	t, err := Otsu(counts[a:b])
	if err != nil {
		return Split{}, false
	}
	t += a
	var n0, s0, q0, n1, s1, q1 float64
	for i := a; i < b; i++ {
		c, x := float64(counts[i]), float64(i)
		if i <= t {
			n0, s0, q0 = n0+c, s0+c*x, q0+c*x*x
		} else {
			n1, s1, q1 = n1+c, s1+c*x, q1+c*x*x
		}
	}
	m0, m1 := s0/n0, s1/n1
	v0, v1 := math.Max(q0/n0-m0*m0, 0), math.Max(q1/n1-m1*m1, 0)
	n := n0 + n1
	m := (s0 + s1) / n
	vt := (q0+q1)/n - m*m
	sp := Split{T: t}
	q := func(from, to int, n float64, f float64) float64 {
		var c float64
		for i := from; i < to; i++ {
			c += float64(counts[i])
			if c >= f*n {
				// Interpolate within the bin.
				return float64(i) + 1 - (c-f*n)/float64(counts[i])
			}
		}
		return float64(to)
	}
	md0, md1 := q(a, t+1, n0, 0.5), q(t+1, b, n1, 0.5)
	iqr := (q(a, t+1, n0, 0.75) - q(a, t+1, n0, 0.25) + q(t+1, b, n1, 0.75) - q(t+1, b, n1, 0.25)) / 2
	if iqr > 0 {
		sp.R = (md1 - md0) / iqr
	}
	if vt > 0 {
		sp.Eta = n0 * n1 / (n * n) * (m1 - m0) * (m1 - m0) / vt
	}
	if v := (v0 + v1) / 2; v > 0 {
		sp.D = (m1 - m0) / math.Sqrt(v)
	} else {
		sp.D = math.Inf(1)
	}
	return sp, true
}

// Phases is the decision on the phases a step holds.
type Phases struct {
	// N is the number of phases in the segmented region: 3 or 2 in
	// single-scan mode (solid and one or two fluids), 2 or 1 fluids in the
	// pore space in reference mode.
	N int `json:"n"`
	// Fluids is FluidsBoth, FluidsWetting or FluidsNonwetting.
	Fluids string `json:"fluids"`
	// Decided is "histogram" when the test decided, "config" when
	// Params.Fluids stated it, "undecided" when the histogram could not
	// tell (both fluids kept), "campaign" (DecidedCampaign) for campaign
	// thresholds.
	Decided string `json:"decided"`
	// Splits are the splits tested: the whole histogram and its two sides
	// (single-scan mode) or the pore-space histogram (reference mode).
	Splits []Split `json:"splits,omitempty"`
}

// InScan returns the number of phases in the sample: 3 (rock and both
// fluids) or 2 (rock and one fluid).
func (p Phases) InScan() int {
	if p.OneFluid() {
		return 2
	}
	return 3
}

// OneFluid reports whether the step holds one fluid only.
func (p Phases) OneFluid() bool { return p.Fluids == FluidsWetting || p.Fluids == FluidsNonwetting }

// Describe returns one line for logs and text output.
func (p Phases) Describe() string {
	if p.Decided == "undecided" {
		return fmt.Sprintf("both fluids assumed: rock and pore do not separate cleanly in the histogram (separation R %s < %.1f), so it cannot tell whether one fluid is missing", fmtR(p.Splits), MinSeparation)
	}
	if p.Decided == DecidedCampaign {
		return "campaign thresholds: the rock and both fluid classes are segmented whatever this step holds"
	}
	if !p.OneFluid() {
		return fmt.Sprintf("both fluids present (%s)", p.Decided)
	}
	how := "stated in the configuration (segment.fluids)"
	if p.Decided == "histogram" {
		sides := p.Splits
		if len(sides) == 3 {
			sides = sides[1:] // the two sides of the whole split
		}
		how = fmt.Sprintf("the histogram shows one fluid (separation R %s < %.1f); taken as %s, set segment.fluids to state it", fmtR(sides), MinSeparation, p.Fluids)
	}
	return fmt.Sprintf("only the %s fluid present: %s", p.Fluids, how)
}

func fmtR(s []Split) string {
	var b strings.Builder
	for i, x := range s {
		if i > 0 {
			b.WriteString("/")
		}
		fmt.Fprintf(&b, "%.2f", x.R)
	}
	return b.String()
}

// DecidePhases tests the merged histogram of a step for the phases it holds
// (see the notes at the top of phases.go). With Params.Fluids other than
// auto the configuration decides.
func DecidePhases(h Hist, p Params) Phases {
	f := p.Fluids
	if f == "" {
		f = FluidsAuto
	}
	if f == FluidsAuto && p.Threshold == "fixed" {
		// Fixed thresholds for three classes (two fluids in reference
		// mode) state both fluids.
		f = FluidsBoth
	}
	if f != FluidsAuto {
		n := 3
		if f != FluidsBoth {
			n = 2
		}
		if p.Reference {
			n--
		}
		return Phases{N: n, Fluids: f, Decided: "config"}
	}
	if p.Reference {
		sp, ok := OtsuSplit(h.Counts, 0, len(h.Counts))
		// The side away from the rock: below the fluids when the rock is
		// brightest, above when it is darkest; none when it lies between.
		sp.Excess = -1
		switch {
		case p.Order[2] == 's':
			sp = withFar(sp, h.Counts, 0, len(h.Counts), true)
		case p.Order[0] == 's':
			sp = withFar(sp, h.Counts, 0, len(h.Counts), false)
		}
		if !ok || !sp.twoPhases() {
			return Phases{N: 1, Fluids: FluidsWetting, Decided: "histogram", Splits: []Split{sp}}
		}
		return Phases{N: 2, Fluids: FluidsBoth, Decided: "histogram", Splits: []Split{sp}}
	}
	whole, ok := OtsuSplit(h.Counts, 0, len(h.Counts))
	if !ok || whole.R < MinSeparation {
		// Not even rock and pore separate cleanly (pores a few voxels
		// wide, all partial volume): the test has nothing to go on, and
		// the stated three phases are kept.
		return Phases{N: 3, Fluids: FluidsBoth, Decided: "undecided", Splits: []Split{whole}}
	}
	lo, _ := OtsuSplit(h.Counts, 0, whole.T+1)
	hi, _ := OtsuSplit(h.Counts, whole.T+1, len(h.Counts))
	// Each side's far side is the one away from the other side.
	whole.Excess = -1
	lo = withFar(lo, h.Counts, 0, whole.T+1, true)
	hi = withFar(hi, h.Counts, whole.T+1, len(h.Counts), false)
	ph := Phases{Decided: "histogram", Splits: []Split{whole, lo, hi}}
	if !lo.twoPhases() && !hi.twoPhases() {
		ph.N, ph.Fluids = 2, FluidsWetting
	} else {
		ph.N, ph.Fluids = 3, FluidsBoth
	}
	return ph
}

// presentOrder returns p.Order without the phases the step lacks (and
// without the solid in reference mode): the classes darkest first.
func presentOrder(p Params, fluids string) string {
	o := p.Order
	if p.Reference {
		o = strings.ReplaceAll(o, "s", "")
	}
	switch fluids {
	case FluidsWetting:
		o = strings.ReplaceAll(o, "n", "")
	case FluidsNonwetting:
		o = strings.ReplaceAll(o, "w", "")
	}
	return o
}

// nestedThresholds returns the two thresholds (bins) of the nested Otsu
// splits that found three phases: the split of the whole histogram and the
// split of the one side that holds two phases. ok is false when the
// histogram decided otherwise or both sides hold two phases.
func nestedThresholds(counts []int64, ph Phases) ([2]int, bool) {
	if ph.Decided != "histogram" || ph.N != 3 || len(ph.Splits) != 3 {
		return [2]int{}, false
	}
	whole, lo, hi := ph.Splits[0], ph.Splits[1], ph.Splits[2]
	switch {
	case lo.twoPhases() && !hi.twoPhases():
		return [2]int{lo.T, whole.T}, true
	case hi.twoPhases() && !lo.twoPhases():
		return [2]int{whole.T, hi.T}, true
	}
	return [2]int{}, false
}

// between reports whether the 3-class thresholds t0 < t1 separate the same
// three classes as the nested thresholds r: each lies between the means of
// the two nested classes it divides.
func between(counts []int64, r [2]int, t0, t1 int) bool {
	mean := func(a, b int) float64 {
		var n, s float64
		for i := max(a, 0); i < b && i < len(counts); i++ {
			n += float64(counts[i])
			s += float64(counts[i]) * float64(i)
		}
		if n == 0 {
			return math.NaN()
		}
		return s / n
	}
	m0, m1, m2 := mean(0, r[0]+1), mean(r[0]+1, r[1]+1), mean(r[1]+1, len(counts))
	f0, f1 := float64(t0), float64(t1)
	return m0 <= f0 && f0 < m1 && m1 <= f1 && f1 < m2
}
