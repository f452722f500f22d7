package ingest

import (
	"context"
	"errors"
	"io"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// TestStepTimeSources (issue 13, item 7): a watched scan with an empty
// marker and no time in its header used to get its file modification time
// (counted from the first scan the watcher saw) without being asked. Now
// such a scan is refused, naming the file, before anything is stored; the
// modification time dates it only when the watcher allows it
// (--time-from-mtime), counted from the campaign's first scan so dated —
// an origin kept in the store, so a restarted watcher does not start again
// at 0. A marker's time and a header's time win over the modification time.
func TestStepTimeSources(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	watch := filepath.Join(dir, "in")
	os.MkdirAll(watch, 0o755)
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile, cfg.VoxelSize = 16, "3um"
	if _, err := EnsureCampaign(ctx, st, "tm", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	// mtime is the scan's modification time; header a time in its header.
	write := func(name string, mtime time.Time, header *float64, marker string) {
		t.Helper()
		v := volume.NewShape[uint16](16, 16, 16, 3e-6)
		for i := range v.Pix {
			v.Pix[i] = uint16(1000 + i%7)
		}
		o := volio.WriteOptions{}
		if header != nil {
			o.TimeS, o.HasTime = *header, true
		}
		p := filepath.Join(watch, name)
		if err := volio.WriteRaw(p, v, o); err != nil {
			t.Fatal(err)
		}
		if err := os.Chtimes(p, mtime, mtime); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p+Marker, []byte(marker), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	base := time.Date(2026, 3, 1, 10, 0, 0, 0, time.UTC)
	manifest := func(step string) (campaign.Manifest, error) {
		s, _ := layout.NewStep("tm", step)
		var m campaign.Manifest
		return m, campaign.GetJSON(ctx, st, s.Manifest(), &m)
	}
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	// watchOnce offers every complete scan once to a new watcher (a
	// restarted process) and returns the ingest errors by step.
	watchOnce := func(mtimes bool) map[string]error {
		t.Helper()
		in := &Ingester{Store: st, Version: "test", Log: log}
		w := &Watcher{Dir: watch, ModTimes: mtimes, Log: log}
		arr, err := w.Scan()
		if err != nil {
			t.Fatal(err)
		}
		errs := map[string]error{}
		for _, a := range arr {
			_, err := in.StoreStep(ctx, Request{Campaign: "tm", Step: a.Step, Path: a.Path, TimeS: a.TimeS, HasTime: a.HasTime, TimeFrom: "marker", ModTime: a.ModTime})
			errs[a.Step] = err
		}
		return errs
	}

	// The old observation: an empty marker and no header time.
	write("scan-0001.raw", base.Add(100*time.Second), nil, "")
	errs := watchOnce(false)
	err = errs["scan-0001"]
	if err == nil || !strings.Contains(err.Error(), filepath.Join(watch, "scan-0001.raw")+" has no experiment time") || !strings.Contains(err.Error(), "--time-from-mtime") || strings.Contains(err.Error(), "\n") {
		t.Fatalf("scan without any time: %v; want a one-line refusal naming the file and --time-from-mtime", err)
	}
	if !errors.Is(err, volio.ErrFormat) {
		t.Errorf("%v is not a bad scan (volio.ErrFormat): the watcher would not reject it", err)
	}
	if _, err := manifest("scan-0001"); !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("the refused scan was stored (%v)", err)
	}
	t.Logf("refused: %v", errs["scan-0001"])

	// With --time-from-mtime: the first scan so dated is the origin.
	if errs := watchOnce(true); errs["scan-0001"] != nil {
		t.Fatal(errs["scan-0001"])
	}
	// A restarted watcher: a later scan counts from the same origin; a
	// marker's time and a header's time win over the modification time.
	hdr := 7.5
	write("scan-0002.raw", base.Add(400*time.Second), nil, "")
	write("scan-0003.raw", base.Add(500*time.Second), nil, `{"time_s": 1234}`)
	write("scan-0004.raw", base.Add(600*time.Second), &hdr, "")
	write("scan-0005.raw", base.Add(50*time.Second), nil, "") // before the origin
	errs = watchOnce(true)
	for _, c := range []struct {
		step string
		t    float64
		from string
	}{{"scan-0001", 0, "mtime"}, {"scan-0002", 300, "mtime"}, {"scan-0003", 1234, "marker"}, {"scan-0004", 7.5, "header"}} {
		if errs[c.step] != nil {
			t.Errorf("%s: %v", c.step, errs[c.step])
			continue
		}
		m, err := manifest(c.step)
		if err != nil || m.TimeS != c.t || m.TimeFrom != c.from {
			t.Errorf("%s stored at t = %g s from %q (%v); want %g s from %q", c.step, m.TimeS, m.TimeFrom, err, c.t, c.from)
		}
	}
	if err := errs["scan-0005"]; err == nil || !strings.Contains(err.Error(), "before the campaign's time origin") || !strings.Contains(err.Error(), "scan-0005.raw") {
		t.Errorf("scan modified before the origin: %v; want a refusal naming it", err)
	}
}
