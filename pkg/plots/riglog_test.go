package plots

import (
	"strings"
	"testing"
)

// TestExperimentLogFigure: the transducer (Ink) and the image Pc of the
// connected ganglia (Amber) as lines through every step against time,
// S_w against the pore volumes injected (Sky) below; a step outside the
// log (PV null) leaves the S_w–PV line but not the image Pc.
func TestExperimentLogFigure(t *testing.T) {
	const n = 8
	rows := drainage(n, -1)
	f := byName(Build(rows, nil, Run{}), "experiment_log")
	if f.empty || len(f.panels) != 2 {
		t.Fatalf("empty %v, %d panels", f.empty, len(f.panels))
	}
	svg, _ := render(t, f)
	for _, c := range []struct {
		name  string
		lines []int
	}{
		{"transducer", first(svgPaths(string(svg), Palette.Ink))},
		{"image Pc", first(svgPaths(string(svg), Palette.Amber))},
		{"S_w–PV", first(svgPaths(string(svg), Palette.Sky))},
	} {
		if !has(c.lines, n) {
			t.Errorf("%s: no line through %d steps: %v", c.name, n, c.lines)
		}
	}
	for _, w := range []string{"pore volumes injected", "transducer", "connected ganglia", UnitPressure} {
		if !strings.Contains(string(svg), w) {
			t.Errorf("figure lacks %q", w)
		}
	}
	rows[n-1].PoreVolumesInjected = nil
	rows[n-1].RigDiffPressure = nil
	svg, _ = render(t, byName(Build(rows, nil, Run{}), "experiment_log"))
	if l := first(svgPaths(string(svg), Palette.Sky)); !has(l, n-1) || has(l, n) {
		t.Errorf("S_w–PV with the last step outside the log: %v, want %d vertices", l, n-1)
	}
	if l := first(svgPaths(string(svg), Palette.Amber)); !has(l, n) {
		t.Errorf("image Pc lost a step: %v", l)
	}
}
