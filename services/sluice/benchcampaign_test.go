package main

import (
	"context"
	"encoding/json"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/series"
)

// TestBenchCampaign runs a small `sluice bench campaign` through the real
// all-in-one node and checks its report: every step got exactly one series
// row, and every figure is present and positive. No timing threshold is
// asserted (the machine is shared).
func TestBenchCampaign(t *testing.T) {
	data := filepath.Join(t.TempDir(), "bench")
	code, out, errs := runCLI(t, "bench", "campaign", "--size", "64", "--steps", "3", "--tile", "32", "--base", "64",
		"--workers", "2", "--json", "--keep", "--data", data)
	if code != exitOK {
		t.Fatalf("exit %d\n%s\n%s", code, out, errs)
	}
	var r benchCampaignReport
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatalf("report is not JSON: %v\n%s", err, out)
	}
	if r.Steps != 3 || r.TilesPerStep != 8 || r.VoxelsPerStep != 64*64*64 || r.BytesPerStep != 2*64*64*64 {
		t.Errorf("report header %+v", r)
	}
	// One series row per step, each step once.
	st, err := storeAt(filepath.Join(data, "store"))
	if err != nil {
		t.Fatal(err)
	}
	rows, err := series.Load(context.Background(), st, benchCampaignName)
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]int{}
	for _, row := range rows {
		seen[row.Step]++
	}
	if r.SeriesRows != 3 || len(rows) != 3 || len(seen) != 3 {
		t.Errorf("series rows: report %d, stored %d, distinct steps %v; want 3 each", r.SeriesRows, len(rows), seen)
	}
	if len(r.Results) != 3 {
		t.Fatalf("%d step results, want 3", len(r.Results))
	}
	for _, s := range r.Results {
		if seen[s.Step] != 1 {
			t.Errorf("step %s has %d series rows, want 1", s.Step, seen[s.Step])
		}
		if !(s.LatencyS > 0) || !(s.AggregateS >= 0) || s.AggregateS > s.LatencyS {
			t.Errorf("step %s: latency %g s, aggregate %g s (want latency > 0, 0 ≤ aggregate ≤ latency)", s.Step, s.LatencyS, s.AggregateS)
		}
	}
	if !(r.WallS > 0) || !(r.MVoxPerS > 0) || !(r.LatencyP50S > 0) || r.LatencyP95S < r.LatencyP50S {
		t.Errorf("wall %g s, %g MVox/s, p50 %g s, p95 %g s: want positive, p95 ≥ p50", r.WallS, r.MVoxPerS, r.LatencyP50S, r.LatencyP95S)
	}
	// Every stage of the breakdown is reported with its observations: one
	// per step for ingest, one per tile for workers.
	want := map[string]float64{"ingest/read": 3, "ingest/zarr_write": 3, "ingest/pass1": 3, "ingest/publish": 3,
		"worker/queue_wait": 24, "worker/read": 24, "worker/segment_measure": 24, "worker/write": 24}
	got := map[string]benchStage{}
	for _, s := range r.Stages {
		got[s.Role+"/"+s.Stage] = s
	}
	for k, n := range want {
		s, ok := got[k]
		if !ok {
			t.Errorf("stage %s missing from %+v", k, r.Stages)
			continue
		}
		if s.Count != n {
			t.Errorf("stage %s: %g observations, want %g", k, s.Count, n)
		}
		if !(s.TotalS > 0) && k != "ingest/pass1" {
			t.Errorf("stage %s: total %g s, want > 0", k, s.TotalS)
		}
	}
	if len(r.Processes) != 1 || !(r.Processes[0].PeakRSSMB > 0) {
		t.Errorf("processes %+v: want the node with a positive peak RSS", r.Processes)
	}
}

// TestNearestRank checks the percentile against the nearest-rank
// definition on a hand-worked list.
func TestNearestRank(t *testing.T) {
	// Source: nearest-rank method (common practice): for n = 10, P50 is
	// the 5th smallest value, P95 the 10th.
	xs := []float64{7, 1, 9, 3, 5, 2, 8, 10, 4, 6}
	if got := nearestRank(xs, 50); got != 5 {
		t.Errorf("p50 = %g, want 5", got)
	}
	if got := nearestRank(xs, 95); got != 10 {
		t.Errorf("p95 = %g, want 10", got)
	}
	if got := nearestRank([]float64{3}, 95); got != 3 {
		t.Errorf("p95 of one value = %g, want 3", got)
	}
}

// TestBenchCampaignProcs: with --procs the workers run as separate `sluice
// worker` processes, and --proc-cores limits each to that many cores
// (GOMAXPROCS as the worker's own /metrics reports it); every step still
// gets its series row.
func TestBenchCampaignProcs(t *testing.T) {
	t.Setenv("SLUICE_TEST_AS_CLI", "1") // the worker processes are this test binary (TestMain)
	code, out, errs := runCLI(t, "bench", "campaign", "--size", "64", "--steps", "2", "--tile", "32", "--base", "64",
		"--procs", "2", "--proc-cores", "1", "--workers", "1", "--json")
	if code != exitOK {
		t.Fatalf("exit %d\n%s\n%s", code, out, errs)
	}
	var r benchCampaignReport
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatalf("report is not JSON: %v\n%s", err, out)
	}
	if r.Procs != 2 || r.ProcCores != 1 || r.SeriesRows != 2 || r.Halo <= 0 {
		t.Errorf("report: %d processes, %d cores each, %d series rows, halo %d; want 2, 1, 2, > 0", r.Procs, r.ProcCores, r.SeriesRows, r.Halo)
	}
	workers := 0
	for _, p := range r.Processes {
		if strings.HasPrefix(p.Role, "worker") {
			workers++
			if p.GoMaxProcs != 1 {
				t.Errorf("%s: GOMAXPROCS %d, want 1", p.Role, p.GoMaxProcs)
			}
		}
	}
	if workers != 2 {
		t.Errorf("%d worker processes reported, want 2: %+v", workers, r.Processes)
	}
}
