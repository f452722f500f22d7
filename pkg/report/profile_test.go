package report

import (
	"encoding/json"
	"regexp"
	"strings"
	"testing"
)

// TestFrontTable: the front table shows each step's front in mm and the
// velocity from the previous step in µm/s (Source: by hand, (1.9 − 1.0) mm
// / 45 s = 20 µm/s; (1.0 − 1.9) mm / 45 s = −20 µm/s), blank where
// undefined, the profile's threshold in the definition, and the map in the
// profile section.
func TestFrontTable(t *testing.T) {
	rows := campaign(4)
	rows[0].FrontPosition = fp(1e-3)
	rows[1].FrontPosition = fp(1.9e-3)
	rows[2].FrontPosition = fp(1e-3)
	rows[3].FrontPosition = nil
	rows[1].Extra = map[string]json.RawMessage{"saturation_profile": json.RawMessage(
		`{"axis":"z","bin_width_m":1e-4,"front_threshold":0.1,"position_m":[5e-5],"saturation_nonwetting":[0.5]}`)}
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows}))
	start := strings.Index(page, `<table id="front-table">`)
	if start < 0 {
		t.Fatal("no front table")
	}
	table := page[start : start+strings.Index(page[start:], "</table>")]
	re := regexp.MustCompile(`<tr data-step="(s\d+)"><td>[^<]*</td><td>[^<]*</td><td>([^<]*)</td><td>([^<]*)</td></tr>`)
	got := map[string][2]string{}
	for _, m := range re.FindAllStringSubmatch(table, -1) {
		got[m[1]] = [2]string{m[2], m[3]}
	}
	want := map[string][2]string{"s000": {"1.000", "—"}, "s001": {"1.900", "20.000"}, "s002": {"1.000", "-20.000"}, "s003": {"—", "—"}}
	for s, w := range want {
		if got[s] != w {
			t.Errorf("%s: front, velocity %v, want %v", s, got[s], w)
		}
	}
	if !strings.Contains(page, "whose S_n exceeds 0.1 ") {
		t.Error("definition does not name the profile's threshold 0.1")
	}
	sec := page[strings.Index(page, `<section id="profile">`):]
	sec = sec[:strings.Index(sec, "</section>")]
	if !strings.Contains(sec, `id="fig-saturation_profile"`) {
		t.Error("profile map not in the profile section")
	}
}
