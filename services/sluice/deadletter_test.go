package main

import (
	"context"
	"errors"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"sluice/pkg/campaign"
	"sluice/pkg/queue"
	"sluice/pkg/store"
	"sluice/pkg/telemetry"
	"sluice/proto/sluicepb"
	"sluice/services/aggregator"
	"sluice/services/ingest"
)

// putLog is a local store that counts the failure records written.
type putLog struct {
	store.Store
	mu       sync.Mutex
	failures []string
}

func (p *putLog) Put(ctx context.Context, key string, b []byte) error {
	if strings.HasSuffix(key, "/failed.json") {
		p.mu.Lock()
		p.failures = append(p.failures, key)
		p.mu.Unlock()
	}
	return p.Store.Put(ctx, key, b)
}

func (p *putLog) written() []string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return append([]string(nil), p.failures...)
}

// waitUntil polls cond every 20 ms; limit is a liveness guard, not a speed
// check.
func waitUntil(t *testing.T, what string, cond func() bool) {
	t.Helper()
	for deadline := time.Now().Add(time.Minute); !cond(); time.Sleep(20 * time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatalf("still waiting after a minute for %s", what)
		}
	}
}

// TestDeadLettersSurviveAggregatorRestart runs the aggregator's consumers on
// embedded JetStream. A tile a worker gives up (a permanent failure) fails
// its step; the aggregator is stopped; another step's tile is dead-lettered
// while none runs; a new aggregator on the same store and stream shows the
// first step failed from the store at start-up and the second once its
// dead letter arrives — and handles only that one: the durable consumer
// resumes after the last record acknowledged instead of re-reading the
// stream (the old loop re-read it every 2 s and kept what it had seen in
// memory only, so a restarted aggregator forgot every failed step).
func TestDeadLettersSurviveAggregatorRestart(t *testing.T) {
	ctx := context.Background()
	q := embeddedQueue(ctx, t)
	local, err := store.NewLocal(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	rec, err := ingest.EnsureCampaign(ctx, local, "c", campaign.Default(), Version, "")
	if err != nil {
		t.Fatal(err)
	}

	// deadLetter queues a tile of step and has a worker fail it for good.
	deadLetter := func(step string) {
		t.Helper()
		tk := &sluicepb.TileTask{Campaign: "c", Step: step, Tile: 3, TileCount: 8, ParamHash: rec.Current,
			Core: &sluicepb.Box{MaxZ: 16, MaxY: 16, MaxX: 16}}
		if _, err := q.PublishTask(ctx, tk); err != nil {
			t.Fatal(err)
		}
		wctx, stop := context.WithCancel(ctx)
		done := make(chan error, 1)
		go func() {
			done <- q.Work(wctx, func(context.Context, *sluicepb.TileTask) error {
				return queue.Permanent(errors.New("volio: label volume unreadable")) // shown without the package prefix
			}, queue.WorkOptions{WorkerID: "w1"})
		}()
		waitUntil(t, "the dead letter of step "+step, func() bool {
			dls, err := q.DeadLetters(ctx, "c")
			if err != nil {
				return false
			}
			for _, d := range dls {
				if d.GetTask().GetStep() == step {
					return true
				}
			}
			return false
		})
		stop()
		if err := <-done; err != nil {
			t.Fatal(err)
		}
	}
	status := func(a *aggregator.Aggregator, step string) string {
		steps, err := a.Steps(ctx, "c")
		if err != nil {
			return err.Error()
		}
		for _, s := range steps {
			if s.Step == step {
				return s.Status + " " + s.Reason
			}
		}
		return "absent"
	}
	run := func(a *aggregator.Aggregator) (stop func()) {
		actx, cancel := context.WithCancel(ctx)
		done := make(chan error, 1)
		go func() { done <- runAggregator(actx, q, a, telemetry.NewAggregator(registry()), quietLog()) }()
		return func() {
			cancel()
			if err := <-done; err != nil {
				t.Errorf("runAggregator: %v", err)
			}
		}
	}

	first := &putLog{Store: local}
	a1 := &aggregator.Aggregator{Store: first, Log: quietLog()}
	if err := a1.Start(ctx); err != nil {
		t.Fatal(err)
	}
	stop := run(a1)
	deadLetter("0001")
	waitUntil(t, "step 0001 failed", func() bool { return strings.HasPrefix(status(a1, "0001"), "failed tile 3: label volume unreadable") })
	stop()

	deadLetter("0002") // no aggregator runs

	second := &putLog{Store: local}
	a2 := &aggregator.Aggregator{Store: second, Log: quietLog()}
	if err := a2.Start(ctx); err != nil {
		t.Fatal(err)
	}
	if got := status(a2, "0001"); !strings.HasPrefix(got, "failed tile 3: label volume unreadable") {
		t.Fatalf("step 0001 after restart: %q, want failed with the dead letter's reason", got)
	}
	stop = run(a2)
	defer stop()
	waitUntil(t, "step 0002 failed after restart", func() bool { return strings.HasPrefix(status(a2, "0002"), "failed tile 3") })
	js, err := jetstream.New(q.Conn())
	if err != nil {
		t.Fatal(err)
	}
	waitUntil(t, "the dead-letter consumer to settle", func() bool {
		c, err := js.Consumer(ctx, queue.StreamDead, queue.ConsumerDead)
		if err != nil {
			return false
		}
		ci, err := c.Info(ctx)
		return err == nil && ci.NumPending == 0 && ci.NumAckPending == 0
	})
	if got := second.written(); len(got) != 1 || !strings.Contains(got[0], "/steps/0002/") {
		t.Fatalf("the restarted aggregator recorded failures %q, want only step 0002's", got)
	}
	if got := first.written(); len(got) != 1 || !strings.Contains(got[0], "/steps/0001/") {
		t.Fatalf("the first aggregator recorded failures %q, want step 0001's once", got)
	}
}

// TestAggregatorStopsWhenAConsumerDies: the tile-results consumer of a
// running aggregator is deleted on the (embedded) server, so it can never
// deliver again. runAggregator stops its other consumers and returns an
// error naming the dead one, which `sluice aggregate` turns into exit 1.
// (It used to wait for all its goroutines, and the backlog loop never
// ended: the process stayed up doing nothing.)
func TestAggregatorStopsWhenAConsumerDies(t *testing.T) {
	ctx := context.Background()
	q := embeddedQueue(ctx, t)
	local, err := store.NewLocal(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	a := &aggregator.Aggregator{Store: local, Log: quietLog()}
	if err := a.Start(ctx); err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- runAggregator(ctx, q, a, telemetry.NewAggregator(registry()), quietLog()) }()
	js, err := jetstream.New(q.Conn())
	if err != nil {
		t.Fatal(err)
	}
	waitUntil(t, "the results consumer", func() bool {
		_, err := js.Consumer(ctx, queue.StreamResults, queue.ConsumerResults)
		return err == nil
	})
	if err := js.DeleteConsumer(ctx, queue.StreamResults, queue.ConsumerResults); err != nil {
		t.Fatal(err)
	}
	select {
	case err := <-done:
		const want = "tile results: queue: consumer aggregator-results is gone from the server"
		if err == nil || !strings.HasPrefix(err.Error(), want) {
			t.Fatalf("runAggregator returned %v, want %q…", err, want)
		}
	case <-time.After(time.Minute): // a liveness guard
		t.Fatal("runAggregator still runs a minute after its results consumer was deleted")
	}
}
