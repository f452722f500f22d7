package main

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

	"github.com/prometheus/client_golang/prometheus"

	"sluice/internal/testenv"
	"sluice/pkg/campaign"
	"sluice/pkg/queue"
	"sluice/pkg/store"
	"sluice/pkg/telemetry"
	"sluice/pkg/volio"
	"sluice/proto/sluicepb"
	"sluice/services/aggregator"
	"sluice/services/ingest"
)

// A worker whose store refuses it (a read-only store directory: EACCES
// on the first write) stops by itself with that error — fs.ErrPermission
// still in the chain — dead-letters nothing and leaves the tile queued for
// a worker that can. A task whose step lost its manifest is then
// dead-lettered on its next delivery, not after --max-deliver of them.
func TestWorkerStopsOnStoreRefusal(t *testing.T) {
	if testenv.Unprivileged(t) {
		return
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	q, local, root, setMode, log := refusalSetup(ctx, t)
	setMode(0o555)

	retried := 0
	rs := store.WithRetry(local, store.RetryPolicy{}, func(string, error, bool) { retried++ })
	err := runWorkers(ctx, q, rs, telemetry.NewWorker(prometheus.NewRegistry()), "refused-worker", 1, log)
	if !errors.Is(err, fs.ErrPermission) || !store.IsRefused(err) {
		t.Fatalf("worker over a read-only store returned %v; want a refusal with fs.ErrPermission in the chain", err)
	}
	if retried != 1 {
		t.Errorf("%d failed store attempts, want 1 (no retries of a refusal)", retried)
	}
	t.Logf("worker stopped: %v", err)
	if dead, err := q.DeadLetters(ctx, ""); err != nil || len(dead) != 0 {
		t.Fatalf("dead letters after a refusal: %v, %v; want none", dead, err)
	}
	if lag, err := q.Lag(ctx); err != nil || lag.Live != 1 {
		t.Fatalf("queue after a refusal: %+v, %v; want the tile still queued", lag, err)
	}

	// The manifest vanishes: the next delivery is the last.
	setMode(0o755)
	if err := os.Remove(filepath.Join(root, "campaigns", "refused", "steps", "scan-0001", "manifest.json")); err != nil {
		t.Fatal(err)
	}
	wctx, stop := context.WithCancel(ctx)
	done := make(chan error, 1)
	go func() {
		done <- runWorkers(wctx, q, rs, telemetry.NewWorker(prometheus.NewRegistry()), "second-worker", 1, log)
	}()
	var dead []*sluicepb.DeadLetter
	for ctx.Err() == nil {
		if dead, err = q.DeadLetters(ctx, ""); err != nil || len(dead) > 0 {
			break
		}
		time.Sleep(50 * time.Millisecond) // polling for the event, bounded by ctx
	}
	stop()
	if err := <-done; err != nil {
		t.Fatalf("second worker: %v", err)
	}
	if len(dead) != 1 || dead[0].Deliveries != 2 || !strings.Contains(dead[0].Reason, "manifest.json") {
		t.Fatalf("missing manifest: dead letters %v; want one, on delivery 2 of %d, naming manifest.json", dead, refusalMaxDeliver)
	}
	t.Logf("dead letter: delivery %d: %s", dead[0].Deliveries, dead[0].Reason)
}

// refusalMaxDeliver is the queue's delivery limit in the refusal tests.
const refusalMaxDeliver = 5

// refusalSetup starts an embedded NATS server and a local store holding one
// ingested 16³ step (one tile queued) of campaign "refused"; setMode sets
// the mode of every directory of the store.
func refusalSetup(ctx context.Context, t *testing.T) (*queue.Queue, *store.Local, string, func(fs.FileMode), *slog.Logger) {
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	srv, err := queue.StartServer(queue.ServerConfig{StoreDir: t.TempDir()})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	q, err := queue.Open(ctx, queue.Config{Server: srv, Logger: log,
		Policy: queue.Policy{AckWait: 10 * time.Second, MaxDeliver: refusalMaxDeliver, RetryDelay: 100 * time.Millisecond}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { q.Close() })

	dir := t.TempDir()
	root := filepath.Join(dir, "store")
	local, err := store.NewLocal(root)
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.DetectSample = false
	cfg.Tile = 16
	cfg.Measure.SkipContact = true
	if _, err := ingest.EnsureCampaign(ctx, local, "refused", cfg, Version, ""); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "scan-0001.raw")
	if err := volio.WriteRaw(path, pipelineScene(t, [3]int{16, 16, 16}, 11), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	in := &ingest.Ingester{Store: local, Queue: taskPublisher{q}, Version: Version, Log: log}
	if r, err := in.Ingest(ctx, ingest.Request{Campaign: "refused", Step: "scan-0001", Path: path, HasTime: true}); err != nil || r.TileCount != 1 {
		t.Fatalf("ingest: %v, %v; want one tile", r, err)
	}
	setMode := func(mode fs.FileMode) {
		filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
			if err == nil && d.IsDir() {
				os.Chmod(p, mode)
			}
			return nil
		})
	}
	t.Cleanup(func() { setMode(0o755) })
	return q, local, root, setMode, log

}

// An aggregator whose store refuses it stops its results consumer with
// that error (fs.ErrPermission in the chain) instead of naking the result
// for ever, and the result is not lost: once the store is writable again,
// a new consumer completes the step from it.
func TestAggregatorStopsOnStoreRefusal(t *testing.T) {
	if testenv.Unprivileged(t) {
		return
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	q, local, root, setMode, log := refusalSetup(ctx, t)
	// A worker on the writable store finishes the tile and publishes its result.
	wctx, stop := context.WithCancel(ctx)
	wdone := make(chan error, 1)
	go func() {
		wdone <- runWorkers(wctx, q, local, telemetry.NewWorker(prometheus.NewRegistry()), "w", 1, log)
	}()
	tile := filepath.Join(root, "campaigns", "refused", "steps", "scan-0001", "tiles")
	for ctx.Err() == nil {
		if ents, _ := os.ReadDir(tile); len(ents) > 0 {
			break
		}
		time.Sleep(50 * time.Millisecond) // polling for the event, bounded by ctx
	}
	for ctx.Err() == nil { // the result is published after the tile is written
		if lag, err := q.Lag(ctx); err == nil && lag.Live == 0 {
			break
		}
		time.Sleep(50 * time.Millisecond)
	}
	stop()
	if err := <-wdone; err != nil {
		t.Fatal(err)
	}

	setMode(0o555)
	a, _, _, err := newAggregator(ctx, store.WithRetry(local, store.RetryPolicy{}, nil), q, prometheus.NewRegistry(), log)
	if err != nil {
		t.Fatal(err)
	}
	err = q.Results(ctx, aggregator.StopOnRefusal(a.TileDone))
	if !errors.Is(err, fs.ErrPermission) || ctx.Err() != nil {
		t.Fatalf("results consumer over a read-only store returned %v; want it to stop with fs.ErrPermission in the chain", err)
	}
	t.Logf("results consumer stopped: %v", err)

	setMode(0o755)
	a, _, _, err = newAggregator(ctx, local, q, prometheus.NewRegistry(), log)
	if err != nil {
		t.Fatal(err)
	}
	rctx, rstop := context.WithCancel(ctx)
	rdone := make(chan error, 1)
	go func() { rdone <- q.Results(rctx, aggregator.StopOnRefusal(a.TileDone)) }()
	result := filepath.Join(root, "campaigns", "refused", "steps", "scan-0001", "result.json")
	for ctx.Err() == nil {
		if _, err := os.Stat(result); err == nil {
			break
		}
		time.Sleep(50 * time.Millisecond)
	}
	rstop()
	if err := <-rdone; err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(result); err != nil {
		t.Fatalf("the result naked by the stopped consumer was lost: %v", err)
	}
}

// embeddedQueue starts an embedded NATS server with JetStream in a
// temporary directory and opens the queue on it; both end with the test.
func embeddedQueue(ctx context.Context, t *testing.T) *queue.Queue {
	t.Helper()
	srv, err := queue.StartServer(queue.ServerConfig{StoreDir: t.TempDir()})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	q, err := queue.Open(ctx, queue.Config{Server: srv, Logger: quietLog()})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { q.Close() })
	return q
}
