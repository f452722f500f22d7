package main

import (
	"context"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"
)

// `sluice run --watch nosuchdir` used to create the folder and wait for
// ever: a mistyped path must be refused before anything starts, with one
// line and exit 2; --create-watch creates it on purpose.
func TestRunRefusesMissingWatchDir(t *testing.T) {
	dir := t.TempDir()
	missing := filepath.Join(dir, "incomming") // a typo of incoming
	nf := nodeFlags{data: filepath.Join(dir, "data"), http: "127.0.0.1:0", ackWait: 30 * time.Second, maxDeliver: 5}
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	start := func(f ingestFlags) error {
		ctx, cancel := context.WithCancel(context.Background())
		defer cancel()
		node, err := startAll(ctx, nf, inputFlags{}, f, 1, log)
		if err == nil {
			cancel()
			node.wg.Wait()
		}
		return err
	}
	err := start(ingestFlags{campaign: "c1", watch: missing})
	if _, serr := os.Stat(missing); serr == nil {
		t.Fatalf("run --watch %s created the directory (start error %v); want a refusal", missing, err)
	}
	if err == nil || !strings.Contains(err.Error(), missing) || !strings.Contains(err.Error(), "--create-watch") {
		t.Fatalf("run --watch on a missing directory: %v; want an error naming it and --create-watch", err)
	}

	code, _, errs := runCLI(t, "run", "--data", nf.data, "--http", "127.0.0.1:0", "--campaign", "c1", "--watch", missing)
	if code != exitBadInput || strings.Count(strings.TrimSpace(errs), "\n") != 0 || !strings.Contains(errs, missing) {
		t.Errorf("sluice run --watch %s: exit %d, stderr %q; want exit 2 and one line naming the directory", missing, code, errs)
	}
	code, _, errs = runCLI(t, "ingest", "--nats", "nats://127.0.0.1:1", "--store", filepath.Join(dir, "s"), "--campaign", "c1", "--watch", missing)
	if code != exitBadInput || strings.Count(strings.TrimSpace(errs), "\n") != 0 || !strings.Contains(errs, missing) {
		t.Errorf("sluice ingest --watch %s: exit %d, stderr %q; want exit 2 and one line naming the directory", missing, code, errs)
	}
	if _, serr := os.Stat(missing); serr == nil {
		t.Fatalf("a refused command created %s", missing)
	}

	file := filepath.Join(dir, "a-file")
	os.WriteFile(file, nil, 0o644)
	if err := start(ingestFlags{campaign: "c1", watch: file}); err == nil || !strings.Contains(err.Error(), "not a directory") {
		t.Errorf("run --watch on a file: %v; want 'not a directory'", err)
	}

	if err := start(ingestFlags{campaign: "c1", watch: missing, createWatch: true}); err != nil {
		t.Fatalf("run --watch %s --create-watch: %v", missing, err)
	}
	if fi, err := os.Stat(missing); err != nil || !fi.IsDir() {
		t.Errorf("--create-watch did not create %s: %v", missing, err)
	}
}

// dataDefault finds the default of --data in a command's flag listing.
var dataDefault = regexp.MustCompile(`(?m)^\s+--?data\b.*\n?.*\(default "([^"]*)"\)`)

// Every command that opens a campaign's store defaults to the same --data
// (plot, report, switch, compare and reference used to look in
// sluice-demo while run, reprocess and status wrote to sluice-data, so
// `sluice report` after `sluice run` found no campaign).
func TestDataDefaultIsShared(t *testing.T) {
	for _, cmd := range []string{"run", "reprocess", "status", "plot", "report", "switch", "compare", "reference"} {
		_, out, errs := runCLI(t, cmd, "-h")
		m := dataDefault.FindStringSubmatch(out + errs)
		if m == nil {
			t.Errorf("sluice %s -h shows no --data flag with a default:\n%s", cmd, out+errs)
			continue
		}
		if m[1] != "sluice-data" {
			t.Errorf("sluice %s: --data defaults to %q; want \"sluice-data\" like every other command", cmd, m[1])
		}
	}
}
