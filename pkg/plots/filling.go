package plots

import (
	"math"

	"gonum.org/v1/plot"

	"sluice/pkg/series"
)

// fillingRates returns the drainage and imbibition event rates (1/s) of
// every row, NaN where null.
func fillingRates(rows []series.Row) (drainage, imbibition []float64) {
	drainage, imbibition = make([]float64, len(rows)), make([]float64, len(rows))
	for i := range rows {
		drainage[i], imbibition[i] = math.NaN(), math.NaN()
		if p := rows[i].Filling(); p != nil {
			if p.Drainage != nil {
				drainage[i] = series.F(p.Drainage.RatePerS)
			}
			if p.Imbibition != nil {
				imbibition[i] = series.F(p.Imbibition.RatePerS)
			}
		}
	}
	return drainage, imbibition
}

// fillingHistogram returns the event-volume distribution of the latest row
// with events: x[k] = log10 of the low edge of bin k in µm³ (bins double),
// and the drainage and imbibition counts per bin; step names the row ("" when
// no row has events).
func fillingHistogram(rows []series.Row) (step string, x, drainage, imbibition []float64) {
	for i := len(rows) - 1; i >= 0; i-- {
		p := rows[i].Filling()
		if p == nil || p.Drainage == nil || p.Imbibition == nil {
			continue
		}
		d, m := p.Drainage, p.Imbibition
		n := max(len(d.Histogram), len(m.Histogram))
		if n == 0 {
			continue
		}
		low := d.BinLowM3
		if len(m.BinLowM3) > len(low) {
			low = m.BinLowM3
		}
		if len(low) != n {
			continue // inconsistent object: draw nothing rather than something wrong
		}
		x, drainage, imbibition = make([]float64, n), make([]float64, n), make([]float64, n)
		for k := range n {
			x[k] = math.Log10(low[k] * 1e18)
			if k < len(d.Histogram) {
				drainage[k] = float64(d.Histogram[k])
			}
			if k < len(m.Histogram) {
				imbibition[k] = float64(m.Histogram[k])
			}
		}
		return rows[i].Step, x, drainage, imbibition
	}
	return "", nil, nil, nil
}

// filling draws the pore-filling events: the drainage and imbibition
// event rates against time (top) and the event-volume distribution of the
// latest step with events in bins that double (bottom).
func (b *builder) filling() Figure {
	title := "Pore-filling events between consecutive steps"
	d, im := fillingRates(b.rows)
	top := newPlot(title, b.timeLabel(), "events per second (1/s)")
	n := addSeries(top, styles[0], "drainage (w→n)", b.times(), d)
	n += addSeries(top, styles[1], "imbibition (n→w)", b.times(), im)
	top.Y.Min = 0
	if n > 0 {
		b.markEvents(top)
	}
	step, x, hd, hi := fillingHistogram(b.rows)
	label := "event volume: log₁₀(V / µm³), bins of ×2"
	if step != "" {
		label += ", step " + step
	}
	bottom := newPlot("", label, "events per bin (–)")
	if step != "" {
		addSeries(bottom, styles[0], "drainage", x, hd)
		addSeries(bottom, styles[1], "imbibition", x, hi)
	}
	bottom.Y.Min = 0
	return Figure{Name: "pore_filling", Title: title, TimeUnit: b.unit, panels: []*plot.Plot{top, bottom},
		specs: []axes{{}, {intY: true}}, empty: n == 0}
}
