package main

import (
	"context"
	"io"
	"log/slog"
	"strings"
	"testing"
	"time"

	"sluice/pkg/queue"
)

// `sluice queue-policy` shows the policy the first process set, changes
// only what it is given, and a worker's queue opened afterwards with other
// flags works with the new policy without changing it.
func TestQueuePolicyCommand(t *testing.T) {
	srv, url := badInputNode(t)
	ctx := context.Background()
	quiet := slog.New(slog.NewTextHandler(io.Discard, nil))
	first, err := queue.Open(ctx, queue.Config{Server: srv, Logger: quiet, Policy: queue.Policy{AckWait: 2 * time.Second, MaxDeliver: 3}})
	if err != nil {
		t.Fatal(err)
	}
	defer first.Close()

	code, out, errs := runCLI(t, "queue-policy", "--nats", url)
	if code != exitOK || out != "task delivery policy: ack wait 2s, max deliver 3\n" {
		t.Fatalf("show: exit %d, out %q, err %q", code, out, errs)
	}
	code, out, errs = runCLI(t, "queue-policy", "--nats", url, "--max-deliver", "7")
	if code != exitOK || out != "task delivery policy: was ack wait 2s, max deliver 3, now ack wait 2s, max deliver 7\n" {
		t.Fatalf("set: exit %d, out %q, err %q", code, out, errs)
	}
	worker, err := queue.Open(ctx, queue.Config{URL: url, Logger: quiet, Policy: queue.Policy{AckWait: time.Minute, MaxDeliver: 2}})
	if err != nil {
		t.Fatal(err)
	}
	defer worker.Close()
	if p := worker.Policy(); p.AckWait != 2*time.Second || p.MaxDeliver != 7 {
		t.Errorf("a worker opened after the change works with %v, want ack wait 2s, max deliver 7", p)
	}
	code, out, _ = runCLI(t, "queue-policy", "--nats", url)
	if code != exitOK || !strings.Contains(out, "ack wait 2s, max deliver 7") {
		t.Errorf("after the worker's open: exit %d, %q; want the policy unchanged", code, out)
	}
	if code, _, errs = runCLI(t, "queue-policy", "--nats", url, "--max-deliver", "0"); code != exitBadInput || strings.Count(errs, "\n") != 1 {
		t.Errorf("--max-deliver 0: exit %d, %q; want one line and exit %d", code, errs, exitBadInput)
	}
}
