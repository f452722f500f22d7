package ingest

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"testing"
	"time"
)

// A scan whose ingest fails is offered again (an outage outlasting the
// services' own retries must not lose it) and given up after Attempts.
func TestWatcherRetriesFailedScan(t *testing.T) {
	dir := t.TempDir()
	for _, name := range []string{"scan-01.raw", "scan-01.raw.done", "scan-02.raw", "scan-02.raw.done"} {
		if err := os.WriteFile(filepath.Join(dir, name), nil, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	w := &Watcher{Dir: dir, Poll: 5 * time.Millisecond, Attempts: 3}
	ctx, cancel := context.WithCancel(context.Background())
	calls := map[string]int{}
	done := make(chan error)
	go func() {
		done <- w.Run(ctx, func(a Arrival) error {
			calls[a.Step]++
			if calls["scan-01"] == 2 && calls["scan-02"] == 3 {
				// Ten more polls: neither scan may be offered again.
				time.AfterFunc(50*time.Millisecond, cancel)
			}
			if a.Step == "scan-01" && calls[a.Step] == 1 {
				return errors.New("store: connection refused") // cured by the second attempt
			}
			if a.Step == "scan-02" {
				return errors.New("volio: truncated raw volume") // never cured
			}
			return nil
		})
	}()
	// Liveness guard only: 3 attempts take 5·(2+4) ms of delay.
	select {
	case <-done:
	case <-time.After(time.Minute):
		cancel()
		<-done
		t.Fatalf("watcher did not finish: calls %v", calls)
	}
	if calls["scan-01"] != 2 || calls["scan-02"] != 3 {
		t.Errorf("ingest calls %v, want scan-01 twice (failed once) and scan-02 three times (Attempts)", calls)
	}
}
