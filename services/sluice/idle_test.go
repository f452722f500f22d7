package main

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"sluice/pkg/queue"
	"sluice/proto/sluicepb"
)

// TestWaitQueueIdle: an empty task queue lets a worker with --exit-when-idle
// leave; one waiting task keeps it (the check fails if waitQueueIdle
// ignores the stream's waiting tasks).
func TestWaitQueueIdle(t *testing.T) {
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	q := embeddedQueue(ctx, t)
	if err := waitQueueIdle(ctx, q, 300*time.Millisecond, 50*time.Millisecond); err != nil {
		t.Fatalf("empty queue: %v", err)
	}
	tk := &sluicepb.TileTask{Campaign: "c", Step: "scan-0001", Tile: 0, TileCount: 8, ParamHash: "abc", Priority: sluicepb.Priority_PRIORITY_BATCH}
	if _, err := q.PublishTask(ctx, tk); err != nil {
		t.Fatal(err)
	}
	wctx, wcancel := context.WithTimeout(ctx, 1500*time.Millisecond)
	defer wcancel()
	if err := waitQueueIdle(wctx, q, 300*time.Millisecond, 50*time.Millisecond); !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("queue with a waiting batch task: waitQueueIdle returned %v, want the context's deadline", err)
	}
	l, err := q.Lag(ctx)
	if err != nil || l.Batch != 1 {
		t.Fatalf("lag %+v, %v: want the one batch task", l, err)
	}
}

// TestWorkerExitWhenIdle: `sluice worker --exit-when-idle` on an empty queue
// drains and exits 0 with one line saying why; a sub-second or negative
// value is refused.
func TestWorkerExitWhenIdle(t *testing.T) {
	srv, err := queue.StartServer(queue.ServerConfig{StoreDir: t.TempDir(), Listen: "127.0.0.1:-1"})
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown()
	store := t.TempDir()
	code, _, errs := runCLI(t, "worker", "--nats", srv.ClientURL(), "--store", store, "--http", "off", "--id", "w-idle", "--exit-when-idle", "1s")
	if code != exitOK || !strings.Contains(errs, "worker w-idle: the task queue stayed empty for 1s; leaving") {
		t.Fatalf("exit %d, stderr:\n%s", code, errs)
	}
	for _, v := range []string{"10ms", "-1s"} {
		code, _, errs := runCLI(t, "worker", "--nats", srv.ClientURL(), "--store", store, "--http", "off", "--exit-when-idle", v)
		if code != exitBadInput || !strings.Contains(errs, "--exit-when-idle") || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("--exit-when-idle %s: exit %d, stderr %q; want exit 2 and one line", v, code, errs)
		}
	}
}
