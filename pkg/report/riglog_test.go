package report

import (
	"regexp"
	"strings"
	"testing"
)

// TestRigTable: the experiment-log table converts each step's values to
// the units of its header (Source: by hand — 2e-11 m³/s = 1.2e-3 ml/min;
// 5e-6 m/s = 5 µm/s; 3000 Pa = 3 kPa; 8e6 Pa = 8 MPa; 308.15 K =
// 35 °C; V_p 2e-9 m³ = 2 mm³; A 4e-6 m² = 4 mm²), with dashes outside
// the log, and states the definitions, the interpolation and the sources.
func TestRigTable(t *testing.T) {
	rows := campaign(2)
	r := &rows[0]
	r.PoreVolumesInjected, r.RigRate, r.DarcyFlux, r.CapillaryNumber = fp(0.5), fp(2e-11), fp(5e-6), fp(6.88385e-8)
	r.RigDiffPressure, r.PcConnected, r.RigPorePressure, r.RigConfiningPressure = fp(3000), fp(2500), fp(8e6), fp(1.2e7)
	r.RigTemperature, r.RigPoreVolume, r.RigArea = fp(308.15), fp(2e-9), fp(4e-6)
	rows[1].PcConnected = nil
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows,
		RigLog: &RigLog{File: "rig.csv", Records: 5, Interpolation: "linear", ClockOffsetS: -12, ViscosityPaS: 1.0016e-3,
			PoreVolumeFrom: "porosity × imaged bulk volume of step s000", AreaFrom: "given"}}))
	start := strings.Index(page, `<section id="experiment-log">`)
	if start < 0 {
		t.Fatal("no experiment-log section")
	}
	sec := page[start : start+strings.Index(page[start:], "</section>")]
	re := regexp.MustCompile(`<tr data-step="(s00\d)"><td class="step">[^<]*</td><td>[^<]*</td>((?:<td>[^<]*</td>){9})</tr>`)
	got := map[string]string{}
	for _, m := range re.FindAllStringSubmatch(sec, -1) {
		got[m[1]] = strings.NewReplacer("<td>", "", "</td>", " ").Replace(m[2])
	}
	if want := "0.500 0.0012 5 6.88e-08 3.000 2.500 8 12 35.00 "; got["s000"] != want {
		t.Errorf("s000: %q, want %q", got["s000"], want)
	}
	if want := "— — — — — — — — — "; got["s001"] != want {
		t.Errorf("s001: %q, want %q", got["s001"], want)
	}
	for _, w := range []string{"rig.csv", "5 records", "plus -12 s", "linearly", "(2 mm³: porosity × imaged bulk volume of step s000)",
		"(4 mm²: given)", "Ca = μv/σ", "0.0010016 Pa·s", "Adv. Water Resour. 46:55", `id="fig-experiment_log"`} {
		if !strings.Contains(sec, w) {
			t.Errorf("section lacks %q", w)
		}
	}
	// Without a rig log the section says how to give one.
	page = string(render(t, Input{Params: Params{Campaign: "c"}, Rows: campaign(2)}))
	if !strings.Contains(page, "No rig log") || !strings.Contains(page, "sluice rig-log CAMPAIGN FILE") {
		t.Error("no-log text missing")
	}
}
