package register

import "math"

// MinApplied is the smallest shift component (voxels) a step is resampled
// by: below it the estimate is within its own error band at CNR 5
// (TestRecoversKnownShifts), and interpolating would only smooth the scan.
const MinApplied = 0.05

// Result is a step's registration as its plan carries it.
type Result struct {
	Estimate
	// Applied is the shift the step is resampled by: Shift with every
	// component below MinApplied in magnitude set to 0.
	Applied Shift `json:"applied_zyx_voxels"`
	// Limit is the campaign's register.max_shift (voxels); Beyond is true
	// when a component of Shift exceeds it in magnitude.
	Limit  float64 `json:"limit_voxels"`
	Beyond bool    `json:"beyond_limit"`
}

// Decide turns an estimate into the step's registration under limit.
func Decide(est Estimate, limit float64) Result {
	r := Result{Estimate: est, Applied: est.Shift, Limit: limit, Beyond: est.Shift.Max() > limit}
	for a := range r.Applied {
		if math.Abs(r.Applied[a]) < MinApplied {
			r.Applied[a] = 0
		}
	}
	return r
}
