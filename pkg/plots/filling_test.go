package plots

import (
	"encoding/json"
	"math"
	"testing"

	"sluice/pkg/series"
)

// fillingRow is a row with a pore_filling object as the aggregator writes
// it (pkg/filling.Result's JSON).
func fillingRow(step string, t float64, obj string) series.Row {
	r := series.Row{Step: step, Time: t}
	r.Extra = map[string]json.RawMessage{"pore_filling": json.RawMessage(obj)}
	return r
}

// TestFillingFigure: the rates are drawn as stored (null for the first
// step), and the distribution is the latest step's: at h = 1 µm, bin k
// starts at 2^k µm³, so x = k·log10 2 (Source: the bin definition,
// 2^k voxels of h³ each).
func TestFillingFigure(t *testing.T) {
	rows := []series.Row{
		fillingRow("s1", 0, `{"previous_step":null,"interval_s":null,"connectivity":26,"drainage":null,"imbibition":null,"note":"first step"}`),
		fillingRow("s2", 10, `{"previous_step":"s1","interval_s":10,"connectivity":26,
			"drainage":{"count":3,"voxels":7,"volume_m3":7e-18,"rate_per_s":0.3,"volume_histogram":[1,1,1],"volume_bin_low_m3":[1e-18,2e-18,4e-18],"largest":[]},
			"imbibition":{"count":0,"voxels":0,"volume_m3":0,"rate_per_s":0,"volume_histogram":[],"volume_bin_low_m3":[],"largest":[]}}`),
		fillingRow("s3", 20, `{"previous_step":"s2","interval_s":10,"connectivity":26,
			"drainage":{"count":1,"voxels":1,"volume_m3":1e-18,"rate_per_s":0.1,"volume_histogram":[1],"volume_bin_low_m3":[1e-18],"largest":[]},
			"imbibition":{"count":2,"voxels":10,"volume_m3":1e-17,"rate_per_s":0.2,"volume_histogram":[0,1,0,1],"volume_bin_low_m3":[1e-18,2e-18,4e-18,8e-18],"largest":[]}}`),
	}
	d, im := fillingRates(rows)
	if !math.IsNaN(d[0]) || d[1] != 0.3 || d[2] != 0.1 || im[1] != 0 || im[2] != 0.2 {
		t.Errorf("rates %v / %v", d, im)
	}
	step, x, hd, hi := fillingHistogram(rows)
	if step != "s3" || len(x) != 4 {
		t.Fatalf("histogram of %q with %d bins, want s3 with 4", step, len(x))
	}
	for k := range x {
		if math.Abs(x[k]-float64(k)*math.Log10(2)) > 1e-12 {
			t.Errorf("bin %d at x = %g, want %g", k, x[k], float64(k)*math.Log10(2))
		}
	}
	if hd[0] != 1 || hd[1] != 0 || hi[1] != 1 || hi[3] != 1 || hi[0] != 0 {
		t.Errorf("counts %v / %v", hd, hi)
	}
	f := byName(Build(rows, nil, Run{}), "pore_filling")
	if f.empty {
		t.Fatal("figure marked empty")
	}
	svg, _ := render(t, f)
	// Two rate points per kind (s2, s3) joined by one line each.
	if lines, _ := svgPaths(string(svg), Palette.Ink); len(lines) == 0 || lines[0] != 2 {
		t.Errorf("drainage rate line vertices %v, want 2 first", lines)
	}
	if f := byName(Build(rows[:1], nil, Run{}), "pore_filling"); !f.empty {
		t.Error("only a first step: figure not marked empty")
	}
}
