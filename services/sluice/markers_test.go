package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/series"
	"sluice/pkg/store"
	"sluice/pkg/volio"
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

// timelessArchive is archive without any time: markers removed and
// time_s dropped from the raw headers.
func timelessArchive(t *testing.T, dir string, steps int) string {
	t.Helper()
	cfgPath, _ := archive(t, dir, steps)
	for i := 0; i < steps; i++ {
		p := filepath.Join(dir, fmt.Sprintf("scan-%04d.raw", i))
		if err := os.Remove(p + ".done"); err != nil {
			t.Fatal(err)
		}
		var h map[string]any
		b, err := os.ReadFile(p + ".sluice.json")
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(b, &h); err != nil {
			t.Fatal(err)
		}
		delete(h, "time_s")
		if b, err = json.Marshal(h); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p+".sluice.json", b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	return cfgPath
}

// `reprocess --from` over scans with no time used to put every step at
// t = 0 (and the report then dated breakthrough "at t = 0 s"). Now a scan
// without a time is refused before anything is stored; --times supplies
// the times (its bad rows are one-line errors naming file and line); a
// marker that is not the documented JSON rejects its scan only.
func TestReprocessStepTimes(t *testing.T) {
	if testing.Short() {
		t.Skip("pipeline test")
	}
	dir := t.TempDir()
	scans := filepath.Join(dir, "scans")
	cfgPath := timelessArchive(t, scans, 3)
	data := filepath.Join(dir, "data")
	oneLine := func(args []string, want ...string) {
		t.Helper()
		code, _, errs := runCLI(t, args...)
		msg := strings.TrimSpace(errs)
		if code != exitBadInput || strings.Contains(msg, "\n") {
			t.Errorf("%v: exit %d, stderr %q; want exit 2 and one line", args[len(args)-2:], code, msg)
		}
		for _, w := range want {
			if !strings.Contains(msg, w) {
				t.Errorf("%v: %q does not say %q", args[len(args)-2:], msg, w)
			}
		}
	}
	base := []string{"reprocess", "tm", "--from", scans, "--config", cfgPath, "--data", data, "--workers", "2"}
	oneLine(base, "3 scans have no experiment time", "scan-0000.raw", "--times")
	if _, err := os.Stat(filepath.Join(data, "store", "campaigns", "tm", "steps")); err == nil {
		t.Fatalf("steps were stored although their scans have no time")
	}

	csvFile := func(name, body string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	for _, c := range []struct{ name, body, want string }{
		{"noheader.csv", "scan-0000,0\nscan-0002,600\n", "noheader.csv:1: the first line must be the header step,time_s"},
		{"word.csv", "step,time_s\nscan-0000,0\nscan-0002,ten\n", `word.csv:3: time_s "ten" is not a number`},
		{"dup.csv", "step,time_s\nscan-0000,0\n# a comment\nscan-0000.raw,600\n", "dup.csv:4: step scan-0000 repeated (first on line 2)"},
		{"neg.csv", "step,time_s\nscan-0000,-300\n", "neg.csv:2: time_s -300 is negative"},
		{"nan.csv", "step,time_s\nscan-0000,NaN\n", `nan.csv:2: time_s "NaN" is not finite`},
		{"inf.csv", "step,time_s\nscan-0000,+Inf\n", `inf.csv:2: time_s "+Inf" is not finite`},
		{"short.csv", "step,time_s\nscan-0000\n", "short.csv:2: want 2 fields"},
		{"typo.csv", "step,time_s\nscan-0000,0\nscna-0002,600\n", "typo.csv:3: step scna-0002 matches no volume"},
	} {
		oneLine(append(base, "--times", csvFile(c.name, c.body)), c.want)
	}

	// scan-0001's marker is not JSON: that scan alone is rejected, the two
	// others get the times of the CSV.
	if err := os.WriteFile(filepath.Join(scans, "scan-0001.done"), []byte("time 405\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	times := csvFile("times.csv", "step,time_s\nscan-0000,0\nscan-0002.raw,912.5\n")
	code, out, errs := runCLI(t, append(base, "--times", times)...)
	if code != exitBadInput || !strings.Contains(errs, filepath.Join(scans, "scan-0001.done")+": not empty and not a JSON object") {
		t.Fatalf("reprocess with a bad marker: exit %d, want 2 naming scan-0001.done\nstdout:\n%s\nstderr:\n%s", code, out, errs)
	}
	if n := strings.Count(errs, "scan-0001.done"); n != 1 {
		t.Errorf("the bad marker is named on %d lines, want 1:\n%s", n, errs)
	}
	st, err := storeAt(filepath.Join(data, "store"))
	if err != nil {
		t.Fatal(err)
	}
	rows, err := series.Load(context.Background(), st, "tm")
	if err != nil {
		t.Fatal(err)
	}
	got := map[string]float64{}
	for _, r := range rows {
		got[r.Step] = r.Time
	}
	if len(got) != 2 || got["scan-0002"] != 912.5 {
		t.Errorf("series steps and times %v; want scan-0000 at 0 s and scan-0002 at 912.5 s (scan-0001 rejected)", got)
	}
	if _, ok := got["scan-0000"]; !ok {
		t.Errorf("series has no scan-0000: %v", got)
	}
}

// `sluice ingest FILE` without --time used to store a scan with no time
// of its own at t = 0. The time now comes from --time, the scan's marker
// (either form) or its header; a scan with none is refused in one line,
// and so is a marker that is not the documented JSON.
func TestIngestNeedsTime(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a NATS server")
	}
	_, url := badInputNode(t)
	data := t.TempDir()
	st := filepath.Join(data, "store")
	cfg := campaign.Default()
	cfg.DetectSample, cfg.Tile, cfg.Measure.SkipContact = false, 32, true
	cfg.VoxelSize = "3um" // that of pipelineScene
	cfgPath := filepath.Join(data, "c.json")
	if err := writeDemoConfig(cfgPath, cfg); err != nil {
		t.Fatal(err)
	}
	grey := pipelineScene(t, [3]int{32, 32, 32}, 11)
	for _, n := range []string{"scan-0001.raw", "scan-0002.raw", "scan-0003.raw"} {
		if err := volio.WriteRaw(filepath.Join(data, n), grey, volio.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
	}
	ingestCmd := func(args ...string) (int, string, string) {
		return runCLI(t, append([]string{"ingest", "--nats", url, "--store", st, "--http", "off", "--config", cfgPath, "--campaign", "tt"}, args...)...)
	}
	manifestTime := func(step string) float64 {
		t.Helper()
		var m campaign.Manifest
		b, err := os.ReadFile(filepath.Join(st, "campaigns", "tt", "steps", step, "manifest.json"))
		if err == nil {
			err = json.Unmarshal(b, &m)
		}
		if err != nil {
			t.Fatalf("step %s: %v", step, err)
		}
		return m.TimeS
	}

	code, _, errs := ingestCmd(filepath.Join(data, "scan-0001.raw"))
	if code != exitBadInput || strings.Count(strings.TrimSpace(errs), "\n") != 0 || !strings.Contains(errs, "scan-0001.raw has no experiment time") {
		t.Fatalf("ingest of a scan without any time: exit %d, stderr %q; want exit 2 and one line", code, errs)
	}
	if _, err := os.Stat(filepath.Join(st, "campaigns", "tt", "steps", "scan-0001", "manifest.json")); err == nil {
		t.Fatal("the scan without a time was stored")
	}

	os.WriteFile(filepath.Join(data, "scan-0002.done"), []byte("time 405"), 0o644)
	code, _, errs = ingestCmd(filepath.Join(data, "scan-0002.raw"))
	if code != exitBadInput || !strings.Contains(errs, "scan-0002.done: not empty and not a JSON object") {
		t.Errorf("ingest beside a marker holding 'time 405': exit %d, stderr %q; want exit 2 naming the marker", code, errs)
	}

	os.WriteFile(filepath.Join(data, "scan-0003.done"), []byte(`{"time_s": 405}`), 0o644)
	if code, _, errs = ingestCmd(filepath.Join(data, "scan-0003.raw")); code != exitOK {
		t.Fatalf("ingest with a short-form marker time: exit %d: %s", code, errs)
	}
	if got := manifestTime("scan-0003"); got != 405 {
		t.Errorf("scan-0003 stored at t = %g s, want 405 s from scan-0003.done", got)
	}
	if code, _, errs = ingestCmd("--time", "812", filepath.Join(data, "scan-0001.raw")); code != exitOK {
		t.Fatalf("ingest with --time: exit %d: %s", code, errs)
	}
	if got := manifestTime("scan-0001"); got != 812 {
		t.Errorf("scan-0001 stored at t = %g s, want 812 s from --time", got)
	}
}

// `sluice status` with a mistyped --data used to create DIR/store and
// report that the campaign is not in it; it only reads, so it refuses.
func TestStatusRefusesMissingData(t *testing.T) {
	missing := filepath.Join(t.TempDir(), "sluice-dta")
	code, _, errs := runCLI(t, "status", "--data", missing, "c1")
	if code != exitBadInput || strings.Count(strings.TrimSpace(errs), "\n") != 0 || !strings.Contains(errs, "no store at "+filepath.Join(missing, "store")) {
		t.Errorf("status --data %s: exit %d, stderr %q; want exit 2 and 'no store at'", missing, code, errs)
	}
	if _, err := os.Stat(missing); err == nil {
		t.Errorf("status created %s", missing)
	}
}

// `run --watch` / `ingest --watch` used to date a scan with an empty
// marker and no time in its header by its file modification time, without
// being asked. Now such a scan is rejected (campaigns/<c>/rejected/<step>.json,
// its reason naming the file); --times dates scans from a CSV (re-read
// when it changes, so rows added during the beamtime count), and
// --time-from-mtime allows the modification time.
func TestWatchStepTimes(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a NATS server")
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	q := embeddedQueue(ctx, t)
	dir := t.TempDir()
	local, err := store.NewLocal(filepath.Join(dir, "store"))
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.VoxelSize, cfg.DetectSample, cfg.Tile, cfg.Measure.SkipContact = "3um", false, 32, true
	cfgPath := filepath.Join(dir, "c.json")
	if err := writeDemoConfig(cfgPath, cfg); err != nil {
		t.Fatal(err)
	}
	grey := pipelineScene(t, [3]int{32, 32, 32}, 11)
	// timeless writes a scan without a time in its header, with an empty
	// marker, last modified at mtime.
	timeless := func(watch, name string, mtime time.Time) string {
		t.Helper()
		p := filepath.Join(watch, name)
		if err := volio.WriteRaw(p, grey, volio.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
		if err := os.Chtimes(p, mtime, mtime); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p+".done", nil, 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	// watchUntil runs the watcher of f until cond holds.
	watchUntil := func(f ingestFlags, what string, cond func() bool) {
		t.Helper()
		ing, err := startIngest(ctx, f, inputFlags{}, local, taskPublisher{q}, nil, nil, quietLog())
		if err != nil {
			t.Fatal(err)
		}
		wctx, stop := context.WithCancel(ctx)
		done := make(chan error, 1)
		go func() { done <- watchAndIngest(wctx, ing, f, quietLog()) }()
		for !cond() {
			if ctx.Err() != nil {
				t.Fatalf("still waiting for %s", what)
			}
			time.Sleep(10 * time.Millisecond) // polling the store, bounded by ctx
		}
		stop()
		if err := <-done; err != nil {
			t.Fatal(err)
		}
	}
	manifest := func(c, step string) (campaign.Manifest, bool) {
		var m campaign.Manifest
		s, _ := layout.NewStep(c, step)
		return m, campaign.GetJSON(ctx, local, s.Manifest(), &m) == nil
	}
	rejection := func(c, step string) (campaign.Rejection, bool) {
		var r campaign.Rejection
		lc, _ := layout.NewCampaign(c)
		key, _ := campaign.RejectedKey(lc, step)
		return r, campaign.GetJSON(ctx, local, key, &r) == nil
	}

	base := time.Date(2026, 3, 1, 10, 0, 0, 0, time.UTC)
	watch := filepath.Join(dir, "in")
	os.Mkdir(watch, 0o755)
	p1 := timeless(watch, "scan-0001.raw", base)
	timeless(watch, "scan-0002.raw", base.Add(60*time.Second))
	times := filepath.Join(dir, "times.csv")
	os.WriteFile(times, []byte("step,time_s\nscan-0002,600\n"), 0o644)
	f := ingestFlags{campaign: "nt", config: cfgPath, watch: watch, times: times, poll: 5 * time.Millisecond}
	if err := f.checkWatch(); err != nil {
		t.Fatal(err)
	}
	watchUntil(f, "scan-0001 rejected and scan-0002 stored", func() bool {
		if m, ok := manifest("nt", "scan-0001"); ok {
			t.Fatalf("scan-0001, without any time, was stored at t = %g s from %q", m.TimeS, m.TimeFrom)
		}
		_, rej := rejection("nt", "scan-0001")
		_, ok := manifest("nt", "scan-0002")
		return rej && ok
	})
	r, _ := rejection("nt", "scan-0001")
	t.Logf("rejected: %s: %s", r.File, r.Reason)
	if !strings.Contains(r.Reason, p1+" has no experiment time") || !strings.Contains(r.Reason, "--time-from-mtime") || strings.Contains(r.Reason, "\n") {
		t.Errorf("rejection reason %q; want one line naming %s and --time-from-mtime", r.Reason, p1)
	}
	if _, ok := manifest("nt", "scan-0001"); ok {
		t.Error("the scan without a time was stored")
	}
	if m, _ := manifest("nt", "scan-0002"); m.TimeS != 600 || m.TimeFrom != "--times" {
		t.Errorf("scan-0002 at t = %g s from %q; want 600 s from --times", m.TimeS, m.TimeFrom)
	}

	// The times file gains a row for scan-0003 while the campaign runs.
	timeless(watch, "scan-0003.raw", base.Add(120*time.Second))
	os.WriteFile(times, []byte("step,time_s\nscan-0002,600\nscan-0003,1200\n"), 0o644)
	watchUntil(f, "scan-0003 stored", func() bool { _, ok := manifest("nt", "scan-0003"); return ok })
	if m, _ := manifest("nt", "scan-0003"); m.TimeS != 1200 {
		t.Errorf("scan-0003 at t = %g s, want 1200 s from the rewritten --times", m.TimeS)
	}

	// --time-from-mtime: another campaign over a copy of the two timeless
	// scans, dated from the first one's modification time.
	watch2 := filepath.Join(dir, "in2")
	os.Mkdir(watch2, 0o755)
	timeless(watch2, "scan-0001.raw", base)
	timeless(watch2, "scan-0002.raw", base.Add(90*time.Second))
	f2 := ingestFlags{campaign: "mt", config: cfgPath, watch: watch2, timeFromMTime: true, poll: 5 * time.Millisecond}
	watchUntil(f2, "both scans stored", func() bool {
		_, a := manifest("mt", "scan-0001")
		_, b := manifest("mt", "scan-0002")
		return a && b
	})
	for step, want := range map[string]float64{"scan-0001": 0, "scan-0002": 90} {
		if m, _ := manifest("mt", step); m.TimeS != want || m.TimeFrom != "mtime" {
			t.Errorf("%s at t = %g s from %q; want %g s from mtime", step, m.TimeS, m.TimeFrom, want)
		}
	}
}
