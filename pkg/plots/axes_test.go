package plots

import (
	"bytes"
	"encoding/xml"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"testing"

	"sluice/pkg/events"
	"sluice/pkg/series"
)

// svgText is one <text> element of an SVG written by gonum/plot: its
// content and font size. gonum writes a panel as title, x label, x tick
// labels, y label, y tick labels, legend, in that order; tick labels are
// 10 px, titles and axis labels 12 px.
type svgText struct {
	size string
	text string
}

func svgTexts(t *testing.T, svg []byte) []svgText {
	t.Helper()
	d := xml.NewDecoder(bytes.NewReader(svg))
	var out []svgText
	var cur *svgText
	for {
		tok, err := d.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("SVG does not parse: %v", err)
		}
		switch e := tok.(type) {
		case xml.StartElement:
			if e.Name.Local == "text" {
				cur = &svgText{}
				for _, a := range e.Attr {
					if a.Name.Local == "style" {
						if i := strings.Index(a.Value, "font-size:"); i >= 0 {
							cur.size = strings.TrimSuffix(a.Value[i+len("font-size:"):], ";")
						}
					}
				}
			}
		case xml.CharData:
			if cur != nil {
				cur.text += string(e)
			}
		case xml.EndElement:
			if e.Name.Local == "text" && cur != nil {
				out = append(out, *cur)
				cur = nil
			}
		}
	}
	return out
}

// ticksAfter returns the tick labels (10 px texts) that follow the axis
// label `label` in the SVG; it fails when the label is missing.
func ticksAfter(t *testing.T, texts []svgText, label string) []string {
	t.Helper()
	for i, x := range texts {
		if x.text != label {
			continue
		}
		var ticks []string
		for _, y := range texts[i+1:] {
			if y.size != "10px" {
				break
			}
			ticks = append(ticks, y.text)
		}
		return ticks
	}
	var all []string
	for _, x := range texts {
		all = append(all, x.text)
	}
	t.Fatalf("no axis label %q in SVG texts %q", label, all)
	return nil
}

func svgOf(t *testing.T, f Figure) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := f.WriteSVG(&b); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// roundSteps checks that labels are numbers equally spaced by 1, 2 or 5 ×
// 10^k and returns them.
func roundSteps(t *testing.T, what string, labels []string) []float64 {
	t.Helper()
	if len(labels) < 3 {
		t.Fatalf("%s: %d tick labels %q", what, len(labels), labels)
	}
	v := make([]float64, len(labels))
	for i, l := range labels {
		f, err := strconv.ParseFloat(l, 64)
		if err != nil {
			t.Fatalf("%s: tick label %q is not a number", what, l)
		}
		v[i] = f
	}
	step := v[1] - v[0]
	m := step / math.Pow(10, math.Floor(math.Log10(step)))
	if !(math.Abs(m-1) < 1e-9 || math.Abs(m-2) < 1e-9 || math.Abs(m-5) < 1e-9) {
		t.Errorf("%s: tick step %g is not 1, 2 or 5 × 10^k (%q)", what, step, labels)
	}
	for i := 1; i < len(v); i++ {
		if math.Abs(v[i]-v[i-1]-step) > 1e-9*step {
			t.Errorf("%s: ticks not equally spaced: %q", what, labels)
		}
	}
	return v
}

func timed(n int, span float64) []series.Row {
	rows := drainage(n, -1)
	for i := range rows {
		rows[i].Time = span * float64(i) / float64(n-1)
	}
	return rows
}

// TestTimeAxisUnitAndRoundTicks: the unit follows the campaign's length
// (< 10 min → s, < 3 h → min, else h) and the axis runs between round
// ticks that cover every step. The expected ticks are by hand: at most 6
// intervals of 1, 2 or 5 × 10^k, e.g. 300 s → 50 s steps, 2 h = 120 min →
// 20 min steps, 10 h → 2 h steps.
func TestTimeAxisUnitAndRoundTicks(t *testing.T) {
	for _, c := range []struct {
		span  float64
		unit  string
		ticks string // expected labels, "" to check properties only
	}{
		{300, "s", "0 50 100 150 200 250 300"},
		{599, "s", ""},
		{600, "min", "0 2 4 6 8 10"},
		{7200, "min", "0 20 40 60 80 100 120"},
		{10799, "min", ""},
		{10800, "h", "0.0 0.5 1.0 1.5 2.0 2.5 3.0"},
		{36000, "h", "0 2 4 6 8 10"},
	} {
		rows := timed(9, c.span)
		figs := Build(rows, nil, Run{})
		for _, name := range []string{"saturation", "capillary_pressure", "curvature", "specific_area", "ganglia"} {
			f := byName(figs, name)
			if f.TimeUnit != c.unit {
				t.Errorf("%s over %g s: unit %q, want %q", name, c.span, f.TimeUnit, c.unit)
			}
			label := "time t (" + c.unit + ")"
			ticks := ticksAfter(t, svgTexts(t, svgOf(t, f)), label)
			what := fmt.Sprintf("%s over %g s", name, c.span)
			v := roundSteps(t, what, ticks)
			if c.ticks != "" && strings.Join(ticks, " ") != c.ticks {
				t.Errorf("%s: ticks %q, want %q", what, strings.Join(ticks, " "), c.ticks)
			}
			// The axis runs from the first to the last tick and covers
			// every step.
			p := f.panels[len(f.panels)-1]
			if p.X.Min != v[0] || p.X.Max != v[len(v)-1] {
				t.Errorf("%s: axis %g…%g, ticks %g…%g", what, p.X.Min, p.X.Max, v[0], v[len(v)-1])
			}
			_, per := TimeUnit(rows)
			if v[0] > rows[0].Time/per || v[len(v)-1] < rows[len(rows)-1].Time/per {
				t.Errorf("%s: ticks %g…%g do not cover the steps 0…%g", what, v[0], v[len(v)-1], rows[len(rows)-1].Time/per)
			}
		}
	}
}

// TestEventMarkersFollowTimeUnit: a breakthrough at t = 1 h in a 6 h
// campaign is drawn at 1 on the hour axis (unscaled it would be at 3600,
// outside the axis, and not drawn).
func TestEventMarkersFollowTimeUnit(t *testing.T) {
	rows := timed(7, 6*3600)
	evs := []events.Event{{Kind: events.Breakthrough, Step: rows[1].Step, Time: rows[1].Time}}
	with := svgOf(t, byName(Build(rows, evs, Run{}), "saturation"))
	without := svgOf(t, byName(Build(rows, nil, Run{}), "saturation"))
	black := func(b []byte) int {
		n := 0
		for _, m := range pathRe.FindAllStringSubmatch(string(b), -1) {
			if strings.Contains(m[2], "stroke:#000000") && strings.Contains(m[2], "stroke-dasharray") {
				n++
			}
		}
		return n
	}
	if got := black(with) - black(without); got != 2 {
		t.Fatalf("breakthrough at 1 h added %d dashed black paths, want 2 (marker and legend)", got)
	}
}

// TestFractionAxesFixed: saturations and fractions are drawn on 0–1 with
// ticks 0, 0.2 … 1 whatever the data span (here S_w only 0.3…0.5, and the
// legend headroom must not lift the top above 1).
func TestFractionAxesFixed(t *testing.T) {
	rows := drainage(9, -1)
	for i := range rows {
		sw := 0.5 - 0.2*float64(i)/8
		rows[i].SatWetting, rows[i].SatNonwetting = fp(sw), fp(1-sw)
		rows[i].LargestFraction = fp(0.4 + 0.01*float64(i))
	}
	want := "0.0 0.2 0.4 0.6 0.8 1.0"
	figs := Build(rows, nil, Run{})
	for _, c := range []struct{ fig, label string }{
		{"saturation", "saturation (–)"},
		{"ganglia", "largest ganglion fraction (–)"},
		{"pc_saturation", "wetting saturation S_w (–)"},
		{"area_saturation", "wetting saturation S_w (–)"},
	} {
		ticks := ticksAfter(t, svgTexts(t, svgOf(t, byName(figs, c.fig))), c.label)
		if got := strings.Join(ticks, " "); got != want {
			t.Errorf("%s: %s ticks %q, want %q", c.fig, c.label, got, want)
		}
	}
	p := byName(figs, "saturation").panels[0]
	if p.Y.Min != 0 || p.Y.Max != 1 {
		t.Errorf("saturation axis %g…%g, want 0…1", p.Y.Min, p.Y.Max)
	}
}

// TestCountTicksAreIntegers: 1 or 2 ganglia (axis 0…2.5 with headroom)
// would get ticks 0, 0.5, 1 …
// with half steps; counts get integers from 0.
func TestCountTicksAreIntegers(t *testing.T) {
	rows := drainage(9, -1)
	for i := range rows {
		g := int64(1 + i%2)
		rows[i].GangliaCount = &g
	}
	ticks := ticksAfter(t, svgTexts(t, svgOf(t, byName(Build(rows, nil, Run{}), "ganglia"))), "number of ganglia (–)")
	v := roundSteps(t, "ganglia count", ticks)
	if v[0] != 0 {
		t.Errorf("count axis starts at %q, want 0", ticks[0])
	}
	for _, l := range ticks {
		if strings.ContainsAny(l, ".e") {
			t.Errorf("count tick %q is not an integer (%q)", l, ticks)
		}
	}
}

// TestTitlesAndUnits: every figure names the campaign and the run (short
// hash), and the axis labels carry the units of the Unit constants.
func TestTitlesAndUnits(t *testing.T) {
	rows := drainage(9, -1)
	run := Run{Campaign: "bentheimer-co2", Hash: "9f1c2e3a4b5c6d7e"}
	figs := Build(rows, nil, run)
	labels := map[string][]string{
		"saturation":         {"saturation (–)", "time t (s)"},
		"capillary_pressure": {"capillary pressure Pc (kPa)"},
		"curvature":          {"total curvature κ (1/mm)"},
		"specific_area":      {"specific area a (mm²/mm³ of bulk volume)"},
		"pc_saturation":      {"capillary pressure Pc (kPa)", "wetting saturation S_w (–)"},
		"area_saturation":    {"specific area a_wn (mm²/mm³ of bulk volume)"},
		"contact_angle":      {"contact angle θ (°)", "fraction of samples per degree (1/°)"},
		"ganglia":            {"number of ganglia (–)", "largest ganglion fraction (–)"},
	}
	for _, f := range figs {
		texts := svgTexts(t, svgOf(t, f))
		var all []string
		for _, x := range texts {
			all = append(all, x.text)
		}
		joined := strings.Join(all, "\n")
		if !strings.Contains(joined, "campaign bentheimer-co2, run 9f1c2e3a") || strings.Contains(joined, run.Hash) {
			t.Errorf("%s: title does not name campaign and short run: %q", f.Name, all[:2])
		}
		for _, l := range labels[f.Name] {
			if !strings.Contains(joined, l) {
				t.Errorf("%s: no label %q in %q", f.Name, l, all)
			}
		}
		if strings.Contains(joined, "(1)") {
			t.Errorf("%s: a dimensionless unit is written (1), not (–)", f.Name)
		}
	}
	if !strings.Contains(byName(figs, "specific_area").Title, "per bulk volume") {
		t.Errorf("specific area title does not say per bulk volume")
	}
	for _, f := range Build(rows, nil, Run{}) {
		if b := svgOf(t, f); bytes.Contains(b, []byte("campaign ")) || bytes.Contains(b, []byte(", run")) {
			t.Errorf("%s: names a run it was not given", f.Name)
		}
	}
}
