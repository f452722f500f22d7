package report

import (
	"fmt"
	"html/template"
	"math"
	"strconv"
	"strings"

	"sluice/pkg/series"
)

// CampaignThresholds is the record of a campaign's thresholds (threshold
// scope "campaign", segment.CampaignThresholds): where they came from, the
// values, the phase levels and the histogram they were taken from.
type CampaignThresholds struct {
	// Source is "first-step" or "user"; Step the step whose histogram gave
	// the levels.
	Source, Step string
	// Order lists the classes in grey order (letters n, w, s).
	Order  string
	T      []float64
	Levels []*float64
	// The histogram: bin i covers Lo + i·Width … Lo + (i+1)·Width.
	Lo, Width float64
	Counts    []int64
}

// campaignView is the campaign-threshold section as shown.
type campaignView struct {
	Source, Step, Values, Levels string
	SVG                          template.HTML
}

var phaseNames = map[byte]string{'n': "nonwetting", 'w': "wetting", 's': "solid"}

func viewCampaign(ct *CampaignThresholds) *campaignView {
	if ct == nil {
		return nil
	}
	v := &campaignView{Source: ct.Source, Step: ct.Step, Values: joinFloats(ct.T)}
	var lv []string
	for k, l := range ct.Levels {
		name := "?"
		if k < len(ct.Order) {
			name = phaseNames[ct.Order[k]]
		}
		if l == nil {
			lv = append(lv, name+" not measured")
		} else {
			lv = append(lv, fmt.Sprintf("%s %.0f", name, *l))
		}
	}
	v.Levels = strings.Join(lv, ", ")
	// Trusted: an SVG we draw from numbers only.
	v.SVG = template.HTML(histogramSVG(ct))
	return v
}

// histogramSVG draws the histogram (log counts over grey value) with the
// thresholds as solid lines and the phase levels as dashed ones.
func histogramSVG(ct *CampaignThresholds) string {
	const W, H, left, right, top, bottom = 640.0, 260.0, 60.0, 20.0, 20.0, 45.0
	a, b := 0, len(ct.Counts)
	for a < b && ct.Counts[a] == 0 {
		a++
	}
	for b > a && ct.Counts[b-1] == 0 {
		b--
	}
	var sb strings.Builder
	fmt.Fprintf(&sb, `<svg xmlns="http://www.w3.org/2000/svg" width="%g" height="%g" viewBox="0 0 %g %g" role="img" aria-label="histogram of the campaign thresholds">`, W, H, W, H)
	if b <= a || !(ct.Width > 0) {
		sb.WriteString(`<text x="20" y="40">empty histogram</text></svg>`)
		return sb.String()
	}
	g0, g1 := ct.Lo+float64(a)*ct.Width, ct.Lo+float64(b)*ct.Width
	for _, t := range ct.T {
		g0, g1 = math.Min(g0, t), math.Max(g1, t)
	}
	var ymax float64
	for _, c := range ct.Counts[a:b] {
		ymax = math.Max(ymax, math.Log10(1+float64(c)))
	}
	if ymax == 0 {
		ymax = 1
	}
	x := func(g float64) float64 { return left + (g-g0)/(g1-g0)*(W-left-right) }
	y := func(c int64) float64 { return H - bottom - math.Log10(1+float64(c))/ymax*(H-top-bottom) }
	fmt.Fprintf(&sb, `<rect x="%g" y="%g" width="%g" height="%g" fill="none" stroke="#555"/>`, left, top, W-left-right, H-top-bottom)
	sb.WriteString(`<polyline fill="none" stroke="#1c4a8c" stroke-width="1.2" points="`)
	for i := a; i < b; i++ {
		fmt.Fprintf(&sb, "%.1f,%.1f ", x(ct.Lo+(float64(i)+0.5)*ct.Width), y(ct.Counts[i]))
	}
	sb.WriteString(`"/>`)
	for i, t := range ct.T {
		fmt.Fprintf(&sb, `<line x1="%.1f" x2="%.1f" y1="%g" y2="%g" stroke="#6a3d0c" stroke-width="1.5"/><text x="%.1f" y="%g" font-size="11" fill="#6a3d0c">T%d %s</text>`,
			x(t), x(t), top, H-bottom, x(t)+3, top+12+12*float64(i), i+1, strconv.FormatFloat(t, 'f', 0, 64))
	}
	for _, l := range ct.Levels {
		if l != nil {
			fmt.Fprintf(&sb, `<line x1="%.1f" x2="%.1f" y1="%g" y2="%g" stroke="#555" stroke-dasharray="4 3"/>`, x(*l), x(*l), top, H-bottom)
		}
	}
	fmt.Fprintf(&sb, `<text x="%g" y="%g" font-size="11">%s</text><text x="%g" y="%g" font-size="11" text-anchor="end">%s</text>`,
		left, H-bottom+15, strconv.FormatFloat(g0, 'f', 0, 64), W-right, H-bottom+15, strconv.FormatFloat(g1, 'f', 0, 64))
	fmt.Fprintf(&sb, `<text x="%g" y="%g" font-size="12" text-anchor="middle">grey value</text>`, (W+left-right)/2, H-8)
	fmt.Fprintf(&sb, `<text x="14" y="%g" font-size="12" text-anchor="middle" transform="rotate(-90 14 %g)">voxels (log scale)</text>`, (H-bottom+top)/2, (H-bottom+top)/2)
	sb.WriteString(`</svg>`)
	return sb.String()
}

// driftText is a step's grey-level drift as percentages of the contrast,
// "—" when the row has none.
func driftText(r *series.Row) string {
	var parts []string
	for _, p := range []struct {
		name string
		v    *float64
	}{{"n", r.DriftNFraction}, {"w", r.DriftWFraction}, {"s", r.DriftSFraction}} {
		if p.v != nil {
			parts = append(parts, fmt.Sprintf("%s %+.1f %%", p.name, 100**p.v))
		}
	}
	if len(parts) == 0 {
		return "—"
	}
	return strings.Join(parts, ", ")
}
