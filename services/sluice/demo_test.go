package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/series"
	"sluice/pkg/store"
)

// TestDemoSmall runs `sluice demo` end to end on a small campaign: the scan
// generator, the watcher, ingest, workers and aggregator run concurrently in
// one process, so under -race (make test-race) this is the check that the
// demo's own goroutines share nothing unguarded.
func TestDemoSmall(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "demo")
	const steps = 8
	code, out, errs := runCLI(t, "demo", "--size", "64", "--steps", "8", "--tile", "32", "--workers", "2",
		"--data", dir, "--http", "127.0.0.1:0")
	if code != exitOK {
		t.Fatalf("sluice demo: exit %d\nstdout:\n%s\nstderr:\n%s", code, out, errs)
	}
	// The demo keeps its own directory; its summary must say which --data
	// the other commands need (their default is sluice-data).
	if want := "sluice report --data " + dir + " demo-drainage"; !strings.Contains(out, want) {
		t.Errorf("demo summary does not tell the user %q:\n%s", want, out)
	}
	if n := strings.Count(out, "\nstep "); n != steps {
		t.Errorf("demo printed %d step lines, want %d:\n%s", n, steps, out)
	}
	st, err := store.NewLocal(filepath.Join(dir, "store"))
	if err != nil {
		t.Fatal(err)
	}
	rows, err := series.Load(context.Background(), st, "demo-drainage")
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != steps {
		t.Fatalf("series has %d rows, want %d", len(rows), steps)
	}
	// The report shows each step's own thresholds and sample cylinder, as
	// its plan under the current parameter hash holds them.
	page, err := os.ReadFile(filepath.Join(dir, "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	// The demo measures contact angles with the wall gap off, so the
	// report cautions about the layers on the rock.
	if angles := anyAngles(rows); angles != strings.Contains(string(page), "measure.contact_wall_gap 0") {
		t.Errorf("steps with contact angles: %v; the report's wall-gap caution: %v", angles, !angles)
	}
	c, _ := layout.NewCampaign("demo-drainage")
	rec, err := campaign.LoadRecord(context.Background(), st, c)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rows {
		s, _ := c.Step(r.Step)
		var plan campaign.Plan
		if err := campaign.GetJSON(context.Background(), st, campaign.PlanKey(s, rec.Current), &plan); err != nil {
			t.Fatal(err)
		}
		th := plan.Thresholds
		var ts []string
		for _, v := range th.T {
			ts = append(ts, strconv.FormatFloat(v, 'g', 6, 64))
		}
		want := fmt.Sprintf(`<td class="thr">%s</td>`, strings.Join(ts, ", "))
		m := regexp.MustCompile(`(?s)<tr data-settings="` + regexp.QuoteMeta(r.Step) + `"[^>]*>(.*?)</tr>`).FindSubmatch(page)
		if m == nil || !strings.Contains(string(m[1]), want) || !strings.Contains(string(m[1]), fmt.Sprintf("<td>%.1f</td><td>%.1f</td><td>%.1f</td>", th.Sample.Y, th.Sample.X, th.Sample.Radius)) {
			t.Errorf("report's row for step %s lacks its plan's thresholds %s and sample %+v:\n%s", r.Step, want, th.Sample, m)
		}
	}
	// The demo's rig log (demorig.go) gives every step pore volumes
	// injected, a capillary number and the transducer's pressure, and the
	// report and figures show them. Mass balance: the gas held in the core
	// is at most what the pump injected (S_n·V_p ≤ V_injected; 0.01 of
	// the pore volume for segmentation noise).
	for _, r := range rows {
		if r.PoreVolumesInjected == nil || r.CapillaryNumber == nil || r.RigDiffPressure == nil || r.RigTemperature == nil {
			t.Fatalf("step %s lacks experiment-log values: PV %v, Ca %v, Δp %v, T %v", r.Step, r.PoreVolumesInjected, r.CapillaryNumber, r.RigDiffPressure, r.RigTemperature)
		}
		if sn := series.F(r.SatNonwetting); sn > *r.PoreVolumesInjected+0.01 {
			t.Errorf("step %s holds S_n %.3f of the pore volume but only %.3f pore volumes were injected", r.Step, sn, *r.PoreVolumesInjected)
		}
	}
	for _, w := range []string{`id="rig-table"`, "rig-log.csv", `id="fig-experiment_log"`, `id="fig-geometric_state"`, `id="state-table"`} {
		if !strings.Contains(string(page), w) {
			t.Errorf("report lacks %s", w)
		}
	}
	// Drainage: the nonwetting phase only invades, so its saturation never
	// falls from one step to the next (common practice: a drainage series
	// is monotone in S_nw up to segmentation noise; 0.01 allows for that).
	// The last demoImbibitionSteps steps are imbibition: S_nw never rises
	// there and has fallen by the end.
	imb := steps - demoImbibitionSteps(steps)
	for i := 1; i < len(rows); i++ {
		a, b := rows[i-1].SatNonwetting, rows[i].SatNonwetting
		if a == nil || b == nil {
			t.Fatalf("step %s or %s has no S_nw", rows[i-1].Step, rows[i].Step)
		}
		if i < imb && *b < *a-0.01 {
			t.Errorf("S_nw fell from %.3f (%s) to %.3f (%s) during drainage", *a, rows[i-1].Step, *b, rows[i].Step)
		}
		if i >= imb && *b > *a+0.01 {
			t.Errorf("S_nw rose from %.3f (%s) to %.3f (%s) during imbibition", *a, rows[i-1].Step, *b, rows[i].Step)
		}
	}
	if imb < steps && !(*rows[steps-1].SatNonwetting < *rows[imb-1].SatNonwetting-0.01) {
		t.Errorf("S_nw %.3f after imbibition, %.3f before", *rows[steps-1].SatNonwetting, *rows[imb-1].SatNonwetting)
	}
}
