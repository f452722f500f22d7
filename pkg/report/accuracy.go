package report

import (
	"encoding/json"
	"fmt"
	"strconv"

	"sluice/pkg/series"
)

// accuracyStat is one {bias, spread, n} of the stored accuracy estimate.
type accuracyStat struct {
	Bias   *float64 `json:"bias"`
	Spread *float64 `json:"spread"`
	N      int      `json:"n"`
}

type accuracyPath struct {
	Sw    accuracyStat `json:"saturation_wetting_abs"`
	Awn   accuracyStat `json:"specific_area_wn_rel"`
	Pc    accuracyStat `json:"capillary_pressure_rel"`
	Angle accuracyStat `json:"contact_angle_deg"`
}

type accuracyQ struct {
	Truth  *float64 `json:"truth"`
	Labels *float64 `json:"labels"`
	Grey   *float64 `json:"grey"`
}

// Accuracy is the accuracy estimate of `sluice accuracy` as stored at
// runs/<hash>/accuracy.json (keys documented in DEVELOPERS.md); decode it
// with DecodeAccuracy. The report shows it next to the measured series.
type Accuracy struct {
	Step        string  `json:"step"`
	ParamHash   string  `json:"param_hash"`
	RegionMin   [3]int  `json:"region_min_zyx"`
	RegionShape [3]int  `json:"region_shape_zyx"`
	IFT         float64 `json:"ift_n_per_m"`
	Theta       float64 `json:"theta_prescribed_deg"`
	MinRadius   float64 `json:"min_radius_voxels"`
	Scan        struct {
		Solid      float64 `json:"grey_solid"`
		Wetting    float64 `json:"grey_wetting"`
		Nonwetting float64 `json:"grey_nonwetting"`
		Noise      float64 `json:"noise_sigma"`
		Blur       float64 `json:"blur_sigma_voxels"`
	} `json:"scan"`
	CNR    float64 `json:"cnr"`
	States []struct {
		Kappa        float64   `json:"curvature_prescribed_per_m"`
		PcSet        *float64  `json:"capillary_pressure_prescribed_pa"`
		CornerRadius float64   `json:"corner_radius_voxels"`
		Converged    bool      `json:"relaxation_converged"`
		SatNonwet    float64   `json:"saturation_nonwetting_true"`
		Skipped      string    `json:"skipped"`
		Sw           accuracyQ `json:"saturation_wetting"`
		Awn          accuracyQ `json:"specific_area_wn_per_m"`
		Curv         accuracyQ `json:"curvature_wn_mean_per_m"`
		Angle        accuracyQ `json:"contact_angle_mean_deg"`
	} `json:"states"`
	Labels    accuracyPath `json:"labels_path"`
	Grey      accuracyPath `json:"grey_path"`
	Notes     []string     `json:"notes"`
	CreatedAt string       `json:"created_at"`
	Version   string       `json:"software_version"`
	// Current is the campaign's current parameter hash (set by the
	// caller): an estimate made under another hash is marked stale.
	Current string `json:"-"`
}

// DecodeAccuracy reads a stored accuracy estimate.
func DecodeAccuracy(b []byte) (*Accuracy, error) {
	var a Accuracy
	if err := json.Unmarshal(b, &a); err != nil {
		return nil, fmt.Errorf("report: accuracy estimate: %w", err)
	}
	return &a, nil
}

// accuracyView is the accuracy section's content.
type accuracyView struct {
	Step, Hash, Created, Region, Levels, Noise, Blur, Theta, MinRadius string
	Stale                                                              bool
	Rows                                                               []accuracyRowView
	States                                                             []accuracyStateView
	Notes                                                              []string
}

// accuracyRowView is one quantity: the latest measured value and range
// over the series next to the bias ± spread of both paths.
type accuracyRowView struct{ Quantity, Latest, Range, Labels, Grey string }

type accuracyStateView struct {
	Kappa, PcSet, Radius, Sn, Sw, SwGrey, Awn, AwnGrey, KLabels, KGrey, ThLabels, ThGrey, Note string
}

func viewAccuracy(a *Accuracy, rows []series.Row) *accuracyView {
	if a == nil {
		return nil
	}
	f := func(p *float64, scale float64, prec int) string {
		if p == nil {
			return "—"
		}
		return strconv.FormatFloat(*p*scale, 'f', prec, 64)
	}
	bs := func(s accuracyStat, scale float64, prec int, unit string) string {
		if s.Bias == nil {
			return "—"
		}
		out := fmt.Sprintf("%+.*f", prec, *s.Bias*scale)
		if s.Spread != nil {
			out += fmt.Sprintf(" ± %.*f", prec, *s.Spread*scale)
		}
		return out + unit + fmt.Sprintf(" (%d states)", s.N)
	}
	v := &accuracyView{Step: a.Step, Hash: a.ParamHash, Created: a.CreatedAt,
		Region: fmt.Sprintf("%d×%d×%d voxels from (z, y, x) = (%d, %d, %d)", a.RegionShape[0], a.RegionShape[1], a.RegionShape[2], a.RegionMin[0], a.RegionMin[1], a.RegionMin[2]),
		Levels: fmt.Sprintf("nonwetting %.0f, wetting %.0f, solid %.0f", a.Scan.Nonwetting, a.Scan.Wetting, a.Scan.Solid),
		Noise:  fmt.Sprintf("σ %.1f grey (CNR %.1f)", a.Scan.Noise, a.CNR),
		Blur:   fmt.Sprintf("σ %.2f voxels", a.Scan.Blur),
		Theta:  strconv.FormatFloat(a.Theta, 'g', -1, 64) + "°", MinRadius: strconv.FormatFloat(a.MinRadius, 'g', -1, 64) + " voxels",
		Stale: a.Current != "" && a.ParamHash != a.Current, Notes: a.Notes}
	// Latest value and range of each quantity over the series.
	latest := func(get func(r *series.Row) *float64, scale float64, prec int) (string, string) {
		var last *float64
		lo, hi := 0.0, 0.0
		n := 0
		for i := range rows {
			p := get(&rows[i])
			if p == nil {
				continue
			}
			last = p
			if n == 0 || *p < lo {
				lo = *p
			}
			if n == 0 || *p > hi {
				hi = *p
			}
			n++
		}
		if last == nil {
			return "—", "—"
		}
		return f(last, scale, prec), f(&lo, scale, prec) + " … " + f(&hi, scale, prec)
	}
	add := func(q string, get func(r *series.Row) *float64, scale float64, prec int, lab, grey accuracyStat, escale float64, eprec int, unit string) {
		l, r := latest(get, scale, prec)
		v.Rows = append(v.Rows, accuracyRowView{Quantity: q, Latest: l, Range: r, Labels: bs(lab, escale, eprec, unit), Grey: bs(grey, escale, eprec, unit)})
	}
	add("S_w", func(r *series.Row) *float64 { return r.SatWetting }, 1, 3, a.Labels.Sw, a.Grey.Sw, 1, 4, "")
	add("a_wn (1/mm)", func(r *series.Row) *float64 { return r.SpecificWN }, 1e-3, 2, a.Labels.Awn, a.Grey.Awn, 100, 1, " %")
	add("Pc (kPa)", func(r *series.Row) *float64 { return r.Pc }, 1e-3, 3, a.Labels.Pc, a.Grey.Pc, 100, 1, " %")
	add("θ mean (°)", func(r *series.Row) *float64 { return r.AngleMean }, 1, 1, a.Labels.Angle, a.Grey.Angle, 1, 1, "°")
	for _, s := range a.States {
		sv := accuracyStateView{Kappa: f(&s.Kappa, 1e-3, 2), PcSet: f(s.PcSet, 1e-3, 3), Radius: strconv.FormatFloat(s.CornerRadius, 'f', 1, 64),
			Sn: strconv.FormatFloat(s.SatNonwet, 'f', 3, 64), Sw: f(s.Sw.Truth, 1, 3), SwGrey: f(s.Sw.Grey, 1, 3),
			Awn: f(s.Awn.Truth, 1e-3, 2), AwnGrey: f(s.Awn.Grey, 1e-3, 2), KLabels: f(s.Curv.Labels, 1e-3, 2), KGrey: f(s.Curv.Grey, 1e-3, 2),
			ThLabels: f(s.Angle.Labels, 1, 1), ThGrey: f(s.Angle.Grey, 1, 1), Note: s.Skipped}
		if sv.Note == "" && !s.Converged {
			sv.Note = "relaxation stopped at the time limit"
		}
		v.States = append(v.States, sv)
	}
	return v
}
