package store

import (
	"context"
	"errors"
	"io/fs"
	"strings"
	"sync"
	"testing"
	"time"

	"sluice/internal/testenv"
)

// failures records the OnError calls of a Retrying store.
type failures struct {
	mu    sync.Mutex
	ops   []string
	errs  []error
	final int // calls with retrying == false
}

func (f *failures) record(op string, err error, retrying bool) {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.ops = append(f.ops, op)
	f.errs = append(f.errs, err)
	if !retrying {
		f.final++
	}
}

func (f *failures) count() (int, int) {
	f.mu.Lock()
	defer f.mu.Unlock()
	return len(f.ops), f.final
}

// A Retrying store over a real MinIO server rides out a stop and start of
// the server: the Get issued while it is down returns the value stored
// before, once it is back. Answers (a missing key, an invalid key) are
// never retried, and a server that stays down makes the operation fail
// once the budget is spent.
func TestRetryingRidesOutRestart(t *testing.T) {
	m := testenv.StartMinIO(t)
	ctx := context.Background()
	var s3 Store
	var err error
	for i := 0; i < 60; i++ { // MinIO may answer "not initialized" at first
		if s3, err = Open(ctx, m.URL("sluice-retry"), Credentials{Secret(m.AccessKey), Secret(m.SecretKey)}); err == nil {
			break
		}
		time.Sleep(500 * time.Millisecond)
	}
	if err != nil {
		t.Fatal(err)
	}
	var f failures
	r := WithRetry(s3, RetryPolicy{First: 50 * time.Millisecond, Max: time.Second, Budget: time.Minute}, f.record)
	if err := r.Put(ctx, "campaigns/c/steps/s/manifest.json", []byte(`{"ok":true}`)); err != nil {
		t.Fatal(err)
	}

	// Answers, not faults.
	if _, err := r.Get(ctx, "campaigns/c/none.json"); !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("missing key: %v", err)
	}
	if _, err := r.Get(ctx, "../etc/passwd"); !errors.Is(err, ErrKey) {
		t.Fatalf("invalid key: %v", err)
	}
	if n, _ := f.count(); n != 0 {
		t.Fatalf("answers were treated as faults: %v", f.ops)
	}

	m.Stop()
	got := make(chan []byte, 1)
	errc := make(chan error, 1)
	go func() {
		b, err := r.Get(ctx, "campaigns/c/steps/s/manifest.json")
		got <- b
		errc <- err
	}()
	// Start again once the Get has failed at least once.
	for n, _ := f.count(); n == 0; n, _ = f.count() {
		time.Sleep(20 * time.Millisecond)
	}
	m.Start()
	b, err := <-got, <-errc
	if err != nil || string(b) != `{"ok":true}` {
		t.Fatalf("Get across the restart: %q, %v", b, err)
	}
	n, final := f.count()
	t.Logf("Get failed %d times while MinIO was down, then succeeded", n)
	if final != 0 {
		t.Errorf("%d failures reported as final", final)
	}
	for _, err := range f.errs {
		if !IsTransient(err) {
			t.Errorf("stopped server classified permanent: %v", err)
		}
	}

	// A server that stays down: the operation fails when the budget is spent.
	m.Stop()
	var g failures
	short := WithRetry(s3, RetryPolicy{First: 10 * time.Millisecond, Max: 50 * time.Millisecond, Budget: 300 * time.Millisecond}, g.record)
	err = short.Put(ctx, "campaigns/c/x.json", []byte("x"))
	if err == nil {
		t.Fatal("Put to a stopped server succeeded")
	}
	if !IsTransient(err) || !strings.Contains(err.Error(), "gave up after") {
		t.Errorf("stopped server: %v; want a transient error that says it gave up", err)
	}
	t.Logf("stopped server: %v", err)
	// (minio-go retries inside one attempt too, so an attempt can outlast
	// the whole budget.)
	if n, final := g.count(); n < 1 || final != 1 {
		t.Errorf("stopped server: %d failed attempts, %d final; want ≥ 1 and exactly 1", n, final)
	}
}
