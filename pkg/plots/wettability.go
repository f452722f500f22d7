package plots

import (
	"math"
	"strconv"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"sluice/pkg/series"
)

// AngleQuantiles returns the q-quantiles (0 ≤ q ≤ 1) of a contact-angle
// histogram in 1° bins (hist[i] counts angles in [i, i+1)°), taking the
// angles uniform within a bin; NaN for every q without samples.
func AngleQuantiles(hist []int64, qs ...float64) []float64 {
	out := make([]float64, len(qs))
	var n float64
	for _, c := range hist {
		if c > 0 {
			n += float64(c)
		}
	}
	for k, q := range qs {
		out[k] = math.NaN()
		if n == 0 {
			continue
		}
		target, cum := q*n, 0.0
		for i, c := range hist {
			if c <= 0 {
				continue
			}
			if cum+float64(c) >= target {
				out[k] = float64(i) + (target-cum)/float64(c)
				break
			}
			cum += float64(c)
		}
	}
	return out
}

// rangePoints are points with a bar from lo to hi (absolute values).
type rangePoints struct {
	xy     plotter.XYs
	lo, hi []float64
}

func (r rangePoints) Len() int                    { return len(r.xy) }
func (r rangePoints) XY(i int) (float64, float64) { return r.xy[i].X, r.xy[i].Y }
func (r rangePoints) YError(i int) (float64, float64) {
	return r.xy[i].Y - r.lo[i], r.hi[i] - r.xy[i].Y
}

// wettability draws the contact angles of each step side by side against
// time: the geometric angle measured at the contact line (pkg/contact;
// median with the 25–75 % range of its distribution as a bar, and the
// mean ± SE), and the thermodynamic angle from the energy balance between
// consecutive steps (series.ThermodynamicAngles) ± SE, placed at the later
// step's time, and the topological angle of the trapped ganglia
// (Gauss–Bonnet on their surfaces, pkg/measure topoangle.go).
func (b *builder) wettability() Figure {
	title := "Contact angles: geometric, thermodynamic and topological"
	p := newPlot(title, b.timeLabel(), "contact angle θ through the wetting phase ("+UnitAngle+")")
	ts := b.times()
	med := make([]float64, len(b.rows))
	var rp rangePoints
	for i := range b.rows {
		q := AngleQuantiles(b.rows[i].AngleHist, 0.25, 0.5, 0.75)
		med[i] = q[1]
		if finite(q[1]) && finite(ts[i]) {
			rp.xy = append(rp.xy, plotter.XY{X: ts[i], Y: q[1]})
			rp.lo, rp.hi = append(rp.lo, q[0]), append(rp.hi, q[2])
		}
	}
	n := addSeries(p, styles[0], "geometric: median, bar 25–75 %", ts, med)
	if rp.Len() > 0 {
		if eb, err := plotter.NewYErrorBars(rp); err == nil {
			eb.LineStyle = draw.LineStyle{Color: styles[0].colour, Width: vg.Points(3)}
			eb.CapWidth = vg.Points(0)
			p.Add(eb)
		}
	}
	mean := b.col(func(r *series.Row) *float64 { return r.AngleMean }, 1)
	n += addSeries(p, styles[2], "geometric: mean ± SE", ts, mean)
	addErrorBars(p, styles[2], ts, mean, b.col(func(r *series.Row) *float64 { return r.AngleMeanSE }, 1))
	th := b.col(func(r *series.Row) *float64 { return r.AngleThermo }, 1)
	n += addSeries(p, styles[1], "thermodynamic (from previous step) ± SE", ts, th)
	addErrorBars(p, styles[1], ts, th, b.col(func(r *series.Row) *float64 { return r.AngleThermoSE }, 1))
	n += addSeries(p, styles[3], "topological (Gauss–Bonnet, trapped ganglia)", ts, b.col(func(r *series.Row) *float64 { return r.AngleTopo }, 1))
	p.Y.Min, p.Y.Max = 0, 180
	var ticks []plot.Tick
	for d := 0; d <= 180; d += 30 {
		ticks = append(ticks, plot.Tick{Value: float64(d), Label: strconv.Itoa(d)})
	}
	p.Y.Tick.Marker = plot.ConstantTicks(ticks)
	if n > 0 {
		b.markEvents(p)
	}
	return Figure{Name: "contact_angles", Title: title, TimeUnit: b.unit, panels: []*plot.Plot{p},
		specs: []axes{{fixedY: true}}, empty: n == 0}
}
