package queue

import (
	"bytes"
	"context"
	"log/slog"
	"strings"
	"sync"
	"testing"
	"time"
)

// logBuffer collects log lines (safe for the queue's goroutines).
type logBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *logBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *logBuffer) lines(substr string) []string {
	l.mu.Lock()
	defer l.mu.Unlock()
	var out []string
	for _, s := range strings.Split(l.b.String(), "\n") {
		if strings.Contains(s, substr) {
			out = append(out, s)
		}
	}
	return out
}

// consumerPolicy reads the delivery policy of both task consumers from the
// server and fails unless they agree.
func consumerPolicy(t *testing.T, q *Queue) (time.Duration, int) {
	t.Helper()
	ctx := context.Background()
	li, err := q.js.Consumer(ctx, StreamTasks, ConsumerLive)
	if err != nil {
		t.Fatal(err)
	}
	bi, err := q.js.Consumer(ctx, StreamTasks, ConsumerBatch)
	if err != nil {
		t.Fatal(err)
	}
	l, b := li.CachedInfo().Config, bi.CachedInfo().Config
	if l.AckWait != b.AckWait || l.MaxDeliver != b.MaxDeliver {
		t.Fatalf("live consumer has %v / %d, batch %v / %d", l.AckWait, l.MaxDeliver, b.AckWait, b.MaxDeliver)
	}
	return l.AckWait, l.MaxDeliver
}

// The first process to open the queue creates the task consumers with its
// policy. A worker opened later with other flags leaves the consumers as
// they are, works with the policy in force and logs one line with both; a
// bystander (ingest, status) does the same without the line; one with the
// same flags says nothing.
func TestPolicyFollowerKeepsPolicyInForce(t *testing.T) {
	srv, first := newQueue(t, Policy{AckWait: 2 * time.Second, MaxDeliver: 3})
	if w, n := consumerPolicy(t, first); w != 2*time.Second || n != 3 {
		t.Fatalf("creator's consumers: %v / %d, want 2s / 3", w, n)
	}
	for _, c := range []struct {
		name     string
		role     PolicyRole
		pol      Policy
		wantLine bool
	}{
		{"follower with other flags", PolicyFollower, Policy{AckWait: 7 * time.Second, MaxDeliver: 9}, true},
		{"follower with default flags", PolicyFollower, Policy{}, true},
		{"follower with the same flags", PolicyFollower, Policy{AckWait: 2 * time.Second, MaxDeliver: 3}, false},
		{"bystander with other flags", PolicyBystander, Policy{AckWait: 7 * time.Second, MaxDeliver: 9}, false},
	} {
		t.Run(c.name, func(t *testing.T) {
			var log logBuffer
			q := openQueue(t, Config{Server: srv, Role: c.role, Policy: c.pol, Logger: slog.New(slog.NewTextHandler(&log, nil))})
			if w, n := consumerPolicy(t, q); w != 2*time.Second || n != 3 {
				t.Errorf("consumers after the open: %v / %d, want the creator's 2s / 3", w, n)
			}
			if p := q.Policy(); p.AckWait != 2*time.Second || p.MaxDeliver != 3 {
				t.Errorf("Policy() = %v, want the one in force", p)
			}
			lines := log.lines("task delivery policy")
			switch {
			case !c.wantLine && len(lines) != 0:
				t.Errorf("logged %q, want nothing", lines)
			case c.wantLine && len(lines) != 1:
				t.Errorf("logged %q, want one line", lines)
			case c.wantLine:
				asked := c.pol.withDefaults().String()
				if !strings.Contains(lines[0], "ack wait 2s, max deliver 3") || !strings.Contains(lines[0], asked) {
					t.Errorf("line %q does not give both the policy in force and %q", lines[0], asked)
				}
			}
		})
	}
}

// The owner's open (the process running the NATS server) and SetPolicy
// (`sluice queue-policy`) replace the policy in force, and say so.
func TestPolicyOwnerAndSetPolicyReplaceIt(t *testing.T) {
	srv, _ := newQueue(t, Policy{AckWait: 2 * time.Second, MaxDeliver: 3})
	var log logBuffer
	owner := openQueue(t, Config{Server: srv, Role: PolicyOwner, Policy: Policy{AckWait: 4 * time.Second, MaxDeliver: 6},
		Logger: slog.New(slog.NewTextHandler(&log, nil))})
	if w, n := consumerPolicy(t, owner); w != 4*time.Second || n != 6 {
		t.Errorf("after the owner's open: %v / %d, want 4s / 6", w, n)
	}
	if l := log.lines("task delivery policy changed"); len(l) != 2 || !strings.Contains(l[0], "ack wait 2s, max deliver 3") {
		t.Errorf("change log %q: want one line per consumer naming the old policy", l)
	}

	admin := openQueue(t, Config{Server: srv, Role: PolicyBystander})
	if err := admin.SetPolicy(context.Background(), Policy{AckWait: 11 * time.Second, MaxDeliver: 8}); err != nil {
		t.Fatal(err)
	}
	if w, n := consumerPolicy(t, admin); w != 11*time.Second || n != 8 {
		t.Errorf("after SetPolicy: %v / %d, want 11s / 8", w, n)
	}
	if p := admin.Policy(); p.AckWait != 11*time.Second || p.MaxDeliver != 8 {
		t.Errorf("Policy() after SetPolicy = %v", p)
	}
	if err := admin.SetPolicy(context.Background(), Policy{MaxDeliver: 2, BackOff: []time.Duration{time.Second, time.Second, time.Second}}); err == nil {
		t.Error("SetPolicy accepted 3 backoff steps for 2 deliveries")
	}
	// A follower opened now sees the new policy.
	if p := openQueue(t, Config{Server: srv}).Policy(); p.AckWait != 11*time.Second || p.MaxDeliver != 8 {
		t.Errorf("follower after SetPolicy works with %v", p)
	}
}

// On a fresh server any role creates the consumers with its own policy.
func TestPolicyFirstCreatorSetsIt(t *testing.T) {
	for _, role := range []PolicyRole{PolicyFollower, PolicyBystander} {
		fresh := startServer(t, t.TempDir())
		t.Cleanup(fresh.Shutdown)
		q := openQueue(t, Config{Server: fresh, Role: role, Policy: Policy{AckWait: 7 * time.Second, MaxDeliver: 2}})
		if w, n := consumerPolicy(t, q); w != 7*time.Second || n != 2 {
			t.Errorf("role %d on a fresh server: %v / %d, want 7s / 2", role, w, n)
		}
	}
}
