package queue

import (
	"context"
	"errors"
	"os"
	"slices"
	"sync"
	"testing"
	"time"

	pb "sluice/proto/sluicepb"
)

// beatLog collects the beats a watcher hears.
type beatLog struct {
	mu    sync.Mutex
	beats []*pb.WorkerBeat
}

func (l *beatLog) add(b *pb.WorkerBeat) {
	l.mu.Lock()
	l.beats = append(l.beats, b)
	l.mu.Unlock()
}

// find returns the first beat of worker id that satisfies cond, or nil.
func (l *beatLog) find(id string, cond func(*pb.WorkerBeat) bool) *pb.WorkerBeat {
	l.mu.Lock()
	defer l.mu.Unlock()
	for _, b := range l.beats {
		if b.WorkerId == id && cond(b) {
			return b
		}
	}
	return nil
}

func (l *beatLog) last() *pb.WorkerBeat {
	l.mu.Lock()
	defer l.mu.Unlock()
	if len(l.beats) == 0 {
		return nil
	}
	return l.beats[len(l.beats)-1]
}

// TestWorkerBeats: a worker's beats, heard by a watcher on another
// connection, name it (id, host, pid, concurrency, interval), count the
// tiles it acknowledged and those whose handler failed, list the task in
// its hands while the handler runs, and end with one beat that says it
// stops, after which none comes.
func TestWorkerBeats(t *testing.T) {
	srv, q := newQueue(t, Policy{MaxDeliver: 1})
	watcher := openQueue(t, Config{Server: srv})
	var heard beatLog
	wctx, wstop := context.WithCancel(context.Background())
	defer wstop()
	subscribed := make(chan struct{})
	go watcher.watchWorkers(wctx, heard.add, func() { close(subscribed) })
	// A beat sent before the subscription reached the server is lost (core
	// NATS); flushing the watcher's connection after the subscription is
	// registered makes sure it is there. (Counting the connection's
	// subscriptions does not tell: JetStream requests made in Open already
	// hold one.)
	<-subscribed
	if err := watcher.nc.Flush(); err != nil {
		t.Fatal(err)
	}

	ctx := context.Background()
	for i := int32(0); i < 4; i++ {
		if _, err := q.PublishTask(ctx, task("beats", "s1", i, pb.Priority_PRIORITY_LIVE)); err != nil {
			t.Fatal(err)
		}
	}
	release := make(chan struct{})
	held := TaskID(task("beats", "s1", 0, pb.Priority_PRIORITY_LIVE))
	const beat = 50 * time.Millisecond
	stop := runWork(t, q, func(ctx context.Context, tk *pb.TileTask) error {
		switch tk.Tile {
		case 0:
			<-release
		case 3:
			return Permanent(errors.New("bad tile"))
		}
		return nil
	}, WorkOptions{WorkerID: "w-beat", Concurrency: 2, Beat: beat})
	// Cleanups run last first: a failing wait still lets tile 0 go before
	// the worker is stopped.
	var releaseOnce sync.Once
	let := func() { releaseOnce.Do(func() { close(release) }) }
	t.Cleanup(let)

	var b *pb.WorkerBeat
	waitFor(t, "a beat with tile 0 in hand, 2 tiles done and 1 failed", func() bool {
		b = heard.find("w-beat", func(b *pb.WorkerBeat) bool {
			return slices.Equal(b.Current, []string{held}) && b.TilesDone == 2 && b.TilesFailed == 1
		})
		return b != nil
	})
	host, _ := os.Hostname()
	if b.Host != host || b.Pid != int64(os.Getpid()) || b.Concurrency != 2 || b.Interval.AsDuration() != beat || b.Stopping {
		t.Errorf("beat: host %q pid %d concurrency %d interval %v stopping %v; want %q %d 2 %v false",
			b.Host, b.Pid, b.Concurrency, b.Interval.AsDuration(), b.Stopping, host, os.Getpid(), beat)
	}
	if s, at := b.StartedAt.AsTime(), b.SentAt.AsTime(); s.IsZero() || at.Before(s) {
		t.Errorf("beat started at %v, sent at %v", s, at)
	}
	let()
	waitFor(t, "a beat with 3 tiles done and none in hand", func() bool {
		return heard.find("w-beat", func(b *pb.WorkerBeat) bool { return b.TilesDone == 3 && len(b.Current) == 0 }) != nil
	})

	stop()
	waitFor(t, "the stopping beat", func() bool {
		return heard.find("w-beat", func(b *pb.WorkerBeat) bool { return b.Stopping }) != nil
	})
	// Nothing follows it: after a round trip of the worker's connection
	// (every beat it sent is delivered before the flush returns) and of the
	// watcher's, the stopping beat is still the last one heard.
	q.nc.Flush()
	watcher.nc.Flush()
	if l := heard.last(); l == nil || !l.Stopping || l.TilesDone != 3 || l.TilesFailed != 1 {
		t.Errorf("last beat heard: %v; want the stopping beat with 3 done, 1 failed", l)
	}
}

// TestNoBeatsWhenOff: Beat < 0 sends none.
func TestNoBeatsWhenOff(t *testing.T) {
	srv, q := newQueue(t, Policy{})
	watcher := openQueue(t, Config{Server: srv})
	var heard beatLog
	wctx, wstop := context.WithCancel(context.Background())
	defer wstop()
	subscribed := make(chan struct{})
	go watcher.watchWorkers(wctx, heard.add, func() { close(subscribed) })
	<-subscribed
	watcher.nc.Flush()
	ctx := context.Background()
	if _, err := q.PublishTask(ctx, task("beats", "s1", 0, pb.Priority_PRIORITY_LIVE)); err != nil {
		t.Fatal(err)
	}
	done := make(chan struct{})
	stop := runWork(t, q, func(ctx context.Context, tk *pb.TileTask) error { close(done); return nil },
		WorkOptions{WorkerID: "w-quiet", Beat: -1})
	<-done
	stop()
	q.nc.Flush()
	watcher.nc.Flush()
	if l := heard.last(); l != nil {
		t.Errorf("beat heard from a worker with beats off: %v", l)
	}
}
