package main

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http/httptest"
	"path/filepath"
	"slices"
	"testing"

	"sluice/pkg/web"
	"sluice/services/aggregator"
)

// TestSwitchShowsInCampaignsAPI: an aggregator serving the live view over a
// campaign's store shows, in /api/campaigns, the parameter hash that `sluice
// switch` (run by another process; it writes only the store) made current,
// on the first request after the switch, and /api/campaigns/{c}/steps gives
// the steps' state under that run. Before, the aggregator kept the hash it
// read at start-up until it completed a step of its own, so the page named
// the old run after a switch.
func TestSwitchShowsInCampaignsAPI(t *testing.T) {
	const steps = 3
	dir := t.TempDir()
	scans := filepath.Join(dir, "scans")
	cfgPath, cfg := archive(t, scans, steps)
	data := filepath.Join(dir, "data")
	if code, out := sluiceCLI(t, "reprocess", "sw", "--from", scans, "--config", cfgPath, "--data", data, "--workers", "2"); code != 0 {
		t.Fatalf("first run: exit %d\n%s", code, out)
	}
	hashA := cfg.Hash()

	st, err := storeAt(filepath.Join(data, "store"))
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	a := &aggregator.Aggregator{Store: st, Log: quietLog(), Version: "test"}
	if err := a.Start(ctx); err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(web.Handler(a, web.NewHub(), quietLog()))
	defer srv.Close()
	current := func() string {
		t.Helper()
		var list []web.CampaignInfo
		if err := json.Unmarshal(httpGet(t, srv.URL+"/api/campaigns"), &list); err != nil {
			t.Fatal(err)
		}
		if len(list) != 1 || list[0].Name != "sw" {
			t.Fatalf("/api/campaigns: %+v, want campaign sw alone", list)
		}
		return list[0].ParamHash
	}
	// checkSteps wants every step done (8 tiles: archive tiles 64³ scans
	// by 32) except those in notDone, which were never measured in run and
	// are only ingested under it.
	checkSteps := func(run string, notDone ...string) {
		t.Helper()
		var ss []web.StepStatus
		if err := json.Unmarshal(httpGet(t, srv.URL+"/api/campaigns/sw/steps"), &ss); err != nil {
			t.Fatal(err)
		}
		if len(ss) != steps {
			t.Fatalf("run %s: %d steps listed, want %d", run, len(ss), steps)
		}
		for _, s := range ss {
			if slices.Contains(notDone, s.Step) {
				if s.Status != "ingested" || s.TilesDone != 0 {
					t.Errorf("run %s: step %s %s, tiles %d/%d; want ingested, none done", run, s.Step, s.Status, s.TilesDone, s.TilesTotal)
				}
			} else if s.Status != "done" || s.TilesDone != 8 || s.TilesTotal != 8 {
				t.Errorf("run %s: step %s %s, tiles %d/%d; want done, 8/8", run, s.Step, s.Status, s.TilesDone, s.TilesTotal)
			}
		}
	}
	if got := current(); got != hashA {
		t.Fatalf("before any switch: param_hash %s, want %s", got, hashA)
	}
	checkSteps(hashA)

	// A second run with a higher threshold over the first two steps only,
	// not switched to: the API keeps naming the first.
	thr := fmt.Sprintf("segment.fixed=[%g, %g]", cfg.Segment.Fixed[0]+1500, cfg.Segment.Fixed[1])
	if code, out := sluiceCLI(t, "reprocess", "sw", "--set", thr, "--steps", "0-1", "--data", data, "--workers", "2"); code != 0 {
		t.Fatalf("reprocess: exit %d\n%s", code, out)
	}
	rec := record(t, st, "sw")
	if len(rec.Runs) != 2 || rec.Runs[0] != hashA {
		t.Fatalf("runs after reprocess: %v", rec.Runs)
	}
	hashB := rec.Runs[1]
	if got := current(); got != hashA {
		t.Errorf("after reprocess without switch: param_hash %s, want %s", got, hashA)
	}

	// switch to B (--partial: its last step has no result): the next
	// request names B, and the steps are B's.
	if code, out := sluiceCLI(t, "switch", "sw", "--run", hashB, "--partial", "--data", data); code != 0 {
		t.Fatalf("switch: exit %d\n%s", code, out)
	}
	if got := current(); got != hashB {
		t.Errorf("right after switch to %s: /api/campaigns says %s", hashB, got)
	}
	checkSteps(hashB, fmt.Sprintf("scan-%04d", steps-1))

	// And back to A, named by a prefix of its hash.
	if code, out := sluiceCLI(t, "switch", "sw", "--run", hashA[:8], "--data", data); code != 0 {
		t.Fatalf("switch back: exit %d\n%s", code, out)
	}
	if got := current(); got != hashA {
		t.Errorf("right after switching back to %s: /api/campaigns says %s", hashA, got)
	}
	checkSteps(hashA)
}
