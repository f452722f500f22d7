package plots

import (
	"strings"
	"testing"
)

// TestGeometricStateFigure: two panels against S_w, each a line through
// every step in its own colour (J_wn Ink, χ_n Amber), with the units per
// bulk volume on the axes; a step without J_wn breaks that line only.
func TestGeometricStateFigure(t *testing.T) {
	const n = 9
	rows := drainage(n, -1)
	f := byName(Build(rows, nil, Run{}), "geometric_state")
	if f.empty || len(f.panels) != 2 {
		t.Fatalf("figure empty %v with %d panels", f.empty, len(f.panels))
	}
	svg, _ := render(t, f)
	for _, c := range []struct {
		name  string
		lines []int
	}{
		{"J_wn (Ink)", first(svgPaths(string(svg), Palette.Ink))},
		{"χ_n (Amber)", first(svgPaths(string(svg), Palette.Amber))},
	} {
		if !has(c.lines, n) {
			t.Errorf("%s: no line through %d steps (unfilled paths with %v vertices)", c.name, n, c.lines)
		}
	}
	for _, u := range []string{UnitMeanCurvDensity, UnitEulerDensity, "wetting saturation S_w"} {
		if !strings.Contains(string(svg), u) {
			t.Errorf("axis label %q missing", u)
		}
	}
	rows[4].SpecificMeanCurvWN = nil
	svg, _ = render(t, byName(Build(rows, nil, Run{}), "geometric_state"))
	if l := first(svgPaths(string(svg), Palette.Ink)); has(l, n) || !has(l, 4) {
		t.Errorf("J_wn with step 4 null: lines %v, want two of 4 vertices", l)
	}
	if l := first(svgPaths(string(svg), Palette.Amber)); !has(l, n) {
		t.Errorf("χ_n lost its line when J_wn was null: %v", l)
	}
}

func first(lines []int, _ int) []int { return lines }

func has(v []int, x int) bool {
	for _, e := range v {
		if e == x {
			return true
		}
	}
	return false
}
