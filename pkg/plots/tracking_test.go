package plots

import (
	"encoding/json"
	"math"
	"testing"

	"sluice/pkg/series"
)

// TestTrackingFigure: the trapped saturation, moved fraction, splits and
// merges are drawn as stored (Source: the rows below), null for a step
// without tracking and for one whose object carries a note.
func TestTrackingFigure(t *testing.T) {
	row := func(step string, tm float64, obj string) series.Row {
		r := series.Row{Step: step, Time: tm}
		if obj != "" {
			r.Extra = map[string]json.RawMessage{"ganglion_tracking": json.RawMessage(obj)}
		}
		return r
	}
	rows := []series.Row{
		row("s1", 0, ""),
		row("s2", 10, `{"previous_step":"s1","one_to_one":2,"splits":1,"merges":0,"appeared":1,"vanished":0,"trapped_saturation":0.125,"trapped_moved_fraction":0.5,"trapped_lifetime_mean_s":5,"trapped":[]}`),
		row("s3", 20, `{"previous_step":"s2","one_to_one":0,"splits":0,"merges":0,"appeared":0,"vanished":0,"trapped_saturation":null,"trapped_moved_fraction":null,"trapped_lifetime_mean_s":null,"trapped":[],"note":"previous step s2 failed"}`),
		row("s4", 30, `{"previous_step":"s3","one_to_one":1,"splits":0,"merges":2,"appeared":0,"vanished":1,"trapped_saturation":0.25,"trapped_moved_fraction":0,"trapped_lifetime_mean_s":0,"trapped":[]}`),
	}
	tr, mv, sp, mg := trackingCols(rows)
	nan := math.NaN()
	for _, c := range []struct {
		name      string
		got, want []float64
	}{
		{"trapped saturation", tr, []float64{nan, 0.125, nan, 0.25}},
		{"moved", mv, []float64{nan, 0.5, nan, 0}},
		{"splits", sp, []float64{nan, 1, nan, 0}},
		{"merges", mg, []float64{nan, 0, nan, 2}},
	} {
		for i := range c.want {
			if math.IsNaN(c.want[i]) != math.IsNaN(c.got[i]) || !math.IsNaN(c.want[i]) && c.got[i] != c.want[i] {
				t.Errorf("%s: %v, want %v", c.name, c.got, c.want)
				break
			}
		}
	}
	if f := byName(Build(rows, nil, Run{}), "ganglion_tracking"); f.empty {
		t.Error("figure marked empty")
	}
	if f := byName(Build(rows[:1], nil, Run{}), "ganglion_tracking"); !f.empty {
		t.Error("no tracking: figure not marked empty")
	}
}

// TestStackedTimePanelsShareX: in the stacked figures whose panels share
// the time axis, a time lies at the same place in every panel even when
// the panels' series cover different steps (here the ganglion count from
// 0 s, the largest-ganglion fraction only from 100 to 200 s, and the
// tracking only from 150 s): the x ranges are equal and hold every step.
func TestStackedTimePanelsShareX(t *testing.T) {
	var rows []series.Row
	for i := range 7 {
		tm := float64(i * 50)
		r := series.Row{Step: "s" + string(rune('0'+i)), Time: tm}
		c := int64(10 + i)
		r.GangliaCount = &c
		if tm >= 100 && tm <= 200 {
			f := 0.5
			r.LargestFraction = &f
		}
		if tm >= 150 {
			r.Extra = map[string]json.RawMessage{"ganglion_tracking": json.RawMessage(`{"previous_step":"x","one_to_one":1,"splits":1,"merges":0,"appeared":0,"vanished":0,"trapped_saturation":0.1,"trapped_moved_fraction":0,"trapped_lifetime_mean_s":0,"trapped":[]}`)}
		}
		rows = append(rows, r)
	}
	figs := Build(rows, nil, Run{})
	for _, name := range []string{"ganglia", "ganglion_tracking"} {
		f := byName(figs, name)
		top, bottom := f.panels[0].X, f.panels[len(f.panels)-1].X
		if top.Min != bottom.Min || top.Max != bottom.Max {
			t.Errorf("%s: top x %g…%g, bottom x %g…%g: one time at two places", name, top.Min, top.Max, bottom.Min, bottom.Max)
		}
		if top.Min > 0 || top.Max < 300 {
			t.Errorf("%s: x %g…%g does not hold the steps 0…300 s", name, top.Min, top.Max)
		}
	}
}
