package ingest

import (
	"context"
	"errors"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"sync"
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

// lineLog collects log records as lines "LEVEL msg k=v …".
type lineLog struct {
	mu    sync.Mutex
	lines []string
}

func (l *lineLog) logger() *slog.Logger {
	return slog.New(slog.NewTextHandler(l, &slog.HandlerOptions{Level: slog.LevelDebug}))
}

func (l *lineLog) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	l.lines = append(l.lines, strings.TrimSpace(string(p)))
	return len(p), nil
}

// matching returns the lines containing every one of subs.
func (l *lineLog) matching(subs ...string) []string {
	l.mu.Lock()
	defer l.mu.Unlock()
	var out []string
next:
	for _, line := range l.lines {
		for _, s := range subs {
			if !strings.Contains(line, s) {
				continue next
			}
		}
		out = append(out, line)
	}
	return out
}

// A marker named after the scan with its extension (scan_0001.raw.done)
// or without (scan_0000.done, as the README's <scan>.done reads) both mark
// the scan complete; a short marker two scans could claim is refused with
// one line, a marker naming no scan is reported once, and a marker whose
// content is not the documented JSON rejects its scan instead of giving it
// t = 0.
func TestWatcherMarkerForms(t *testing.T) {
	dir := t.TempDir()
	files := map[string]string{
		"scan_0000.raw": "", "scan_0000.done": `{"time_s": 405}`, // short form
		"scan_0001.raw": "", "scan_0001.raw.done": "", // long form, empty
		"scan_0002.raw": "", "scan_0002.tif": "", "scan_0002.done": "", // ambiguous
		"scan_0003.raw": "", "scan_0003.done": "time 405", // not JSON
		"scan_0004.raw": "", "scan_0004.raw.done": `{"time_s": "405"}`, // a string
		"scan_0005.raw": "", "scan_0005.raw.done": `{"time": 405}`, // no time_s
		"scan_0006.raw": "", "scan_0006.raw.done": `{"time_s": -5}`,
		"scna_0007.done": "", // a typo: marks nothing
	}
	for name, body := range files {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	var ll lineLog
	w := &Watcher{Dir: dir, Log: ll.logger()}
	got := map[string]Arrival{}
	for range 2 { // a second poll must neither offer a scan again nor repeat a line
		arr, err := w.Scan()
		if err != nil {
			t.Fatal(err)
		}
		for _, a := range arr {
			if _, dup := got[a.Step]; dup {
				t.Errorf("step %s offered twice", a.Step)
			}
			got[a.Step] = a
		}
	}
	if a, ok := got["scan_0000"]; !ok || !a.HasTime || a.TimeS != 405 {
		t.Errorf("scan_0000.raw with scan_0000.done {time_s: 405}: arrival %+v (offered %v), want t = 405 s", a, ok)
	}
	if a, ok := got["scan_0001"]; !ok || a.HasTime {
		t.Errorf("scan_0001.raw with an empty scan_0001.raw.done: arrival %+v (offered %v), want offered without a marker time", a, ok)
	}
	if len(got) != 2 {
		t.Errorf("offered %d scans %v, want only scan_0000 and scan_0001", len(got), got)
	}
	for _, c := range []struct{ subs []string }{
		{[]string{"level=ERROR", "scan_0002.done", "ambiguous", "scan_0002.raw", "scan_0002.tif"}},
		{[]string{"level=ERROR", "scan_0003.done", "not a JSON object"}},
		{[]string{"level=ERROR", "scan_0004.raw.done", "not a number"}},
		{[]string{"level=ERROR", "scan_0005.raw.done", "without time_s"}},
		{[]string{"level=ERROR", "scan_0006.raw.done", "-5"}},
		{[]string{"level=WARN", "scna_0007.done", "names no scan"}},
	} {
		if m := ll.matching(c.subs...); len(m) != 1 {
			t.Errorf("log lines with %q: %d, want exactly 1; log:\n%s", c.subs, len(m), strings.Join(ll.lines, "\n"))
		}
	}
	if m := ll.matching("names no scan"); len(m) != 1 {
		t.Errorf("orphan-marker lines %q, want only the one for scna_0007.done", m)
	}

	// A corrected marker is read again (the modification time is set
	// explicitly: a rewrite within the file system's time resolution
	// would otherwise look unchanged).
	fixed := filepath.Join(dir, "scan_0003.done")
	if err := os.WriteFile(fixed, []byte(`{"time_s": 1215}`), 0o644); err != nil {
		t.Fatal(err)
	}
	later := time.Now().Add(time.Minute)
	if err := os.Chtimes(fixed, later, later); err != nil {
		t.Fatal(err)
	}
	arr, err := w.Scan()
	if err != nil {
		t.Fatal(err)
	}
	if len(arr) != 1 || arr[0].Step != "scan_0003" || !arr[0].HasTime || arr[0].TimeS != 1215 {
		t.Errorf("after scan_0003.done was corrected the watcher offered %+v; want scan_0003 at t = 1215 s", arr)
	}
}
