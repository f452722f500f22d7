package report

import (
	"encoding/json"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"sluice/pkg/series"
)

// settingsTable joins the rows (time, voxel size, phases from the result)
// with each step's segmentation settings and flags thresholds that drift
// from the campaign median (see ThresholdDrift) and voxel sizes that differ
// from the campaign's h (relative 1e-6; h = 0: not compared). It returns
// the table and the rule as shown to the reader.
func settingsTable(rows []series.Row, steps []StepSettings, h float64) ([]settingsRow, string) {
	by := map[string]StepSettings{}
	for _, s := range steps {
		by[s.Step] = s
	}
	out := make([]settingsRow, len(rows))
	for i := range rows {
		r := &rows[i]
		s, ok := by[r.Step]
		t := settingsRow{Step: r.Step, Time: strconv.FormatFloat(r.Time, 'f', 1, 64), Voxel: "—", Filter: "—", Method: "—",
			Thresholds: "—", Phases: "—", SampleY: "—", SampleX: "—", SampleR: "—", GreyDrift: driftText(r)}
		if r.VoxelSize != nil && *r.VoxelSize > 0 {
			t.Voxel = strconv.FormatFloat(*r.VoxelSize*1e6, 'g', 4, 64)
			t.VoxelDiffers = h > 0 && math.Abs(*r.VoxelSize-h) > 1e-6*h
		}
		if b, has := r.Extra["voxel_size_assumed"]; has {
			var a bool
			if json.Unmarshal(b, &a) == nil && a {
				t.VoxelAssumed = true
			}
		}
		if n, note := phasesOf(r, s.Fluids); n > 0 {
			t.Phases, t.PhasesNote = phaseText(n, s.Fluids), note
		}
		if ok {
			if s.Filter != "" {
				t.Filter = s.Filter
			}
			if s.Method != "" {
				t.Method = s.Method
			}
			if len(s.Thresholds) > 0 {
				t.Thresholds = joinFloats(s.Thresholds)
			}
			if s.HasSample {
				t.SampleY, t.SampleX, t.SampleR = fmt.Sprintf("%.1f", s.Sample[0]), fmt.Sprintf("%.1f", s.Sample[1]), fmt.Sprintf("%.1f", s.Sample[2])
			}
		}
		out[i] = t
	}
	rule := flagDrift(rows, by, out)
	for i := range rows {
		if b := rows[i].DriftBeyond; b != nil && *b {
			out[i].Drift = true
			if out[i].DriftNote != "" {
				out[i].DriftNote += "; "
			}
			out[i].DriftNote += "phase grey levels drifted beyond 25 % of the contrast: threshold shift capped"
		}
	}
	return out, rule
}

// phasesOf returns the phases the step's result records (phases_detected
// and phases_note, written by the pipeline from the plan's phase
// decision), else what the plan's fluids imply; 0 when unknown.
func phasesOf(r *series.Row, fluids string) (int, string) {
	var n int
	var note string
	if b, ok := r.Extra["phases_detected"]; ok {
		json.Unmarshal(b, &n)
	}
	if b, ok := r.Extra["phases_note"]; ok {
		json.Unmarshal(b, &note)
	}
	if n == 0 {
		switch fluids {
		case "both":
			n = 3
		case "wetting", "nonwetting":
			n = 2
		}
	}
	return n, note
}

func phaseText(n int, fluids string) string {
	switch {
	case n == 2 && (fluids == "wetting" || fluids == "nonwetting"):
		return "2 (rock, " + fluids + " only)"
	case n == 3:
		return "3 (rock, both fluids)"
	}
	return strconv.Itoa(n)
}

func joinFloats(v []float64) string {
	s := make([]string, len(v))
	for i, x := range v {
		s[i] = strconv.FormatFloat(x, 'g', 6, 64)
	}
	return strings.Join(s, ", ")
}

// flagDrift marks the rows whose thresholds differ from the median of the
// same threshold, over the steps with as many thresholds and the same
// fluids, by more than ThresholdDrift of the grey-value scale.
func flagDrift(rows []series.Row, by map[string]StepSettings, out []settingsRow) string {
	groups := map[string][]int{}
	var gaps []float64
	for i := range rows {
		s, ok := by[rows[i].Step]
		if !ok || len(s.Thresholds) == 0 {
			continue
		}
		k := fmt.Sprintf("%d/%s", len(s.Thresholds), s.Fluids)
		groups[k] = append(groups[k], i)
		if len(s.Thresholds) == 2 {
			gaps = append(gaps, s.Thresholds[1]-s.Thresholds[0])
		}
	}
	scaleText := "the magnitude of the median threshold"
	gap := math.NaN()
	if len(gaps) > 0 {
		sort.Float64s(gaps)
		gap = median(gaps)
		scaleText = fmt.Sprintf("the median grey-value gap between the two thresholds of three-class steps (%s)", strconv.FormatFloat(gap, 'g', 6, 64))
	}
	compared := 0
	for _, idx := range groups {
		if len(idx) < ThresholdDriftMinSteps {
			continue
		}
		compared += len(idx)
		nt := len(by[rows[idx[0]].Step].Thresholds)
		for j := 0; j < nt; j++ {
			var v []float64
			for _, i := range idx {
				v = append(v, by[rows[i].Step].Thresholds[j])
			}
			sort.Float64s(v)
			med := median(v)
			scale := gap
			if math.IsNaN(scale) {
				scale = math.Abs(med)
			}
			if !(scale > 0) {
				continue
			}
			for _, i := range idx {
				t := by[rows[i].Step].Thresholds[j]
				if d := math.Abs(t - med); d > ThresholdDrift*scale {
					out[i].Drift = true
					note := fmt.Sprintf("threshold %d is %s, the median of %d steps is %s: off by %.0f %% of the scale", j+1,
						strconv.FormatFloat(t, 'g', 6, 64), len(idx), strconv.FormatFloat(med, 'g', 6, 64), 100*d/scale)
					if out[i].DriftNote != "" {
						out[i].DriftNote += "; "
					}
					out[i].DriftNote += note
				}
			}
		}
	}
	rule := fmt.Sprintf("A step is flagged when one of its thresholds differs from the median of that threshold, over the steps "+
		"with the same phases, by more than %g %% of the scale: %s. Medians need at least %d such steps (%d of %d steps compared). "+
		"Otsu thresholds move with the proportions of the phases, so a flag asks for a look at that step (beam, detector, segmentation); "+
		"it is not by itself an error.", 100*ThresholdDrift, scaleText, ThresholdDriftMinSteps, compared, len(rows))
	return rule
}
