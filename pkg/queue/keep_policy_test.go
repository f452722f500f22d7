package queue

import (
	"context"
	"testing"
	"time"
)

// A process opened with KeepPolicy (ingest, status) leaves the workers'
// delivery policy on the consumers as it is and reports it; a plain open
// rewrites it (the last to open wins); KeepPolicy on a fresh server creates
// the consumers with its own policy.
func TestKeepPolicy(t *testing.T) {
	srv, _ := newQueue(t, Policy{AckWait: 2 * time.Second, MaxDeliver: 3})
	info := func() (time.Duration, int) {
		q := openQueue(t, Config{Server: srv, KeepPolicy: true})
		ci, err := q.live.Info(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		if p := q.Policy(); p.AckWait != ci.Config.AckWait || p.MaxDeliver != ci.Config.MaxDeliver {
			t.Errorf("Policy() = %v, consumer has %v / %d", p, ci.Config.AckWait, ci.Config.MaxDeliver)
		}
		return ci.Config.AckWait, ci.Config.MaxDeliver
	}
	if w, n := info(); w != 2*time.Second || n != 3 {
		t.Errorf("after a KeepPolicy open: ack wait %v, max deliver %d; want the workers' 2s, 3", w, n)
	}
	openQueue(t, Config{Server: srv}) // default policy, written
	if w, n := info(); w != DefaultPolicy.AckWait || n != DefaultPolicy.MaxDeliver {
		t.Errorf("after a plain open: ack wait %v, max deliver %d; want the defaults", w, n)
	}

	fresh := startServer(t, t.TempDir())
	t.Cleanup(fresh.Shutdown)
	q := openQueue(t, Config{Server: fresh, KeepPolicy: true, Policy: Policy{AckWait: 7 * time.Second, MaxDeliver: 2}})
	ci, err := q.batch.Info(context.Background())
	if err != nil || ci.Config.AckWait != 7*time.Second || ci.Config.MaxDeliver != 2 {
		t.Errorf("KeepPolicy on a fresh server: %v, %v", ci, err)
	}
}
