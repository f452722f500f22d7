package ingest

import (
	"context"
	"errors"
	"io/fs"
	"os"
	"path/filepath"
	"sync"
	"syscall"
	"testing"
	"time"

	"sluice/internal/testenv"
	"sluice/pkg/campaign"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// An ingest into a store directory the process may not write to fails on
// the first attempt (a Retrying store with a minute of budget reports one
// failed attempt, final), and the service's error still carries the
// system's answer: errors.Is finds fs.ErrPermission and EACCES through the
// ingest, store and retry layers, and store.IsPermanent says so.
// readOnlyScan makes a campaign "ro" in a local store, a 16³ scan file in
// dir, and then makes every directory of the store read-only (files stay
// readable). It returns the store and the scan's path.
func readOnlyScan(t *testing.T, dir string) (*store.Local, string) {
	ctx := context.Background()
	root := filepath.Join(dir, "store")
	local, err := store.NewLocal(root)
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile = 16
	if _, err := EnsureCampaign(ctx, local, "ro", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	v := volume.NewShape[uint16](16, 16, 16, 2e-6)
	for i := range v.Pix {
		v.Pix[i] = uint16(i)
	}
	path := filepath.Join(dir, "scan-0001.raw")
	if err := volio.WriteRaw(path, v, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	err = filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if err == nil && d.IsDir() {
			err = os.Chmod(p, 0o555)
		}
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
			if err == nil && d.IsDir() {
				os.Chmod(p, 0o755)
			}
			return nil
		})
	})
	return local, path
}

func TestIngestIntoReadOnlyStoreFailsAtOnce(t *testing.T) {
	if testenv.Unprivileged(t) {
		return
	}
	ctx := context.Background()
	local, path := readOnlyScan(t, t.TempDir())

	var mu sync.Mutex
	var attempts, final int
	st := store.WithRetry(local, store.RetryPolicy{First: time.Millisecond, Max: time.Millisecond, Budget: time.Minute},
		func(op string, err error, retrying bool) {
			mu.Lock()
			defer mu.Unlock()
			attempts++
			if !retrying {
				final++
			}
		})
	in := &Ingester{Store: st, Version: "test"}
	_, err := in.Ingest(ctx, Request{Campaign: "ro", Step: "scan-0001", Path: path, HasTime: true})
	if !errors.Is(err, fs.ErrPermission) || !errors.Is(err, syscall.EACCES) || !store.IsPermanent(err) {
		t.Fatalf("ingest into a read-only store: %v; want a permanent error with fs.ErrPermission (EACCES) in the chain", err)
	}
	mu.Lock()
	defer mu.Unlock()
	if attempts != 1 || final != 1 {
		t.Errorf("ingest into a read-only store: %d failed store attempts (%d final), want exactly 1, final", attempts, final)
	}
	t.Logf("ingest into a read-only store: %v", err)
}

// A watcher whose ingest meets a store refusal stops at once with that
// error (one offer of the scan, not Attempts), so that the process exits
// with the cause instead of giving every later scan up in turn.
func TestWatcherStopsOnStoreRefusal(t *testing.T) {
	if testenv.Unprivileged(t) {
		return
	}
	dir := t.TempDir()
	local, _ := readOnlyScan(t, dir)
	if err := os.WriteFile(filepath.Join(dir, "scan-0001.raw.done"), nil, 0o644); err != nil {
		t.Fatal(err)
	}
	in := &Ingester{Store: store.WithRetry(local, store.RetryPolicy{}, nil), Version: "test"}
	w := &Watcher{Dir: dir, Poll: 5 * time.Millisecond, Attempts: 3}
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	offers := 0
	done := make(chan error, 1)
	go func() {
		done <- w.Run(ctx, func(a Arrival) error {
			offers++
			_, err := in.Ingest(ctx, Request{Campaign: "ro", Step: a.Step, Path: a.Path, HasTime: true})
			return err
		})
	}()
	var err error
	select {
	case err = <-done:
	case <-time.After(time.Minute): // liveness guard only
		cancel()
		<-done
		t.Fatalf("watcher still running after a store refusal (%d offers)", offers)
	}
	if !errors.Is(err, fs.ErrPermission) || offers != 1 {
		t.Fatalf("watcher over a read-only store: %v after %d offers; want fs.ErrPermission after 1", err, offers)
	}
	t.Logf("watcher stopped: %v", err)
}
