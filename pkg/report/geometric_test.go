package report

import (
	"regexp"
	"strings"
	"testing"
)

// TestStateTable: the geometric-state table converts each step's values
// to the units of its header (Source: by hand — J_wn 3.2e-3 m = 3.2 mm;
// 2.5e6 m/m³ = 2.5 mm/mm³; a_wn 1500 1/m = 1.5 mm²/mm³; χ_n/V −4e9 1/m³ =
// −4 1/mm³), shows dashes for nulls, gives the definition with its source
// and holds the trajectory figure.
func TestStateTable(t *testing.T) {
	rows := campaign(2)
	chi := int64(-17)
	rows[0].SatWetting, rows[0].SpecificWN = fp(0.75), fp(1500)
	rows[0].MeanCurvIntegralWN, rows[0].SpecificMeanCurvWN = fp(3.2e-3), fp(2.5e6)
	rows[0].EulerNonwetting, rows[0].SpecificEulerNonwetting = &chi, fp(-4e9)
	rows[1].MeanCurvIntegralWN, rows[1].SpecificMeanCurvWN, rows[1].SpecificEulerNonwetting = nil, nil, nil
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows}))
	start := strings.Index(page, `<section id="geometric-state">`)
	if start < 0 {
		t.Fatal("no geometric-state section")
	}
	sec := page[start : start+strings.Index(page[start:], "</section>")]
	re := regexp.MustCompile(`<tr data-step="s000">(?:<td[^>]*>[^<]*</td>){2}<td>([^<]*)</td><td>([^<]*)</td><td>([^<]*)</td><td>([^<]*)</td><td>([^<]*)</td><td>([^<]*)</td></tr>`)
	m := re.FindStringSubmatch(sec)
	if m == nil {
		t.Fatalf("no row for s000 in %s", sec)
	}
	if got, want := strings.Join(m[1:], " "), "0.7500 1.500 3.2 2.5 -17 -4"; got != want {
		t.Errorf("s000: %q, want %q", got, want)
	}
	re1 := regexp.MustCompile(`<tr data-step="s001">(?:<td[^>]*>[^<]*</td>){4}<td>([^<]*)</td><td>([^<]*)</td><td>[^<]*</td><td>([^<]*)</td></tr>`)
	if m := re1.FindStringSubmatch(sec); m == nil || m[1] != "—" || m[2] != "—" || m[3] != "—" {
		t.Errorf("s001 nulls: %v", m)
	}
	for _, want := range []string{"Phys. Rev. Fluids 3:084306", "J_wn = ∫H dA", "4πr", `id="fig-geometric_state"`} {
		if !strings.Contains(sec, want) {
			t.Errorf("section lacks %q", want)
		}
	}
}
