package report

import (
	"encoding/json"
	"regexp"
	"strings"
	"testing"
)

// TestTrackingTable: the tracking table shows the links, trapped
// saturation, moved fraction, mean lifetime and the longest-lived trapped
// ganglion as stored (Source: the rows below), dashes and the note where
// tracking was not possible, and the figure in its section.
func TestTrackingTable(t *testing.T) {
	rows := campaign(3)
	rows[1].Extra = map[string]json.RawMessage{"ganglion_tracking": json.RawMessage(
		`{"previous_step":"s000","one_to_one":4,"splits":1,"merges":0,"appeared":2,"vanished":3,"trapped_saturation":0.0125,"trapped_moved_fraction":0.5,"trapped_lifetime_mean_s":22.5,
		"trapped":[{"voxels":300,"sum_zyx":[0,0,0],"born_step":"s001","born_s":45,"lifetime_s":0,"moved":false},{"voxels":80,"sum_zyx":[1,1,1],"born_step":"s000","born_s":0,"lifetime_s":45,"moved":true}]}`)}
	rows[2].Extra = map[string]json.RawMessage{"ganglion_tracking": json.RawMessage(
		`{"previous_step":"s001","one_to_one":0,"splits":0,"merges":0,"appeared":0,"vanished":0,"trapped_saturation":null,"trapped_moved_fraction":null,"trapped_lifetime_mean_s":null,"trapped":[],"note":"previous step s001 failed"}`)}
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows}))
	start := strings.Index(page, `<table id="tracking-table">`)
	if start < 0 {
		t.Fatal("no tracking table")
	}
	table := page[start : start+strings.Index(page[start:], "</table>")]
	re := regexp.MustCompile(`<tr data-step="(s\d+)">((?:<td>[^<]*</td>)+)</tr>`)
	got := map[string]string{}
	for _, m := range re.FindAllStringSubmatch(table, -1) {
		got[m[1]] = strings.ReplaceAll(strings.TrimSuffix(strings.TrimPrefix(m[2], "<td>"), "</td>"), "</td><td>", "|")
	}
	want := map[string]string{
		"s000": "s000|0.0|—|—|—|—|—|—",
		"s001": "s001|45.0|s000|4 / 1 / 0 / 2 / 3|0.0125|0.500|22.5|80 voxels, since s000 (45.0 s)",
		"s002": "s002|90.0|s001|—|—|—|—|— (previous step s001 failed)",
	}
	for s, w := range want {
		if got[s] != w {
			t.Errorf("%s:\n got %s\nwant %s", s, got[s], w)
		}
	}
	sec := page[strings.Index(page, `<section id="ganglion-tracking">`):]
	sec = sec[:strings.Index(sec, "</section>")]
	if !strings.Contains(sec, `id="fig-ganglion_tracking"`) {
		t.Error("tracking figure not in its section")
	}
}
