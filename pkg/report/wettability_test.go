package report

import (
	"encoding/json"
	"regexp"
	"strings"
	"testing"
)

// TestAngleTable: the wettability table shows per step the geometric mean ±
// SE, the median with the 25–75 % range of the step's angle histogram, and
// the thermodynamic angle ± SE with its cosine, and the section holds the
// contact_angles figure and names the source. Source: by hand — histogram
// 3 samples in [40, 41)° and 1 in [70, 71)°, uniform within a bin:
// quartiles 40 + 1/3, 40 + 2/3, 41.0; energy balance cos θ = (1000 Pa ·
// 1e-15 m³ / 0.05 N/m − 1e-11 m²) / 5e-11 m² = 0.2, θ = 78.46°, SE =
// 1e-15/(0.05·5e-11)·½√(10² + 10²) / sin θ = 0.165°. The topological
// angle (72.25°, median 70.04°, 3 ganglia) is shown as stored, rounded.
func TestAngleTable(t *testing.T) {
	rows := campaign(2)
	h := make([]int64, 180)
	h[40], h[70] = 3, 1
	rows[1].AngleHist = h
	rows[1].AngleMean, rows[1].AngleMeanSE = fp(47.5), fp(1.3)
	three := int64(3)
	rows[1].AngleTopo, rows[1].AngleTopoMedian, rows[1].AngleTopoCount = fp(72.25), fp(70.04), &three
	for i, r := range []struct{ n, awn, ans float64 }{{1000, 1e-9, 2e-9}, {2000, 1.01e-9, 2.05e-9}} {
		raw, _ := json.Marshal(int64(r.n))
		rows[i].Extra = map[string]json.RawMessage{"voxels_nonwetting": raw}
		rows[i].VoxelSize, rows[i].AreaWN, rows[i].AreaNS = fp(1e-6), fp(r.awn), fp(r.ans)
		rows[i].IFT, rows[i].PcConnected, rows[i].PcConnectedSE = fp(0.05), fp(1000), fp(10)
	}
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 1e-6}, Rows: rows}))
	start := strings.Index(page, `<section id="wettability">`)
	if start < 0 {
		t.Fatal("no wettability section")
	}
	sec := page[start : start+strings.Index(page[start:], "</section>")]
	re := regexp.MustCompile(`<tr data-step="(s\d+)"><td>[^<]*</td><td>[^<]*</td><td>([^<]*)</td><td>([^<]*)</td><td>([^<]*)</td><td>([^<]*)</td><td>([^<]*)</td><td>([^<]*)</td></tr>`)
	got := map[string][6]string{}
	for _, m := range re.FindAllStringSubmatch(sec, -1) {
		got[m[1]] = [6]string{m[2], m[3], m[4], m[5], m[6], m[7]}
	}
	want := map[string][6]string{
		"s001": {"47.5 ± 1.3", "40.7 (40.3–41.0)", "78.5 ± 0.2", "0.200", "72.2 (median 70.0)", "3"},
	}
	for s, w := range want {
		if got[s] != w {
			t.Errorf("%s: %q, want %q", s, got[s], w)
		}
	}
	if g := got["s000"]; g[2] != "—" || g[3] != "—" {
		t.Errorf("first step has a thermodynamic angle: %q", g)
	}
	if g := got["s000"]; g[4] != "—" || g[5] != "—" {
		t.Errorf("first step has a topological angle: %q", g)
	}
	for _, s := range []string{`id="fig-contact_angles"`, "Blunt, Lin, Akai &amp; Bijeljic 2019", "552:59", "Gauss–Bonnet", "47:e2019GL086151"} {
		if !strings.Contains(sec, s) {
			t.Errorf("wettability section lacks %s", s)
		}
	}
}
