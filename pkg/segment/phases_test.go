package segment

import (
	"math"
	"testing"
)

// gaussCounts returns a histogram of n bins holding Gaussian phases of
// standard deviation sd bins: means[i] with weights[i] of total voxels.
func gaussCounts(n int, sd float64, total float64, means, weights []float64) []int64 {
	c := make([]int64, n)
	for i := range c {
		var v float64
		for k, m := range means {
			// Mass of bin i: difference of the normal CDF at its edges.
			a := (float64(i) - m) / (sd * math.Sqrt2)
			b := (float64(i+1) - m) / (sd * math.Sqrt2)
			v += weights[k] * total * (math.Erf(b) - math.Erf(a)) / 2
		}
		c[i] = int64(math.Round(v))
	}
	return c
}

// TestOtsuSplitOneGaussian: Otsu's split of one Gaussian phase is at its
// mean and the separation measures take their analytic values.
// Source: half-normal moments and quantiles (mean σ√(2/π), variance
// σ²(1 − 2/π); quartiles Φ⁻¹(0.625)σ, Φ⁻¹(0.875)σ, median Φ⁻¹(0.75)σ):
// η = 2/π = 0.6366, D = 2√(2/π)/√(1 − 2/π) = 2.6472,
// R = 2·0.67449/(1.15035 − 0.31864) = 1.6220. Binning (σ = 20 bins) moves
// them by under 0.2 %; tolerance 0.5 %.
func TestOtsuSplitOneGaussian(t *testing.T) {
	c := gaussCounts(1024, 20, 1e9, []float64{500}, []float64{1})
	sp, ok := OtsuSplit(c, 0, len(c))
	if !ok {
		t.Fatal("no split")
	}
	for name, v := range map[string][2]float64{"eta": {sp.Eta, 2 / math.Pi}, "D": {sp.D, 2.6472}, "R": {sp.R, 1.6220}} {
		if math.Abs(v[0]/v[1]-1) > 0.005 {
			t.Errorf("%s = %.4f, analytic %.4f", name, v[0], v[1])
		}
	}
	if math.Abs(float64(sp.T)+0.5-500) > 1 {
		t.Errorf("split at bin %d, mean 500", sp.T)
	}
	// Far side: a Gaussian has 3.2e-5 beyond 4σ on one side (normal tail).
	if e := farExcess(c, 0, len(c), true); e > 1e-4 {
		t.Errorf("far-side excess of one Gaussian %.2g, want about 3.2e-5", e)
	}
}

// TestDecidePhasesGaussians: reference-mode decisions on pore-space
// histograms of Gaussian phases (contrast 10σ, as nonwetting and brine at
// CNR 5 after a 3×3×3 median): one fluid stays one; both fluids at 50 %
// and at 1 % are found, the 1 % with the split between the peaks (within
// 3σ of their midpoint).
func TestDecidePhasesGaussians(t *testing.T) {
	p := Defaults()
	p.Reference = true
	for _, tc := range []struct {
		name     string
		weights  []float64
		fluids   string
		valleyAt bool
	}{
		{"brine only", []float64{0, 1}, FluidsWetting, false},
		{"half", []float64{0.5, 0.5}, FluidsBoth, false},
		{"one per cent", []float64{0.01, 0.99}, FluidsBoth, true},
		{"0.6 per cent", []float64{0.006, 0.994}, FluidsBoth, true},
	} {
		c := gaussCounts(1024, 15, 1e7, []float64{300, 450}, tc.weights)
		ph := DecidePhases(Hist{Counts: c}, p)
		if ph.Fluids != tc.fluids {
			t.Errorf("%s: decided %s %+v, want %s", tc.name, ph.Fluids, ph.Splits, tc.fluids)
			continue
		}
		if tc.valleyAt {
			if s := ph.Splits[0]; math.Abs(float64(s.T)-375) > 45 {
				t.Errorf("%s: split %+v, want the valley near bin 375", tc.name, s)
			}
		}
	}
}
