package queue

import (
	"context"
	"fmt"
	"os"
	"slices"
	"sync"
	"time"

	"github.com/nats-io/nats.go"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "sluice/proto/sluicepb"
)

// SubjectWorkerBeat is the core NATS subject of worker beats (see
// pb.WorkerBeat). It is in no stream: a beat is only worth anything while
// it is fresh, and a watcher that starts late hears every live worker
// within one interval.
const SubjectWorkerBeat = "sluice.worker.beat"

// DefaultBeat is the interval of worker beats when WorkOptions.Beat is 0.
const DefaultBeat = 5 * time.Second

// BeatsMissed is how many intervals without a beat make a worker absent.
const BeatsMissed = 3

// beater keeps what a worker's beats report and publishes them.
type beater struct {
	q        *Queue
	beat     *pb.WorkerBeat // identity and interval; counters filled in per beat
	mu       sync.Mutex
	done     uint64
	failed   uint64
	inHand   map[string]int // task id → handlers holding it
	stopOnce sync.Once
}

func newBeater(q *Queue, opts WorkOptions) *beater {
	host, _ := os.Hostname()
	return &beater{q: q, inHand: map[string]int{}, beat: &pb.WorkerBeat{
		WorkerId: opts.WorkerID, Host: host, Pid: int64(os.Getpid()), StartedAt: timestamppb.Now(),
		Interval: durationpb.New(opts.Beat), Concurrency: int32(opts.Concurrency)}}
}

// take records a task in hand. A nil beater (no beats) does nothing.
func (b *beater) take(id string) {
	if b == nil {
		return
	}
	b.mu.Lock()
	b.inHand[id]++
	b.mu.Unlock()
}

// settle records the end of a delivery taken with take: acknowledged
// (done), failed, or neither (handed back while draining).
func (b *beater) settle(id string, done, failed bool) {
	if b == nil {
		return
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.inHand[id]--; b.inHand[id] <= 0 {
		delete(b.inHand, id)
	}
	if done {
		b.done++
	}
	if failed {
		b.failed++
	}
}

// snapshot is the beat to send now.
func (b *beater) snapshot(stopping bool) *pb.WorkerBeat {
	m := proto.CloneOf(b.beat)
	b.mu.Lock()
	m.TilesDone, m.TilesFailed = b.done, b.failed
	for id := range b.inHand {
		m.Current = append(m.Current, id)
	}
	b.mu.Unlock()
	slices.Sort(m.Current)
	m.Stopping, m.SentAt = stopping, timestamppb.Now()
	return m
}

// send publishes one beat; a beat that cannot be sent (NATS down) is
// dropped: the next one says the same, newer.
func (b *beater) send(stopping bool) {
	data, err := proto.Marshal(b.snapshot(stopping))
	if err != nil {
		return
	}
	if err := b.q.nc.Publish(SubjectWorkerBeat, data); err != nil && !stopping {
		b.q.log.Debug("queue: worker beat not sent", "worker", b.beat.WorkerId, "err", err)
	}
}

// run beats every interval until ctx ends.
func (b *beater) run(ctx context.Context) {
	b.send(false)
	t := time.NewTicker(b.beat.Interval.AsDuration())
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
			b.send(false)
		}
	}
}

// goodbye sends the last beat of a worker that stops in order, and flushes
// it so that it leaves before the connection is drained.
func (b *beater) goodbye() {
	b.stopOnce.Do(func() {
		if b.q.nc.IsClosed() {
			return
		}
		b.send(true)
		_ = b.q.nc.FlushTimeout(2 * time.Second)
	})
}

// WatchWorkers calls fn with every worker beat heard (see pb.WorkerBeat)
// until ctx ends; fn runs on one goroutine, one beat at a time. Beats that
// do not decode or name no worker are ignored. It returns an error only
// when the subscription cannot be made.
func (q *Queue) WatchWorkers(ctx context.Context, fn func(*pb.WorkerBeat)) error {
	return q.watchWorkers(ctx, fn, nil)
}

// watchWorkers is WatchWorkers that calls subscribed, when not nil, once
// the subscription is registered on the connection (tests flush after it so
// that no beat is sent before the server knows the subscription).
func (q *Queue) watchWorkers(ctx context.Context, fn func(*pb.WorkerBeat), subscribed func()) error {
	sub, err := q.nc.Subscribe(SubjectWorkerBeat, func(m *nats.Msg) {
		b := new(pb.WorkerBeat)
		if proto.Unmarshal(m.Data, b) != nil || b.WorkerId == "" {
			return
		}
		fn(b)
	})
	if err != nil {
		return fmt.Errorf("queue: subscribe to worker beats: %w", err)
	}
	if subscribed != nil {
		subscribed()
	}
	<-ctx.Done()
	_ = sub.Unsubscribe()
	return nil
}
