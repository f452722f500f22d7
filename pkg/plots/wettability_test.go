package plots

import (
	"math"
	"testing"

	"sluice/pkg/series"
)

// TestAngleQuantiles: quartiles of a 1° contact-angle histogram with the
// angles uniform within their bin. Source: by hand — 3 samples in [40, 41)°
// and 1 in [70, 71)°: the 25 % point is 1 of 4 samples, a third into bin
// 40 (40.333°), the median 40.667°, the 75 % point the end of bin 40
// (41°); the 100 % point the end of bin 70.
func TestAngleQuantiles(t *testing.T) {
	h := make([]int64, 180)
	h[40], h[70] = 3, 1
	got := AngleQuantiles(h, 0.25, 0.5, 0.75, 1)
	want := []float64{40 + 1.0/3, 40 + 2.0/3, 41, 71}
	for i := range want {
		if math.Abs(got[i]-want[i]) > 1e-12 {
			t.Errorf("quantile %d: %v°, want %v°", i, got[i], want[i])
		}
	}
	if q := AngleQuantiles(make([]int64, 180), 0.5); !math.IsNaN(q[0]) {
		t.Errorf("no samples: median %v, want NaN", q[0])
	}
}

// TestWettabilityFigure: the contact_angles figure is drawn from the
// geometric, thermodynamic and topological angles of the rows and is empty
// without them.
func TestWettabilityFigure(t *testing.T) {
	rows := make([]series.Row, 3)
	for i := range rows {
		rows[i] = series.Row{Step: string(rune('a' + i)), Time: float64(60 * i)}
	}
	if f := byName(Build(rows, nil, Run{}), "contact_angles"); !f.empty {
		t.Error("figure without angles is not marked empty")
	}
	w := 72.0
	rows[1].AngleTopo = &w
	if f := byName(Build(rows, nil, Run{}), "contact_angles"); f.empty {
		t.Error("figure with a topological angle is marked empty")
	}
	rows[1].AngleTopo = nil
	v := 61.5
	rows[2].AngleThermo = &v
	// Build sorts nothing and derives nothing: the value given is drawn.
	if f := byName(Build(rows, nil, Run{}), "contact_angles"); f.empty {
		t.Error("figure with a thermodynamic angle is marked empty")
	}
}
