package plots

import (
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"sluice/pkg/series"
)

// Units of the geometric-state figure: the integral of the mean curvature
// J_wn and the Euler characteristic χ_n per bulk volume of the sample (the
// title says "per bulk volume"; the axes are short, two panels share the
// figure's height).
const (
	UnitMeanCurvDensity = "mm/mm³"
	UnitEulerDensity    = "1/mm³"
)

// Per m² → per mm², per m³ → per mm³.
const (
	perM2ToPerMM2 = 1e-6
	perM3ToPerMM3 = 1e-9
)

// geometric draws the geometric-state trajectory (McClure et al. 2018,
// Phys. Rev. Fluids 3:084306): J_wn and χ_n per bulk volume against S_w,
// one panel each (a_wn against S_w is the area_saturation figure), steps
// joined in time order, the latest ringed.
func (b *builder) geometric() Figure {
	const title = "Geometric state per bulk volume: J_wn and χ_n against S_w"
	x := b.col(satWet, 1)
	panels := []struct {
		label, ylabel string
		y             []float64
	}{
		{"J_wn = ∫H dA", "J_wn/V (" + UnitMeanCurvDensity + ")", b.col(func(r *series.Row) *float64 { return r.SpecificMeanCurvWN }, perM2ToPerMM2)},
		{"χ_n", "χ_n/V (" + UnitEulerDensity + ")", b.col(func(r *series.Row) *float64 { return r.SpecificEulerNonwetting }, perM3ToPerMM3)},
	}
	var ps []*plot.Plot
	var specs []axes
	n := 0
	for i, pn := range panels {
		xl := ""
		if i == len(panels)-1 {
			xl = "wetting saturation S_w (" + UnitDimensionless + ")"
		}
		p := newPlot("", xl, pn.ylabel)
		k := addSeries(p, styles[i], pn.label, x, pn.y)
		n += k
		if k > 0 {
			ringLatest(p, x, pn.y, b.rows)
		}
		p.X.Min, p.X.Max = 0, 1
		if i < len(panels)-1 {
			p.HideX()
		}
		ps = append(ps, p)
		specs = append(specs, axes{fixedX: true})
	}
	return Figure{Name: "geometric_state", Title: title, panels: ps, specs: specs, empty: n == 0}
}

// ringLatest rings the last point with finite coordinates, so the
// direction of travel of a trajectory is visible.
func ringLatest(p *plot.Plot, x, y []float64, rows []series.Row) {
	for i := len(y) - 1; i >= 0; i-- {
		if finite(x[i]) && finite(y[i]) {
			sc, _ := plotter.NewScatter(plotter.XYs{{X: x[i], Y: y[i]}})
			sc.GlyphStyle = draw.GlyphStyle{Color: Palette.Amber, Radius: vg.Points(5), Shape: draw.RingGlyph{}}
			p.Add(sc)
			p.Legend.Add("latest step "+rows[i].Step, sc)
			return
		}
	}
}
