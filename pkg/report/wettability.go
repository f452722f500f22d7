package report

import (
	"math"
	"strconv"

	"sluice/pkg/plots"
	"sluice/pkg/series"
)

// angleRow is one line of the wettability table: the geometric angle of the
// step (mean ± SE; median with the 25–75 % range) and the thermodynamic
// angle from the previous step (± SE; its cosine).
type angleRow struct {
	Step, Time, GeoMean, GeoMedian, Thermo, ThermoCos string
	// Topo is the topological angle of the trapped ganglia (with the
	// median of the ganglia's own angles), TopoN how many gave one.
	Topo, TopoN string
}

// angleTable tabulates the contact angles of every step (degrees through
// the wetting phase).
func angleTable(rows []series.Row) []angleRow {
	f := func(p *float64, prec int) string {
		if p == nil {
			return "—"
		}
		return strconv.FormatFloat(*p, 'f', prec, 64)
	}
	pm := func(p, se *float64) string {
		if p == nil || se == nil {
			return f(p, 1)
		}
		return f(p, 1) + " ± " + f(se, 1)
	}
	var out []angleRow
	for i := range rows {
		r := &rows[i]
		a := angleRow{Step: r.Step, Time: strconv.FormatFloat(r.Time, 'f', 1, 64),
			GeoMean: pm(r.AngleMean, r.AngleMeanSE), GeoMedian: "—",
			Thermo: pm(r.AngleThermo, r.AngleThermoSE), ThermoCos: f(r.AngleThermoCos, 3), Topo: f(r.AngleTopo, 1), TopoN: "—"}
		if r.AngleTopo != nil && r.AngleTopoMedian != nil {
			a.Topo += " (median " + f(r.AngleTopoMedian, 1) + ")"
		}
		if r.AngleTopoCount != nil {
			a.TopoN = strconv.FormatInt(*r.AngleTopoCount, 10)
		}
		if q := plots.AngleQuantiles(r.AngleHist, 0.25, 0.5, 0.75); !math.IsNaN(q[1]) {
			a.GeoMedian = strconv.FormatFloat(q[1], 'f', 1, 64) + " (" + strconv.FormatFloat(q[0], 'f', 1, 64) +
				"–" + strconv.FormatFloat(q[2], 'f', 1, 64) + ")"
		}
		out = append(out, a)
	}
	return out
}
