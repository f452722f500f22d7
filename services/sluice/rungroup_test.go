package main

import (
	"context"
	"errors"
	"strings"
	"sync/atomic"
	"testing"
)

// TestRunGroupFirstFailureStopsAll: the first part to fail cancels the
// others' context and is the group's error; an orderly stop (the parent
// context ending) is no error; a part ending on its own while the process
// should run is one.
func TestRunGroupFirstFailureStopsAll(t *testing.T) {
	t.Run("failure", func(t *testing.T) {
		g := newRunGroup(context.Background())
		var stopped atomic.Int32
		for _, name := range []string{"a", "b"} {
			g.Go(name, func(ctx context.Context) error {
				<-ctx.Done()
				stopped.Add(1)
				return nil
			})
		}
		g.Go("tile results", func(ctx context.Context) error { return errors.New("consumer gone") })
		err := g.Wait()
		if err == nil || err.Error() != "tile results: consumer gone" {
			t.Fatalf("Wait = %v, want the failing part's error", err)
		}
		if stopped.Load() != 2 {
			t.Fatalf("%d of 2 other parts saw the cancellation", stopped.Load())
		}
	})
	t.Run("shutdown", func(t *testing.T) {
		ctx, cancel := context.WithCancel(context.Background())
		g := newRunGroup(ctx)
		for _, name := range []string{"a", "b"} {
			g.Go(name, func(ctx context.Context) error { <-ctx.Done(); return ctx.Err() })
		}
		cancel()
		if err := g.Wait(); err != nil {
			t.Fatalf("Wait after the parent ended = %v, want nil", err)
		}
	})
	t.Run("ended on its own", func(t *testing.T) {
		g := newRunGroup(context.Background())
		g.Go("a", func(ctx context.Context) error { <-ctx.Done(); return nil })
		g.Go("watcher", func(ctx context.Context) error { return nil })
		if err := g.Wait(); err == nil || !strings.Contains(err.Error(), "watcher stopped on its own") {
			t.Fatalf("Wait = %v, want the watcher named", err)
		}
	})
}
