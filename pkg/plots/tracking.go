package plots

import (
	"math"

	"gonum.org/v1/plot"

	"sluice/pkg/series"
)

// trackingCols returns, per row, the trapped saturation, the fraction of
// trapped ganglia that moved, and the split and merge counts (NaN where
// null).
func trackingCols(rows []series.Row) (trapped, moved, splits, merges []float64) {
	f := func(p *float64) float64 { return series.F(p) }
	i64 := func(p *int64) float64 {
		if p == nil {
			return math.NaN()
		}
		return float64(*p)
	}
	for i := range rows {
		g := rows[i].Tracking()
		trapped = append(trapped, f(g.TrappedSaturation))
		moved = append(moved, f(g.TrappedMovedFraction))
		splits = append(splits, i64(g.Splits))
		merges = append(merges, i64(g.Merges))
	}
	return
}

// tracking draws the ganglion histories: trapped saturation and the
// fraction of trapped ganglia that moved since the previous step (top),
// splits and merges per step (bottom), against time.
func (b *builder) tracking() Figure {
	title := "Ganglion tracking between consecutive steps"
	tr, mv, sp, mg := trackingCols(b.rows)
	top := newPlot(title, "", "fraction (–)")
	n := addSeries(top, styles[0], "trapped saturation (trapped n / pore)", b.times(), tr)
	n += addSeries(top, styles[1], "trapped ganglia that moved", b.times(), mv)
	top.Y.Min, top.Y.Max = 0, 1
	bottom := newPlot("", b.timeLabel(), "ganglia per step (–)")
	n += addSeries(bottom, styles[2], "splits", b.times(), sp)
	n += addSeries(bottom, styles[3], "merges", b.times(), mg)
	bottom.Y.Min = 0
	if n > 0 {
		b.markEvents(top)
		b.markEvents(bottom)
	}
	top.HideX()
	return Figure{Name: "ganglion_tracking", Title: title, TimeUnit: b.unit, panels: []*plot.Plot{top, bottom}, sharedX: true,
		specs: []axes{{fixedY: true}, {intY: true}}, empty: n == 0}
}
