package report

import (
	"encoding/json"
	"regexp"
	"strings"
	"testing"
)

// TestFillingTable: the pore-filling table shows each step's previous
// step, counts, volumes in µm³ and rates in 1/s as stored, blank (—) for
// the first step with its note, and the largest event of either kind with
// its centroid in mm (Source: by hand, 2.4e-16 m³ = 240 µm³; 0.0125 m →
// 12.500 mm).
func TestFillingTable(t *testing.T) {
	rows := campaign(2)
	rows[0].Extra = map[string]json.RawMessage{"pore_filling": json.RawMessage(
		`{"previous_step":null,"interval_s":null,"connectivity":26,"drainage":null,"imbibition":null,"note":"first step of the run"}`)}
	rows[1].Extra = map[string]json.RawMessage{"pore_filling": json.RawMessage(
		`{"previous_step":"s000","interval_s":45,"connectivity":26,
		"drainage":{"count":3,"voxels":30,"volume_m3":3e-16,"rate_per_s":0.0666666,"volume_histogram":[],"volume_bin_low_m3":[],
			"largest":[{"voxels":24,"volume_m3":2.4e-16,"centroid_zyx_m":[0.0125,0.001,0.002]}]},
		"imbibition":{"count":1,"voxels":5,"volume_m3":5e-17,"rate_per_s":0.0222222,"volume_histogram":[],"volume_bin_low_m3":[],
			"largest":[{"voxels":5,"volume_m3":5e-17,"centroid_zyx_m":[0,0,0]}]}}`)}
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows}))
	start := strings.Index(page, `<table id="filling-table">`)
	if start < 0 {
		t.Fatal("no pore-filling table")
	}
	table := page[start : start+strings.Index(page[start:], "</table>")]
	re := regexp.MustCompile(`<tr data-step="(s\d+)">((?:<td>[^<]*</td>)+)</tr>`)
	got := map[string]string{}
	for _, m := range re.FindAllStringSubmatch(table, -1) {
		got[m[1]] = strings.ReplaceAll(strings.TrimSuffix(strings.TrimPrefix(m[2], "<td>"), "</td>"), "</td><td>", "|")
	}
	want := map[string]string{
		"s000": "s000|0.0|—|—|—|—|—|—|—|—|— (first step of the run)",
		"s001": "s001|45.0|s000|45.0|3|300|0.0667|1|50|0.0222|drainage, 240 µm³ at (12.500, 1.000, 2.000) mm",
	}
	for s, w := range want {
		if got[s] != w {
			t.Errorf("%s:\n got %s\nwant %s", s, got[s], w)
		}
	}
	sec := page[strings.Index(page, `<section id="pore-filling">`):]
	sec = sec[:strings.Index(sec, "</section>")]
	if !strings.Contains(sec, `id="fig-pore_filling"`) {
		t.Error("pore-filling figure not in its section")
	}
}
