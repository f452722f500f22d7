package plots

import (
	"encoding/json"
	"fmt"
	"math"
	"testing"

	"sluice/pkg/series"
)

// TestProfileMap: one filled cell per step and profile bin with pore space,
// in the colour of its S_n (ProfileColour: white 0 → Ink 1), none for null
// bins, and the front drawn as one line through every step.
func TestProfileMap(t *testing.T) {
	sn := [][]string{{"1", "0.5", "0", "null"}, {"1", "1", "0.5", "null"}, {"1", "1", "1", "0.5"}}
	var rows []series.Row
	for i, s := range sn {
		prof := fmt.Sprintf(`{"axis":"x","bin_width_m":0.001,"front_threshold":0.05,"position_m":[0.0005,0.0015,0.0025,0.0035],"saturation_nonwetting":[%s,%s,%s,%s]}`, s[0], s[1], s[2], s[3])
		r := series.Row{Step: fmt.Sprintf("s%d", i), Time: 60 * float64(i)}
		r.Extra = map[string]json.RawMessage{"saturation_profile": json.RawMessage(prof)}
		r.FrontPosition = fp(float64(i+2) * 0.001)
		rows = append(rows, r)
	}
	f := byName(Build(rows, nil, Run{}), "saturation_profile")
	if f.empty {
		t.Fatal("profile figure empty")
	}
	svg, _ := render(t, f)
	// Source: the rows above (S_n = 1: 1 + 2 + 3 cells; 0.5: one per step).
	if _, n := svgPaths(string(svg), ProfileColour(1)); n != 6 {
		t.Errorf("%d cells in the colour of S_n = 1, want 6", n)
	}
	if _, n := svgPaths(string(svg), ProfileColour(0.5)); n != 3 {
		t.Errorf("%d cells in the colour of S_n = 0.5, want 3", n)
	}
	if lines, _ := svgPaths(string(svg), Palette.Amber); len(lines) == 0 || lines[0] != 3 {
		t.Errorf("front line vertices %v, want 3 first", lines)
	}
	if c := ProfileColour(1); c != Palette.Ink {
		t.Errorf("S_n 1 is %v, want Ink", c)
	}
	// A thinner last bin: 7 slices of 1 µm in bins of 3 give bins [0, 3),
	// [3, 6) and [6, 7) µm (centres 1.5, 4.5, 6.5 µm), the last null-free.
	one := 1.0
	cs := profileCells(&series.Profile{BinWidth: 3e-6, Position: []float64{1.5e-6, 4.5e-6, 6.5e-6},
		SatNonwetting: []*float64{&one, nil, &one}}, 0, 1)
	if len(cs) != 2 || math.Abs(cs[0].y0) > 1e-15 || math.Abs(cs[0].y1-3e-3) > 1e-15 ||
		math.Abs(cs[1].y0-6e-3) > 1e-15 || math.Abs(cs[1].y1-7e-3) > 1e-15 {
		t.Errorf("cells %+v, want [0, 3e-3] and [6e-3, 7e-3] mm", cs)
	}
	if lo, hi := span([]float64{0, 60, 180}, 1); lo != 30 || hi != 120 {
		t.Errorf("span of the middle step: %g…%g", lo, hi)
	}
	// Without profiles the figure is drawn empty.
	if f := byName(Build(drainage(3, -1)[:0], nil, Run{}), "saturation_profile"); !f.empty {
		t.Error("no rows: figure not marked empty")
	}
}
