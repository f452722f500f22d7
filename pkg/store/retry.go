package store

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"math/rand/v2"
	"time"
)

// RetryPolicy bounds how a Retrying store retries a failed operation:
// exponential backoff from First, doubling up to Max, with ±25 % jitter
// (common practice for clients of a shared server, so that restarted
// workers do not retry in lock step), until Budget has passed since the
// first attempt.
type RetryPolicy struct {
	First, Max, Budget time.Duration
}

// DefaultRetry rides out an object-store restart of up to a minute.
var DefaultRetry = RetryPolicy{First: 100 * time.Millisecond, Max: 5 * time.Second, Budget: time.Minute}

// Retrying is a Store that retries operations failing with a transient
// error (connection refused, timeouts, server errors; see IsTransient). A
// permanent error (see IsPermanent) is returned at once: a missing key, an
// invalid key and a cancelled context are answers, not faults, and are
// returned as they are; a refusal (access denied, wrong keys, a missing
// bucket, a full or read-only disk) is reported once to OnError and
// returned marked as not retried, since a minute of retries would only
// delay the one line that says what to fix. Every retried operation is
// idempotent (Put replaces the whole value), so a retry after a lost reply
// is harmless.
type Retrying struct {
	Store
	Policy RetryPolicy
	// OnError, when set, is called after every failed attempt that is not
	// an answer; retrying says whether another attempt follows.
	OnError func(op string, err error, retrying bool)
}

// WithRetry wraps s in a Retrying store (zero policy fields take
// DefaultRetry's).
func WithRetry(s Store, p RetryPolicy, onError func(op string, err error, retrying bool)) *Retrying {
	if p.First <= 0 {
		p.First = DefaultRetry.First
	}
	if p.Max <= 0 {
		p.Max = DefaultRetry.Max
	}
	if p.Budget <= 0 {
		p.Budget = DefaultRetry.Budget
	}
	return &Retrying{Store: s, Policy: p, OnError: onError}
}

// String names the wrapped store.
func (r *Retrying) String() string {
	if s, ok := r.Store.(interface{ String() string }); ok {
		return s.String()
	}
	return "store"
}

// Unwrap returns the wrapped store.
func (r *Retrying) Unwrap() Store { return r.Store }

// do runs op until it succeeds, fails permanently, or the budget is spent.
// bad is the validation error of the key or prefix, if any.
func (r *Retrying) do(ctx context.Context, name string, bad error, op func() error) error {
	if bad != nil {
		return op() // the store's own error names the bad key
	}
	start := time.Now()
	delay := r.Policy.First
	for attempt := 1; ; attempt++ {
		err := op()
		if err == nil || ctx.Err() != nil || isAnswer(err) {
			return err
		}
		if IsPermanent(err) {
			if r.OnError != nil {
				r.OnError(name, err, false)
			}
			return fmt.Errorf("%w (permanent; not retried)", err)
		}
		wait := time.Duration(float64(delay) * (0.75 + 0.5*rand.Float64()))
		retrying := time.Since(start)+wait <= r.Policy.Budget
		if r.OnError != nil {
			r.OnError(name, err, retrying)
		}
		if !retrying {
			return fmt.Errorf("%w (gave up after %d attempts in %s)", err, attempt, time.Since(start).Round(time.Millisecond))
		}
		select {
		case <-ctx.Done():
			return err
		case <-time.After(wait):
		}
		delay = min(2*delay, r.Policy.Max)
	}
}

// isAnswer reports whether err is the store's answer to a question (no
// such key, no such valid key) or the caller's own cancellation: not a
// fault of the store.
func isAnswer(err error) bool {
	return errors.Is(err, fs.ErrNotExist) || errors.Is(err, ErrKey) || errors.Is(err, context.Canceled)
}

// Get retries s.Get.
func (r *Retrying) Get(ctx context.Context, key string) (b []byte, err error) {
	err = r.do(ctx, "get", CheckKey(key), func() error { b, err = r.Store.Get(ctx, key); return err })
	return b, err
}

// Put retries s.Put.
func (r *Retrying) Put(ctx context.Context, key string, data []byte) error {
	return r.do(ctx, "put", CheckKey(key), func() error { return r.Store.Put(ctx, key, data) })
}

// List retries s.List.
func (r *Retrying) List(ctx context.Context, prefix string) (keys []string, err error) {
	err = r.do(ctx, "list", checkPrefix(prefix), func() error { keys, err = r.Store.List(ctx, prefix); return err })
	return keys, err
}

// Dirs retries s.Dirs.
func (r *Retrying) Dirs(ctx context.Context, prefix string) (dirs []string, err error) {
	err = r.do(ctx, "list", checkDirPrefix(prefix), func() error { dirs, err = r.Store.Dirs(ctx, prefix); return err })
	return dirs, err
}

// Delete retries s.Delete.
func (r *Retrying) Delete(ctx context.Context, key string) error {
	return r.do(ctx, "delete", CheckKey(key), func() error { return r.Store.Delete(ctx, key) })
}

// Stat retries s.Stat.
func (r *Retrying) Stat(ctx context.Context, key string) (info Info, err error) {
	err = r.do(ctx, "stat", CheckKey(key), func() error { info, err = r.Store.Stat(ctx, key); return err })
	return info, err
}
