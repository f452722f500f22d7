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
// The rule. Otsu's 2-class split of a histogram (Otsu 1979, IEEE Trans. SMC
// 9:62) gives two classes; their robust separation is
// R = (median₁ − median₀) / ((IQR₀ + IQR₁)/2), the contrast of the class
// medians in units of the classes' own interquartile range (a
// contrast-to-noise ratio with robust location and spread). A histogram
// that holds a single phase of Gaussian noise is split by Otsu at its mean
// into two half-normal classes: medians ±0.6745σ, interquartile range
// 0.8317σ each (half-normal quantiles Φ⁻¹(0.75), Φ⁻¹(0.875) − Φ⁻¹(0.625)),
// so R = 1.349/0.8317 = 1.622 whatever the noise. Two well separated
// Gaussian phases of contrast c (in noise units) give R ≈ c/1.349. A
// histogram is taken to hold two phases when R >= MinSeparation.
//
// Why the medians and quartiles and not the class means and standard
// deviations (D = (m1 − m0)/√((s0² + s1²)/2), 2.647 for one Gaussian) or
// Otsu's separability η = σ_B²/σ_T² (2/π for one Gaussian): the scanner blur
// puts partial-volume voxels between each fluid and the rock, a long tail
// that moves means and standard deviations but hardly the quartiles. On
// forward-model scans (phases_test.go) one fluid gave D up to 4.03 against
// 4.49 for two fluids — no room for a rule — but R at most 2.95 against at
// least 4.14. η is no rule either when one phase is a small minority: it
// falls below 2/π even for well separated phases (0.51 at c = 6 with 3 %
// minority, computed for Gaussians). D and η are reported with R.
//
// Limits. Two fluids are seen when Otsu's split finds the minority fluid at
// all (for Gaussian phases: above a minority fraction of about 5 % of the
// histogram at c = 5, 3 % at c = 6, 2 % at c = 8 — computed) and their
// contrast after filtering is at least MinSeparation·1.349 ≈ 4.7 noise
// standard deviations. Below that the step is reported as one fluid (and
// says so); state segment.fluids: both to force the split.
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
	// tell (both fluids kept).
	Decided string `json:"decided"`
	// Splits are the splits tested: the whole histogram and its two sides
	// (single-scan mode) or the pore-space histogram (reference mode).
	Splits []Split `json:"splits,omitempty"`
}

// OneFluid reports whether the step holds one fluid only.
func (p Phases) OneFluid() bool { return p.Fluids == FluidsWetting || p.Fluids == FluidsNonwetting }

// Describe returns one line for logs and text output.
func (p Phases) Describe() string {
	if p.Decided == "undecided" {
		return fmt.Sprintf("both fluids assumed: rock and pore do not separate cleanly in the histogram (separation R %s < %.1f), so it cannot tell whether one fluid is missing", fmtR(p.Splits), MinSeparation)
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
		if !ok || sp.R < MinSeparation {
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
	ph := Phases{Decided: "histogram", Splits: []Split{whole, lo, hi}}
	if lo.R < MinSeparation && hi.R < MinSeparation {
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
	case lo.R >= MinSeparation && hi.R < MinSeparation:
		return [2]int{lo.T, whole.T}, true
	case hi.R >= MinSeparation && lo.R < MinSeparation:
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
