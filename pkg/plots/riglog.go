package plots

import (
	"gonum.org/v1/plot"

	"sluice/pkg/series"
)

// experimentLog draws the figure of the rig log (package riglog): the
// capillary pressure of the connected nonwetting phase measured on the
// images next to the rig's differential-pressure transducer against time
// (the comparison of Armstrong, Porter & Wildenschild 2012, Adv. Water
// Resour. 46:55), and S_w against the pore volumes injected. Empty without
// a rig log.
func (b *builder) experimentLog() Figure {
	const title = "Experiment log: image Pc vs transducer, S_w vs pore volumes injected"
	top := newPlot("", b.timeLabel(), "pressure ("+UnitPressure+")")
	n := addSeries(top, styles[0], "transducer Δp (rig log)", b.times(), b.col(func(r *series.Row) *float64 { return r.RigDiffPressure }, pascalToK))
	pc := b.col(func(r *series.Row) *float64 { return r.PcConnected }, pascalToK)
	k := addSeries(top, styles[1], "image Pc, connected ganglia ± SE", b.times(), pc)
	if k > 0 {
		addErrorBars(top, styles[1], b.times(), pc, b.col(func(r *series.Row) *float64 { return r.PcConnectedSE }, pascalToK))
	}
	if n > 0 {
		b.markEvents(top)
	}
	bottom := newPlot("", "pore volumes injected ("+UnitDimensionless+")", "wetting saturation S_w ("+UnitDimensionless+")")
	m := addSeries(bottom, styles[2], "S_w", b.col(func(r *series.Row) *float64 { return r.PoreVolumesInjected }, 1), b.col(satWet, 1))
	if m > 0 {
		ringLatest(bottom, b.col(func(r *series.Row) *float64 { return r.PoreVolumesInjected }, 1), b.col(satWet, 1), b.rows)
	}
	bottom.Y.Min, bottom.Y.Max = 0, 1
	bottom.X.Min = 0
	return Figure{Name: "experiment_log", Title: title, TimeUnit: b.unit, panels: []*plot.Plot{top, bottom},
		specs: []axes{{}, {fixedY: true}}, heights: []float64{0.5, 0.5}, empty: n+m+k == 0}
}
