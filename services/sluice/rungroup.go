package main

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"sync"
)

// runGroup runs the long-lived parts of a service process (consumers,
// workers, the watcher). The first part to end stops the others — its
// context is cancelled — and is the group's outcome: a part that fails
// takes the process down with its error, so the process exits non-zero and
// systemd or Kubernetes restarts it instead of leaving it up doing nothing.
// A part that returns nil before shutdown was asked for is a failure too:
// a long-lived part only ends when told to.
type runGroup struct {
	parent context.Context
	ctx    context.Context
	cancel context.CancelFunc
	wg     sync.WaitGroup
	once   sync.Once
	err    error
}

// newRunGroup returns a group whose parts run under a context derived from
// ctx; ending ctx (a signal) is an orderly shutdown.
func newRunGroup(ctx context.Context) *runGroup {
	gctx, cancel := context.WithCancel(ctx)
	return &runGroup{parent: ctx, ctx: gctx, cancel: cancel}
}

// Context is the context the parts run under: cancelled when the parent
// ends or any part returns.
func (g *runGroup) Context() context.Context { return g.ctx }

// Go starts part; name says which part ended in the group's error ("" for
// a part whose errors name themselves).
func (g *runGroup) Go(name string, part func(ctx context.Context) error) {
	g.wg.Add(1)
	go func() {
		defer g.wg.Done()
		err := part(g.ctx)
		g.once.Do(func() {
			switch {
			case err != nil && !(errors.Is(err, context.Canceled) && g.parent.Err() != nil):
				g.err = err
				if name != "" {
					g.err = fmt.Errorf("%s: %w", name, err)
				}
			case g.parent.Err() == nil:
				g.err = fmt.Errorf("%s stopped on its own", cmp.Or(name, "a part"))
			}
			g.cancel()
		})
	}()
}

// Wait waits for every part to end and returns the error of the first part
// that ended (nil after an orderly shutdown).
func (g *runGroup) Wait() error {
	g.wg.Wait()
	g.cancel()
	return g.err
}

// isDone reports whether c is closed.
func isDone(c <-chan struct{}) bool {
	select {
	case <-c:
		return true
	default:
		return false
	}
}
