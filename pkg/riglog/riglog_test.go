package riglog

import (
	"encoding/json"
	"math"
	"strings"
	"testing"

	"sluice/pkg/series"
)

func col(name, unit string) *Column { return &Column{Column: name, Unit: unit} }

// TestParseUnitsSI: every mapped column is converted to SI as declared,
// the clock offset is added to the times and the injected volume counts
// from the first record.
//
// Sources of the factors: SI prefixes (BIPM SI Brochure, 9th ed.),
// 1 bar = 1e5 Pa, 0 °C = 273.15 K, 1 psi = 6894.757293168361 Pa (NIST
// SP 811, Appendix B: 1 lbf/in²). Expected values worked by hand.
func TestParseUnitsSI(t *testing.T) {
	cfg := Config{
		Columns: Columns{
			Time: Column{"t", "min"}, InjectedVolume: col("V", "ml"), DifferentialPressure: col("dP", "psi"),
			PorePressure: col("Pp", "bar"), ConfiningPressure: col("Pconf", "MPa"), Temperature: col("T", "degC"),
		},
		Delimiter:    ";",
		ClockOffsetS: 10,
	}
	csv := "# rig 7, pump A\nt ; V ; dP ; Pp ; Pconf ; T ; note\n0.5;1.5;2;3;1.5;20;x\n1;2.25;;3.5;1.5;21.5;y\n"
	l, err := Parse("rig.csv", []byte(csv), cfg)
	if err != nil {
		t.Fatal(err)
	}
	want := map[string][]float64{
		"time":   {40, 70},                            // 0.5 min = 30 s, 1 min = 60 s, + 10 s
		"volume": {0, 0.75e-6},                        // (2.25 − 1.5) ml
		"dp":     {2 * 6894.757293168361, math.NaN()}, // 2 psi; blank
		"pp":     {3e5, 3.5e5},                        // bar
		"pconf":  {1.5e6, 1.5e6},                      // MPa
		"temp":   {293.15, 294.65},                    // °C + 273.15
		"lines":  {3, 4},
	}
	got := map[string][]float64{"time": l.Time, "volume": l.Volume, "dp": l.DiffPress, "pp": l.PorePress,
		"pconf": l.ConfinPress, "temp": l.Temperature, "lines": {float64(l.Lines[0]), float64(l.Lines[1])}}
	for k, w := range want {
		g := got[k]
		if len(g) != len(w) {
			t.Fatalf("%s: %v, want %v", k, g, w)
		}
		for i := range w {
			if !(math.IsNaN(w[i]) && math.IsNaN(g[i])) && math.Abs(g[i]-w[i]) > 1e-12*math.Abs(w[i]) {
				t.Errorf("%s[%d] = %.17g, want %.17g", k, i, g[i], w[i])
			}
		}
	}
	if l.Rate != nil {
		t.Error("rate present without a rate column")
	}
	// A rate-only log: 60 µl/min = 1e-9 m³/s held for 200 s is 2e-7 m³
	// (trapezoid rule over the records).
	cfg = Config{Columns: Columns{Time: Column{"time_s", "s"}, Rate: col("Q", "ul/min")}}
	l, err = Parse("pump.csv", []byte("time_s,Q\n0,60\n100,60\n200,60\n"), cfg)
	if err != nil {
		t.Fatal(err)
	}
	if v := l.Volume[2]; math.Abs(v-2e-7) > 1e-21 {
		t.Errorf("integrated volume %.17g m³, want 2e-7", v)
	}
	if r := l.Rate[1]; math.Abs(r-1e-9) > 1e-24 {
		t.Errorf("rate %.17g m³/s, want 1e-9", r)
	}
}

// TestAtInterpolation: linear and previous-value interpolation between
// records, nothing outside the log's span, and the rate from the volume's
// slope (all worked by hand).
func TestAtInterpolation(t *testing.T) {
	cfg := Config{Columns: Columns{Time: Column{"t", "s"}, InjectedVolume: col("V", "m3"), DifferentialPressure: col("dP", "Pa")}}
	l, err := Parse("r.csv", []byte("t,V,dP\n0,0,100\n10,5e-6,200\n20,15e-6,400\n"), cfg)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		t, dpLin, dpPrev, vLin, rate float64
	}{
		{15, 300, 200, 10e-6, 1e-6},  // halfway between 10 and 20 s
		{10, 200, 200, 5e-6, 0.5e-6}, // on a record: the interval ending there
		{0, 100, 100, 0, 0.5e-6},     // first record: the first interval
		{20, 400, 400, 15e-6, 1e-6},  // last record
		{2.5, 125, 100, 1.25e-6, 0.5e-6},
	} {
		lin, prev := l.At(c.t, Linear), l.At(c.t, Previous)
		if math.Abs(lin.DiffPress-c.dpLin) > 1e-9 || math.Abs(prev.DiffPress-c.dpPrev) > 1e-9 ||
			math.Abs(lin.Volume-c.vLin) > 1e-18 || math.Abs(lin.Rate-c.rate) > 1e-18 {
			t.Errorf("t = %g: dP %g/%g, V %g, q %g; want %g/%g, %g, %g", c.t, lin.DiffPress, prev.DiffPress, lin.Volume, lin.Rate,
				c.dpLin, c.dpPrev, c.vLin, c.rate)
		}
	}
	for _, tt := range []float64{-1, 20.5} {
		if s := l.At(tt, Linear); !math.IsNaN(s.Volume) || !math.IsNaN(s.DiffPress) || !math.IsNaN(s.Rate) {
			t.Errorf("t = %g outside the log: %+v", tt, s)
		}
	}
}

// waterRow is a step of a sample of known geometry: porosity 0.25, bulk
// volume 8e-9 m³ imaged as 200³ voxels of 10 µm (2 mm along z), σ of
// water–air.
func waterRow(step string, t float64) series.Row {
	r := series.Row{Step: step, Time: t}
	phi, h, ift, axis := 0.25, 1e-5, 0.07275, "z"
	r.Porosity, r.VoxelSize, r.IFT, r.FlowAxis = &phi, &h, &ift, &axis
	r.Extra = map[string]json.RawMessage{"bulk_volume_m3": json.RawMessage("8e-9"), "shape_zyx": json.RawMessage("[200,200,200]")}
	return r
}

// TestApplyHandComputed: pore volumes injected and capillary number of a
// pump at constant rate, worked by hand.
//
// Pore volume V_p = φ·V_bulk = 0.25 × 8e-9 = 2e-9 m³; cross-section
// A = V_bulk / L = 8e-9 / 2e-3 = 4e-6 m². Pump 1.2 µl/min = 2e-11 m³/s:
// after 50 s, 1e-9 m³ = 0.5 PV; Darcy flux v = 2e-11/4e-6 = 5e-6 m/s;
// Ca = μv/σ with μ = 1.0016e-3 Pa·s (water at 20 °C; CRC Handbook of
// Chemistry and Physics, from memory) and σ = 0.07275 N/m (water–air at
// 20 °C, CRC Handbook, science.md): 5.008e-9/0.07275 = 6.88385e-8.
func TestApplyHandComputed(t *testing.T) {
	cfg := Config{Columns: Columns{Time: Column{"t", "s"}, Rate: col("Q", "ul/min"), DifferentialPressure: col("dP", "kPa")},
		ViscosityPaS: 1.0016e-3, Interpolation: Previous}
	l, err := Parse("r.csv", []byte("t,Q,dP\n0,1.2,1\n25,1.2,2\n50,1.2,3\n75,1.2,4\n100,1.2,5\n"), cfg)
	if err != nil {
		t.Fatal(err)
	}
	rows := []series.Row{waterRow("s0", 0), waterRow("s1", 50), waterRow("s2", 60), waterRow("s3", 130)}
	g := Apply(rows, l, cfg)
	if math.Abs(g.PoreVolume-2e-9) > 1e-24 || math.Abs(g.Area-4e-6) > 1e-20 {
		t.Fatalf("geometry %+v, want V_p 2e-9 m³, A 4e-6 m²", g)
	}
	r := rows[1]
	if r.PoreVolumesInjected == nil || math.Abs(*r.PoreVolumesInjected-0.5) > 1e-12 {
		t.Errorf("PV at 50 s = %v, want 0.5", r.PoreVolumesInjected)
	}
	if r.DarcyFlux == nil || math.Abs(*r.DarcyFlux-5e-6) > 1e-18 {
		t.Errorf("Darcy flux %v, want 5e-6 m/s", r.DarcyFlux)
	}
	if r.CapillaryNumber == nil || math.Abs(*r.CapillaryNumber/6.88385e-8-1) > 1e-5 {
		t.Errorf("Ca = %v, want 6.88385e-8", r.CapillaryNumber)
	}
	if r.RigDiffPressure == nil || *r.RigDiffPressure != 3000 {
		t.Errorf("dP at 50 s = %v, want 3000 Pa", r.RigDiffPressure)
	}
	// Previous value at 60 s: the record of 50 s (3 kPa), volume by the
	// linear integral is held as well: 1e-9 m³ at 50 s.
	if p := rows[2].RigDiffPressure; p == nil || *p != 3000 {
		t.Errorf("dP at 60 s (previous) = %v, want 3000 Pa", p)
	}
	if p := rows[2].PoreVolumesInjected; p == nil || math.Abs(*p-0.5) > 1e-12 {
		t.Errorf("PV at 60 s (previous) = %v, want 0.5", p)
	}
	if rows[3].PoreVolumesInjected != nil || rows[3].CapillaryNumber != nil {
		t.Error("a step after the last record got values")
	}
	// Given geometry wins over the images; no σ, no Ca; no log clears.
	cfg.PoreVolumeM3, cfg.AreaM2 = 4e-9, 1e-6
	rows[1].IFT = nil
	Apply(rows, l, cfg)
	if p := rows[1].PoreVolumesInjected; p == nil || math.Abs(*p-0.25) > 1e-12 {
		t.Errorf("PV with V_p given = %v, want 0.25", p)
	}
	if v := rows[1].DarcyFlux; v == nil || math.Abs(*v-2e-5) > 1e-17 {
		t.Errorf("flux with A given = %v, want 2e-5", v)
	}
	if rows[1].CapillaryNumber != nil {
		t.Error("Ca without σ")
	}
	Apply(rows, nil, cfg)
	if rows[1].PoreVolumesInjected != nil || rows[1].RigDiffPressure != nil {
		t.Error("values left after Apply without a log")
	}
}

// TestRefusals: each way a log can be misread is refused in one line that
// names the file and, for a record, its line.
func TestRefusals(t *testing.T) {
	base := Config{Columns: Columns{Time: Column{"t", "s"}, InjectedVolume: col("V", "ml"), DifferentialPressure: col("dP", "kPa")}}
	good := "t,V,dP\n0,0,1\n10,1,2\n20,2,3\n"
	if _, err := Parse("rig.csv", []byte(good), base); err != nil {
		t.Fatalf("the good log is refused: %v", err)
	}
	unit := base
	unit.Columns.DifferentialPressure = col("dP", "kpa")
	for _, c := range []struct {
		name string
		data string
		cfg  Config
		want []string
	}{
		{"bad row", "t,V,dP\n0,0,1\n10,1,2\n20,2,abc\n", base, []string{"rig.csv line 4", `"abc" is not a number`}},
		{"unknown unit", good, unit, []string{"rig.csv", `unknown unit "kpa"`, "kPa"}},
		{"time backwards", "t,V,dP\n0,0,1\n10,1,2\n5,2,3\n", base, []string{"rig.csv line 4", "time 5", "previous record's (10)", "must increase"}},
		{"time repeated", "t,V,dP\n0,0,1\n10,1,2\n10,2,3\n", base, []string{"rig.csv line 4", "must increase"}},
		{"field count", "t,V,dP\n0,0,1\n10,1\n", base, []string{"rig.csv line 3", "2 fields, the header has 3"}},
		{"missing column", "t,Vol,dP\n0,0,1\n", base, []string{"rig.csv line 1", `column "V" (injected_volume) is not in the header`}},
		{"blank time", "t,V,dP\n0,0,1\n,1,2\n", base, []string{"rig.csv line 3", "is empty"}},
		{"clock time", "t,V,dP\n2026-12-05T10:00:00,0,1\n", base, []string{"rig.csv line 2", "is not a number"}},
		{"no unit", good, Config{Columns: Columns{Time: Column{"t", ""}, Rate: col("V", "ml/min")}}, []string{"rig.csv", "columns.time: no unit declared"}},
		{"no header", "\n# nothing\n", base, []string{"rig.csv: no header line"}},
	} {
		_, err := Parse("rig.csv", []byte(c.data), c.cfg)
		if err == nil {
			t.Errorf("%s: accepted", c.name)
			continue
		}
		msg := err.Error()
		if strings.ContainsAny(msg, "\n\r") {
			t.Errorf("%s: message on more than one line: %q", c.name, msg)
		}
		for _, w := range c.want {
			if !strings.Contains(msg, w) {
				t.Errorf("%s: %q lacks %q", c.name, msg, w)
			}
		}
	}
}

// TestParseComplete: a last line the rig is still writing is left out
// until its line end arrives; Parse reads it.
func TestParseComplete(t *testing.T) {
	cfg := Config{Columns: Columns{Time: Column{"t", "s"}, Rate: col("Q", "ml/min")}}
	data := []byte("t,Q\n0,1\n10,1\n20,1.")
	l, err := ParseComplete("r.csv", data, cfg)
	if err != nil || l.Len() != 2 {
		t.Fatalf("partial line: %d records, %v", l.Len(), err)
	}
	l, err = Parse("r.csv", data, cfg)
	if err != nil || l.Len() != 3 || l.Rate[2] != 1e-6/60 {
		t.Fatalf("whole file: %v, %v", l, err)
	}
}
