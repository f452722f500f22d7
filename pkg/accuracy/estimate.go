package accuracy

import (
	"fmt"
	"math"
	"slices"

	"sluice/pkg/distance"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// ScanEstimate is what a campaign's own scan says about its image quality:
// the grey level of each phase, the noise and the blur.
type ScanEstimate struct {
	// Grey levels: medians of the phase interiors (voxels farther than
	// Margin from any other phase). NaN when a phase has no interior.
	Solid      float64 `json:"grey_solid"`
	Wetting    float64 `json:"grey_wetting"`
	Nonwetting float64 `json:"grey_nonwetting"`
	// Noise is σ of the grey values inside the solid interior, robust:
	// 1.4826 × the median absolute deviation. NoiseWetting and
	// NoiseNonwetting are the same inside the fluid interiors (NaN without
	// one; null with fewer than 100 voxels), for comparison.
	Noise           float64  `json:"noise_sigma"`
	NoiseWetting    *float64 `json:"noise_sigma_wetting"`
	NoiseNonwetting *float64 `json:"noise_sigma_nonwetting"`
	NoiseVoxels     int      `json:"noise_voxels"`
	// Blur is the σ (voxels) of a Gaussian point-spread function fitted to
	// the edge-spread function at the solid surface; EdgeOffset the fitted
	// position of the edge against the mask's surface (voxels, + into the
	// solid); EdgeVoxels the voxels that entered the fit; EdgeRMS the
	// root-mean-square residual of the binned profile (normalised grey).
	Blur       float64 `json:"blur_sigma_voxels"`
	EdgeOffset float64 `json:"edge_offset_voxels"`
	EdgeVoxels int     `json:"edge_voxels"`
	EdgeRMS    float64 `json:"edge_rms"`
	// Margin is the interior margin used for levels and noise (voxels).
	Margin float64 `json:"interior_margin_voxels"`
}

// edgeReach bounds the signed distances (voxels) that enter the
// edge-spread fit on each side of the solid surface.
const edgeReach = 5.0

// Estimate measures grey levels, noise and blur of grey against its labels
// lab (same box; solid, wetting, nonwetting codes; phase.Outside voxels are
// ignored).
//
// Method (common practice for CT image quality; our own formulation):
//   - blur: the edge-spread function. Every voxel within edgeReach of the
//     solid surface, on the solid side or in one fluid that has none of the
//     other fluid within edgeReach+1 voxels, gets its signed distance s to the
//     mask's surface (exact EDT, ±(√d² − ½), + in the solid) and its grey
//     normalised as (g − μ_f)/(μ_s − μ_f), μ_f the level of the fluid beside
//     it. The binned means (bins of 0.25 voxel) are fitted, least squares
//     weighted by counts, with Φ((s − s0)/b), the profile of a plane edge
//     blurred by a Gaussian of σ b (Φ the normal CDF). The fit is by a grid
//     search over b in [0, 4] and s0 in [−1.5, 1.5], refined to 0.002.
//   - noise: 1.4826 × MAD of the grey inside the solid farther than
//     max(3, ⌈3b⌉ + 1) voxels from the pore space. A real rock's mineral
//     texture adds to it, so it is an upper bound of the reconstruction
//     noise.
//   - levels: medians of each phase's interior (same margin).
func Estimate(grey volume.Any, lab *volume.Labels, codes phase.Codes) (ScanEstimate, error) {
	if grey.Bounds() != lab.Box {
		return ScanEstimate{}, fmt.Errorf("accuracy: grey box %v and labels box %v differ", grey.Bounds(), lab.Box)
	}
	g := volume.Float(grey)
	shape := lab.Box.Size()
	n := len(lab.Pix)
	mk := func(f func(v uint8) bool) []bool {
		m := make([]bool, n)
		for i, v := range lab.Pix {
			m[i] = f(v)
		}
		return m
	}
	isSolid := func(v uint8) bool { return v == codes.Solid }
	isW := func(v uint8) bool { return v == codes.Wetting }
	isN := func(v uint8) bool { return v == codes.Nonwetting }
	isPore := func(v uint8) bool { return isW(v) || isN(v) }
	dToSolid := distance.SquaredToMask(mk(isSolid), shape)
	dToPore := distance.SquaredToMask(mk(isPore), shape)
	dToW := distance.SquaredToMask(mk(isW), shape)
	dToN := distance.SquaredToMask(mk(isN), shape)
	// The wall of the volume is not a phase boundary; but voxels near it
	// are fine: EDT treats beyond-the-box as empty.

	// Levels with a first margin of 3 voxels.
	level := func(in func(v uint8) bool, margin float64, others ...[]float64) (float64, []float64) {
		var vals []float64
		m2 := margin * margin
		for i, v := range lab.Pix {
			if !in(v) {
				continue
			}
			ok := true
			for _, d := range others {
				if d[i] < m2 {
					ok = false
					break
				}
			}
			if ok {
				vals = append(vals, float64(g.Pix[i]))
			}
		}
		if len(vals) == 0 {
			return math.NaN(), nil
		}
		return median(vals), vals
	}
	// Levels and the edge fit, twice: the second time with the levels
	// taken max(3, ⌈3b⌉ + 1) voxels from the other phases, b the first
	// fit (a wide blur reaches past 3 voxels).
	var est ScanEstimate
	est.Margin = 3
	for pass := 0; pass < 2; pass++ {
		if err := est.fit(g, lab, codes, est.Margin, dToSolid, dToPore, dToW, dToN, level); err != nil {
			return est, err
		}
		m := math.Max(3, math.Ceil(3*est.Blur)+1)
		if m == est.Margin {
			break
		}
		est.Margin = m
	}
	// Noise inside the solid, away from the blurred edge.
	est.Margin = math.Max(3, math.Ceil(3*est.Blur)+1)
	var vals []float64
	_, vals = level(isSolid, est.Margin, dToPore)
	if len(vals) < 100 {
		return est, fmt.Errorf("accuracy: only %d solid voxels %g voxels from the pore space: too few for the noise", len(vals), est.Margin)
	}
	est.Noise = mad(vals)
	est.NoiseVoxels = len(vals)
	if _, v := level(isW, est.Margin, dToSolid, dToN); len(v) >= 100 {
		est.NoiseWetting = ptr(mad(v))
	}
	if _, v := level(isN, est.Margin, dToSolid, dToW); len(v) >= 100 {
		est.NoiseNonwetting = ptr(mad(v))
	}
	return est, nil
}

// fitEdge fits y ≈ Φ((x − s0)/b) by weighted least squares: a grid
// search, then two refinements around the best point. b = 0 is a step at
// s0.
func fitEdge(xs, ys, ws []float64) (b, s0, rms float64) {
	cost := func(b, s0 float64) float64 {
		var c, wsum float64
		for i, x := range xs {
			var m float64
			if b <= 0 {
				switch {
				case x > s0:
					m = 1
				case x == s0:
					m = 0.5
				}
			} else {
				m = 0.5 * math.Erfc(-(x-s0)/(b*math.Sqrt2))
			}
			d := ys[i] - m
			c += ws[i] * d * d
			wsum += ws[i]
		}
		return c / wsum
	}
	best := math.Inf(1)
	search := func(b0, b1, db, s00, s01, ds float64) {
		for bb := b0; bb <= b1+1e-12; bb += db {
			if bb < 0 {
				continue
			}
			for ss := s00; ss <= s01+1e-12; ss += ds {
				if c := cost(bb, ss); c < best {
					best, b, s0 = c, bb, ss
				}
			}
		}
	}
	search(0, 4, 0.05, -1.5, 1.5, 0.05)
	search(b-0.05, b+0.05, 0.01, s0-0.05, s0+0.05, 0.01)
	search(b-0.01, b+0.01, 0.002, s0-0.01, s0+0.01, 0.002)
	return b, s0, math.Sqrt(best)
}

func median(v []float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}

// mad returns 1.4826 × the median absolute deviation from the median: σ of
// a normal distribution, robust to outliers (Hampel 1974, J. Am. Stat.
// Assoc. 69:383; the factor is 1/Φ⁻¹(3/4)).
func mad(v []float64) float64 {
	m := median(v)
	d := make([]float64, len(v))
	for i, x := range v {
		d[i] = math.Abs(x - m)
	}
	return 1.482602218505602 * median(d)
}

// fit sets the levels (interior margin) and the edge-spread fit of est.
func (est *ScanEstimate) fit(g *volume.Volume[float32], lab *volume.Labels, codes phase.Codes, margin float64, dToSolid, dToPore, dToW, dToN []float64,
	level func(in func(v uint8) bool, margin float64, others ...[]float64) (float64, []float64)) error {
	isSolid := func(v uint8) bool { return v == codes.Solid }
	isW := func(v uint8) bool { return v == codes.Wetting }
	isN := func(v uint8) bool { return v == codes.Nonwetting }
	est.Solid, _ = level(isSolid, margin, dToPore)
	est.Wetting, _ = level(isW, margin, dToSolid, dToN)
	est.Nonwetting, _ = level(isN, margin, dToSolid, dToW)
	if math.IsNaN(est.Solid) {
		return fmt.Errorf("accuracy: no solid interior (%g voxels from the pore space) in the region: noise and blur cannot be estimated", margin)
	}
	if math.IsNaN(est.Wetting) && math.IsNaN(est.Nonwetting) {
		return fmt.Errorf("accuracy: no fluid interior (%g voxels from the solid and the other fluid) in the region", margin)
	}

	// Edge-spread function.
	const binW = 0.25
	edgeN := 0
	nb := int(2 * edgeReach / binW)
	sum := make([]float64, nb)
	cnt := make([]float64, nb)
	far := (edgeReach + 1) * (edgeReach + 1)
	r2 := (edgeReach + 0.5) * (edgeReach + 0.5)
	for i, v := range lab.Pix {
		var s, muF float64
		switch {
		case isSolid(v):
			if dToPore[i] > r2 {
				continue
			}
			s = math.Sqrt(dToPore[i]) - 0.5
			// The fluid beside it: the one present near it.
			nearW, nearN := dToW[i] <= far, dToN[i] <= far
			switch {
			case nearW && !nearN && !math.IsNaN(est.Wetting):
				muF = est.Wetting
			case nearN && !nearW && !math.IsNaN(est.Nonwetting):
				muF = est.Nonwetting
			default:
				continue
			}
		case isW(v), isN(v):
			if dToSolid[i] > r2 {
				continue
			}
			s = -(math.Sqrt(dToSolid[i]) - 0.5)
			other, mu := dToN, est.Wetting
			if isN(v) {
				other, mu = dToW, est.Nonwetting
			}
			if other[i] <= far || math.IsNaN(mu) {
				continue
			}
			muF = mu
		default:
			continue
		}
		den := est.Solid - muF
		if math.Abs(den) < 1e-12 {
			continue
		}
		b := int((s + edgeReach) / binW)
		if b < 0 || b >= nb {
			continue
		}
		sum[b] += (float64(g.Pix[i]) - muF) / den
		cnt[b]++
		edgeN++
	}
	est.EdgeVoxels = edgeN
	if edgeN < 100 {
		return fmt.Errorf("accuracy: only %d voxels at the solid surface next to one fluid: too few for the edge-spread fit", est.EdgeVoxels)
	}
	var xs, ys, ws []float64
	for b := range sum {
		if cnt[b] > 0 {
			xs = append(xs, -edgeReach+(float64(b)+0.5)*binW)
			ys = append(ys, sum[b]/cnt[b])
			ws = append(ws, cnt[b])
		}
	}
	est.Blur, est.EdgeOffset, est.EdgeRMS = fitEdge(xs, ys, ws)

	return nil
}
