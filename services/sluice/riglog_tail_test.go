package main

import (
	"context"
	"os"
	"path/filepath"
	"testing"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/riglog"
	"sluice/pkg/store"
)

// TestRigTail: the tail stores the complete lines of the rig log as it
// grows (a line being written waits for its line end), keeps the last good
// log when a bad row arrives, and stores again once the file reads right.
func TestRigTail(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	st, err := store.NewLocal(filepath.Join(dir, "store"))
	if err != nil {
		t.Fatal(err)
	}
	c, _ := layout.NewCampaign("tail")
	cfg := riglog.Config{Columns: riglog.Columns{Time: riglog.Column{Column: "t", Unit: "s"}, Rate: &riglog.Column{Column: "q", Unit: "ml/min"}}}
	path := filepath.Join(dir, "rig.csv")
	rt := &rigTail{path: path, st: st, c: c, cfg: cfg}
	stored := func() string {
		b, err := st.Get(ctx, campaign.RigLogKey(c))
		if err != nil {
			return "<none>"
		}
		return string(b)
	}
	write := func(s string) {
		t.Helper()
		if err := os.WriteFile(path, []byte(s), 0o644); err != nil {
			t.Fatal(err)
		}
		// A later modification time, so the tail sees the change even
		// when the size stays.
		now := time.Now().Add(time.Duration(len(s)) * time.Second)
		os.Chtimes(path, now, now)
		if err := rt.poll(ctx); err != nil {
			t.Fatal(err)
		}
	}
	if err := rt.poll(ctx); err != nil || stored() != "<none>" {
		t.Fatalf("no file yet: %v, stored %q", err, stored())
	}
	write("t,q\n0,1\n10,1")
	if got := stored(); got != "t,q\n0,1\n" {
		t.Errorf("partial last line: stored %q", got)
	}
	write("t,q\n0,1\n10,1\n")
	if got := stored(); got != "t,q\n0,1\n10,1\n" {
		t.Errorf("line completed: stored %q", got)
	}
	write("t,q\n0,1\n10,1\n5,1\n")
	if got := stored(); got != "t,q\n0,1\n10,1\n" || rt.lastErr == "" {
		t.Errorf("time going back: stored %q, error %q", got, rt.lastErr)
	}
	write("t,q\n0,1\n10,1\n20,1\n")
	if got := stored(); got != "t,q\n0,1\n10,1\n20,1\n" || rt.lastErr != "" {
		t.Errorf("repaired: stored %q, error %q", got, rt.lastErr)
	}
}
