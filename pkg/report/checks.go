package report

import (
	"fmt"
	"math"
	"sort"

	"sluice/pkg/series"
)

// Status is the outcome of a check.
type Status string

// A check passes, fails, or cannot be evaluated because the series holds
// nothing it applies to (no step with both fluids, no σ …); the last is
// shown with its reason and never counted as a failure or a pass.
const (
	Passed       Status = "passed"
	Failed       Status = "failed"
	NotEvaluated Status = "not evaluated"
)

// Check is one validation result to show. Detail says what was measured;
// for NotEvaluated it is the reason.
type Check struct {
	Name   string
	Status Status
	Detail string
}

// PorosityDrift is the largest relative deviation of a step's porosity
// from the campaign median that passes (common practice: the rock does not
// change during a displacement, so a drifting porosity flags registration
// or segmentation problems).
const PorosityDrift = 0.01

// PcRelTol is the relative tolerance of Pc = σ·κ (Young–Laplace); both
// sides are computed from the same stored numbers, so only rounding
// separates them.
const PcRelTol = 1e-9

// PhysicalChecks are the consistency checks of a series: what must hold
// whatever the fluids do. ift is the campaign's interfacial tension σ in
// N/m (nil: not given). Each check is passed, failed, or not evaluated
// with the reason when the series holds nothing it applies to.
func PhysicalChecks(rows []series.Row, ift *float64) []Check {
	return []Check{
		porosityCheck(rows),
		saturationCheck(rows),
		radiusCheck(rows),
		angleCheck(rows),
		pcCheck(rows, ift),
	}
}

func verdict(ok bool) Status {
	if ok {
		return Passed
	}
	return Failed
}

func porosityCheck(rows []series.Row) Check {
	c := Check{Name: "porosity constant across steps (rock unchanged)"}
	var phis []float64
	for _, r := range rows {
		if r.Porosity != nil {
			phis = append(phis, *r.Porosity)
		}
	}
	if len(phis) < 2 {
		c.Status, c.Detail = NotEvaluated, fmt.Sprintf("needs two steps with a porosity, the series has %d", len(phis))
		return c
	}
	s := append([]float64(nil), phis...)
	sort.Float64s(s)
	med := median(s)
	if !(med > 0) {
		c.Status, c.Detail = Failed, fmt.Sprintf("median porosity %.4f: no pore space", med)
		return c
	}
	worst := 0.0
	for _, v := range phis {
		worst = math.Max(worst, math.Abs(v-med)/med)
	}
	c.Status = verdict(worst <= PorosityDrift)
	c.Detail = fmt.Sprintf("largest relative deviation from the median %.4f over %d steps: %.2f %% (limit %g %%)", med, len(phis), 100*worst, 100*PorosityDrift)
	return c
}

func saturationCheck(rows []series.Row) Check {
	c := Check{Name: "S_w + S_n = 1, both in [0, 1]"}
	bad, n := 0, 0
	for _, r := range rows {
		if r.SatWetting == nil || r.SatNonwetting == nil {
			continue
		}
		n++
		sw, sn := *r.SatWetting, *r.SatNonwetting
		if math.Abs(sw+sn-1) > 1e-9 || sw < 0 || sw > 1 || sn < 0 || sn > 1 {
			bad++
		}
	}
	if n == 0 {
		c.Status, c.Detail = NotEvaluated, "no step has both saturations (no pore space measured)"
		return c
	}
	c.Status = verdict(bad == 0)
	c.Detail = fmt.Sprintf("%d of %d steps with saturations violate it", bad, n)
	return c
}

func radiusCheck(rows []series.Row) Check {
	c := Check{Name: fmt.Sprintf("interface radius of curvature ≥ %d voxels", ResolvedRadius)}
	// Akai et al. 2019: average Pc within 11 % only above 10 voxels. The
	// radius is 2/|κ|·h whatever the sign of κ.
	resolved, withK := 0, 0
	for _, r := range rows {
		if r.CurvMean == nil || *r.CurvMean == 0 || r.VoxelSize == nil || !(*r.VoxelSize > 0) {
			continue
		}
		withK++
		if 2/math.Abs(*r.CurvMean**r.VoxelSize) >= ResolvedRadius {
			resolved++
		}
	}
	if withK == 0 {
		c.Status, c.Detail = NotEvaluated, "no step has a w–n interface with a measured curvature (needs both fluids in one scan)"
		return c
	}
	c.Status = verdict(resolved == withK)
	c.Detail = fmt.Sprintf("%d of %d steps with a w–n interface", resolved, withK)
	return c
}

func angleCheck(rows []series.Row) Check {
	c := Check{Name: "contact angles sampled in every step with a contact line"}
	// A step has a contact line when both fluids touch the rock: the w–s
	// and n–s interfaces meet along it.
	withLine, sampled := 0, 0
	for _, r := range rows {
		if r.AreaWS == nil || r.AreaNS == nil || !(*r.AreaWS > 0) || !(*r.AreaNS > 0) {
			continue
		}
		withLine++
		if r.AngleSamples != nil && *r.AngleSamples > 0 {
			sampled++
		}
	}
	if withLine == 0 {
		c.Status, c.Detail = NotEvaluated, "no step has both fluids touching the rock, so no contact line to sample"
		return c
	}
	c.Status = verdict(sampled == withLine)
	c.Detail = fmt.Sprintf("%d of %d steps where both fluids touch the rock", sampled, withLine)
	return c
}

func pcCheck(rows []series.Row, ift *float64) Check {
	c := Check{Name: "capillary pressure Pc = σ·κ with the campaign's σ (Young–Laplace)"}
	if ift == nil || !(*ift > 0) {
		c.Status, c.Detail = NotEvaluated, "no interfacial tension σ given (ift_n_per_m), so no capillary pressure"
		return c
	}
	bad, n := 0, 0
	for _, r := range rows {
		if r.CurvMean == nil {
			continue
		}
		n++
		if r.Pc == nil || math.Abs(*r.Pc-*ift**r.CurvMean) > PcRelTol*math.Abs(*ift**r.CurvMean) {
			bad++
		}
	}
	if n == 0 {
		c.Status, c.Detail = NotEvaluated, "no step has a w–n interface with a measured curvature (needs both fluids in one scan)"
		return c
	}
	c.Status = verdict(bad == 0)
	c.Detail = fmt.Sprintf("%d of %d steps with a curvature disagree with σ = %.4g mN/m (missing Pc counts as disagreeing)", bad, n, *ift*1e3)
	return c
}

// median of sorted values (mean of the two middle ones for an even count).
func median(sorted []float64) float64 {
	n := len(sorted)
	if n == 0 {
		return math.NaN()
	}
	if n%2 == 1 {
		return sorted[n/2]
	}
	return (sorted[n/2-1] + sorted[n/2]) / 2
}
