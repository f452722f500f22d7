package measure

// Geometric state (McClure, Armstrong, Berrill, Schlüter, Berg, Gray &
// Miller 2018, Phys. Rev. Fluids 3:084306): the fluid configuration of a
// step described by four Minkowski-type measures of the nonwetting phase
// and the w–n interface — S_w, a_wn = A_wn/V, J_wn and χ_n — which that
// paper relates to each other (a geometric state function) instead of
// relating Pc to S_w alone.
//
// J_wn is the integral of the mean curvature H = (k1 + k2)/2 over the w–n
// interface, J_wn = ∫H dA, in the convention of the Minkowski functional
// M = ∫H dS the project uses (science.md; a ball of radius r: 4πr, so
// J_wn = 4πr·N for N separate nonwetting balls in the wetting phase). The
// normal points out of the nonwetting phase (κ > 0 where it bulges into
// the wetting phase), as for curvature_wn_mean_per_m.
//
// Estimator: J_wn = A_wn · κ̄/2, with A_wn the Crofton area of the w–n
// interface (area_wn_m2) and κ̄ the co-area area-weighted mean total
// curvature (curvature_wn_mean_per_m, package curvature). κ̄ leaves out the
// interface within Options.Curvature.Exclude voxels of the solid, where
// the contact line corrupts it, so J_wn assumes the left-out interface
// has the mean curvature of the rest (the same assumption every image Pc
// makes). Without solid nothing is left out and J_wn integrates the whole
// interface, the concave creases where nonwetting bodies meet included
// (the smoothed level sets round them). Measured (geometric_test.go):
// separate balls −1.0…−1.1 % of 4πr; a Boolean model of balls of radius
// 12 voxels −5 % of the Miles M_V at η = 2, but −30 % at η = 3.5, where
// the wetting phase sits in pores a few voxels across whose curvature the
// smoothed level set reads low. Both factors add over tiles, so J_wn does
// not depend on the tiling.
//
// The specific values divide by the bulk volume of the sample (voxels
// inside the sample), as specific_area_wn_per_m does.

// setGeometricState derives J_wn, its density and χ_n's density from the
// result's area, mean curvature and Euler characteristic. curvature says
// whether the curvature was measured: without it J_wn is null; with it
// and no w–n interface J_wn is 0.
func (r *Result) setGeometricState(curvature bool) {
	if r.BulkVolume > 0 {
		r.SpecificEulerNonwetting = ptr(float64(r.EulerNonwetting) / r.BulkVolume)
	}
	if !curvature {
		return
	}
	var j *float64
	switch {
	case r.AreaWN == 0:
		j = ptr(0)
	case r.CurvMean != nil:
		j = ptr(r.AreaWN * *r.CurvMean / 2)
	}
	if j == nil {
		return
	}
	r.MeanCurvIntegralWN = j
	if r.BulkVolume > 0 {
		r.SpecificMeanCurvWN = ptr(*j / r.BulkVolume)
	}
}
