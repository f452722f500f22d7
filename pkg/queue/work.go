package queue

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"runtime/debug"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "sluice/proto/sluicepb"
)

// Handler processes one tile task. task.Attempt holds the delivery number
// (1 for the first). Returning nil acknowledges the task; returning an
// error retries it later, or dead-letters it when it was the last delivery
// or the error is Permanent. ctx is cancelled when the worker has been
// draining for longer than WorkOptions.DrainTimeout.
type Handler func(ctx context.Context, task *pb.TileTask) error

// permanentError marks an error that retrying cannot fix.
type permanentError struct{ err error }

func (e permanentError) Error() string { return e.err.Error() }
func (e permanentError) Unwrap() error { return e.err }

// Permanent wraps err so that the task is dead-lettered without retries.
func Permanent(err error) error {
	if err == nil {
		return nil
	}
	return permanentError{err}
}

// IsPermanent reports whether err was wrapped by Permanent.
func IsPermanent(err error) bool {
	var p permanentError
	return errors.As(err, &p)
}

// WorkOptions tunes one Work call.
type WorkOptions struct {
	// Concurrency is the number of tiles handled at once (default 1).
	Concurrency int
	// WorkerID names the worker in results and dead letters (default host:pid).
	WorkerID string
	// Heartbeat is the InProgress interval while a handler runs (default a
	// third of the policy's shortest ack wait; negative: none, for tests
	// that simulate a stuck worker).
	Heartbeat time.Duration
	// IdleWait is how long a pull waits on the live subject when both
	// subjects are empty (default 1 s). It bounds how late a batch task is
	// noticed on an idle worker and how long draining takes to start.
	IdleWait time.Duration
	// DrainTimeout is how long in-flight handlers may run after ctx is
	// cancelled before their context is cancelled too (default 2 min).
	DrainTimeout time.Duration
	// Beat is the interval of the worker's beats on SubjectWorkerBeat
	// (default DefaultBeat; negative: none). Beats go on while in-flight
	// handlers drain; the last one, when Work returns, says the worker
	// stops.
	Beat time.Duration
}

func (o WorkOptions) withDefaults(p Policy) WorkOptions {
	if o.Concurrency <= 0 {
		o.Concurrency = 1
	}
	if o.WorkerID == "" {
		host, _ := os.Hostname()
		o.WorkerID = fmt.Sprintf("%s:%d", host, os.Getpid())
	}
	if o.Heartbeat == 0 {
		o.Heartbeat = p.shortestWait() / 3
	}
	if o.IdleWait <= 0 {
		o.IdleWait = time.Second
	}
	if o.DrainTimeout <= 0 {
		o.DrainTimeout = 2 * time.Minute
	}
	if o.Beat == 0 {
		o.Beat = DefaultBeat
	}
	return o
}

// Work pulls tile tasks and runs handler on each, live before batch, until
// ctx is cancelled; then it stops pulling, lets in-flight handlers finish
// (see DrainTimeout), and returns nil. It returns an error when the
// connection closes under it.
func (q *Queue) Work(ctx context.Context, handler Handler, opts WorkOptions) error {
	opts = opts.withDefaults(q.policy)
	unsub, err := q.RecordMaxDeliveries(opts.WorkerID)
	if err != nil {
		return err
	}
	defer unsub()

	// Handlers run under hctx, which outlives ctx by DrainTimeout.
	hctx, hcancel := context.WithCancel(context.WithoutCancel(ctx))
	defer hcancel()
	stop := context.AfterFunc(ctx, func() {
		t := time.AfterFunc(opts.DrainTimeout, hcancel)
		context.AfterFunc(hctx, func() { t.Stop() })
	})
	defer stop()

	// Beats go on while in-flight handlers drain (the worker is still
	// there); the last one, sent after the regular ones have stopped, says
	// it leaves.
	var beats *beater
	if opts.Beat > 0 {
		beats = newBeater(q, opts)
		bctx, bstop := context.WithCancel(context.WithoutCancel(ctx))
		beating := make(chan struct{})
		go func() { defer close(beating); beats.run(bctx) }()
		defer func() { bstop(); <-beating; beats.goodbye() }()
	}

	var wg sync.WaitGroup
	errc := make(chan error, opts.Concurrency)
	for i := 0; i < opts.Concurrency; i++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if err := q.workLoop(ctx, hctx, handler, opts, beats); err != nil {
				errc <- err
			}
		}()
	}
	wg.Wait()
	close(errc)
	return <-errc
}

func (q *Queue) workLoop(ctx, hctx context.Context, handler Handler, opts WorkOptions, beats *beater) error {
	pause := pullBackoff{first: opts.IdleWait}
	for ctx.Err() == nil {
		m, err := q.next(opts.IdleWait)
		if err != nil {
			if q.nc.IsClosed() {
				return q.LostErr()
			}
			if consumerGone(err, q.live, q.batch) {
				// Deleted on the server: stop, so the process exits and
				// its restart finds or creates the consumer again.
				return fmt.Errorf("queue: task consumer is gone from the server: %w", err)
			}
			d := pause.next()
			q.log.Warn("queue: pull failed; retrying", "err", err, "in", d, "connected", q.nc.IsConnected())
			select {
			case <-ctx.Done():
			case <-time.After(d):
			}
			continue
		}
		pause.reset()
		if m != nil {
			q.handle(hctx, m, handler, opts, beats)
		}
	}
	return nil
}

// next returns the next task, live first: an immediate look at live, then at
// batch, then a wait of up to idle on live. nil, nil when nothing came.
func (q *Queue) next(idle time.Duration) (jetstream.Msg, error) {
	if m, err := fetchOne(q.live, 0); m != nil || err != nil {
		return m, err
	}
	if m, err := fetchOne(q.batch, 0); m != nil || err != nil {
		return m, err
	}
	return fetchOne(q.live, idle)
}

// fetchOne pulls at most one message; wait 0 means do not wait.
func fetchOne(c jetstream.Consumer, wait time.Duration) (jetstream.Msg, error) {
	var b jetstream.MessageBatch
	var err error
	if wait <= 0 {
		b, err = c.FetchNoWait(1)
	} else {
		b, err = c.Fetch(1, jetstream.FetchMaxWait(wait))
	}
	if err != nil {
		return nil, err
	}
	var got jetstream.Msg
	for m := range b.Messages() {
		got = m
	}
	if got != nil {
		return got, nil
	}
	if err := b.Error(); err != nil && !errors.Is(err, nats.ErrTimeout) {
		return nil, err
	}
	return nil, nil
}

// handle runs handler on one message and settles it; beats (may be nil)
// hears of the task taken and its outcome.
func (q *Queue) handle(ctx context.Context, m jetstream.Msg, handler Handler, opts WorkOptions, beats *beater) {
	meta, err := m.Metadata()
	if err != nil {
		q.log.Warn("queue: message without metadata", "subject", m.Subject(), "err", err)
		_ = m.Term()
		return
	}
	task := new(pb.TileTask)
	if err := proto.Unmarshal(m.Data(), task); err != nil {
		q.deadLetter(ctx, &pb.DeadLetter{Subject: m.Subject(), StreamSeq: meta.Sequence.Stream, Deliveries: meta.NumDelivered,
			Reason: "poison: " + err.Error(), WorkerId: opts.WorkerID, Raw: m.Data()})
		_ = m.TermWithReason("poison")
		return
	}
	if err := CheckTask(task); err != nil {
		q.deadLetter(ctx, &pb.DeadLetter{Task: task, Subject: m.Subject(), StreamSeq: meta.Sequence.Stream, Deliveries: meta.NumDelivered,
			Reason: "poison: " + err.Error(), WorkerId: opts.WorkerID})
		_ = m.TermWithReason("poison")
		return
	}
	task.Attempt = uint32(meta.NumDelivered)

	id := TaskID(task)
	beats.take(id)
	err = q.runWithHeartbeat(ctx, m, task, handler, opts.Heartbeat)
	handedBack := err != nil && ctx.Err() != nil && !IsPermanent(err)
	beats.settle(id, err == nil, err != nil && !handedBack)
	switch {
	case err == nil:
		// Wait for the server to confirm the ack: after this the task is
		// gone from the work queue.
		actx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
		defer cancel()
		if aerr := m.DoubleAck(actx); aerr != nil {
			q.log.Warn("queue: ack not confirmed; the task may be redelivered", "task", TaskID(task), "err", aerr)
		}
	case ctx.Err() != nil && !IsPermanent(err):
		_ = m.Nak() // drained: let another worker take it at once
	case IsPermanent(err) || meta.NumDelivered >= uint64(q.policy.MaxDeliver):
		reason := err.Error()
		if !IsPermanent(err) {
			reason = fmt.Sprintf("failed on all %d deliveries, last: %v", meta.NumDelivered, err)
		}
		q.deadLetter(ctx, &pb.DeadLetter{Task: task, MsgId: TaskID(task), Subject: m.Subject(), StreamSeq: meta.Sequence.Stream,
			Deliveries: meta.NumDelivered, Reason: reason, WorkerId: opts.WorkerID})
		_ = m.TermWithReason("dead letter")
	default:
		q.log.Warn("queue: tile failed, will retry", "task", TaskID(task), "attempt", meta.NumDelivered, "err", err)
		_ = m.NakWithDelay(q.policy.retryDelay(meta.NumDelivered))
	}
}

// runWithHeartbeat calls handler, sending InProgress every hb meanwhile.
// A panicking handler counts as a failed attempt.
func (q *Queue) runWithHeartbeat(ctx context.Context, m jetstream.Msg, task *pb.TileTask, handler Handler, hb time.Duration) (err error) {
	stop := q.keepAlive(m, hb, TaskID(task))
	defer func() {
		stop()
		if r := recover(); r != nil {
			err = fmt.Errorf("queue: handler panicked on %s: %v\n%s", TaskID(task), r, debug.Stack())
		}
	}()
	return handler(ctx, task)
}

// keepAlive sends InProgress for m every hb (none for hb <= 0) until the
// returned stop is called.
func (q *Queue) keepAlive(m jetstream.Msg, hb time.Duration, what string) (stop func()) {
	if hb <= 0 {
		return func() {}
	}
	done := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		t := time.NewTicker(hb)
		defer t.Stop()
		for {
			select {
			case <-done:
				return
			case <-t.C:
				if err := m.InProgress(); err != nil {
					q.log.Warn("queue: heartbeat failed", "message", what, "err", err)
				}
			}
		}
	}()
	return func() {
		close(done)
		wg.Wait()
	}
}

// deadLetter publishes a dead-letter record; the id makes a repeated record
// of the same stream message a duplicate.
func (q *Queue) deadLetter(ctx context.Context, d *pb.DeadLetter) {
	d.At = timestamppb.Now()
	campaign := "unknown"
	if d.Task != nil && d.Task.Campaign != "" {
		campaign = d.Task.Campaign
	}
	// The id names the stream the message came from: sequence numbers are
	// per stream, so a poisoned result and a task of the same sequence
	// must not be taken for one record by the duplicate window.
	id := fmt.Sprintf("dead/%s/%d", streamOf(d.Subject), d.StreamSeq)
	pctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
	defer cancel()
	if _, err := q.publish(pctx, subjectDead+Token(campaign), id, d); err != nil {
		q.log.Error("queue: cannot record dead letter", "seq", d.StreamSeq, "reason", d.Reason, "err", err)
		return
	}
	q.log.Warn("queue: dead letter", "msg_id", d.MsgId, "seq", d.StreamSeq, "deliveries", d.Deliveries, "reason", d.Reason)
}

// streamOf names the stream that holds messages of subject (the task stream
// when the subject is not known: max-deliveries advisories concern tasks).
func streamOf(subject string) string {
	switch {
	case strings.HasPrefix(subject, subjectResult):
		return StreamResults
	case strings.HasPrefix(subject, subjectReady):
		return StreamSteps
	}
	return StreamTasks
}

// RecordMaxDeliveries records, as dead letters, the tasks whose last
// delivery was never acknowledged, from the server's max-deliveries
// advisories, until the returned function is called. Every Work call does
// it; a long-lived process that works no tasks (the aggregator) should too:
// the advisory is not stored, so when a poison tile has crashed every worker
// and none is running at that moment, only such a process hears it. The
// subscribers form a queue group, so each advisory is recorded once.
func (q *Queue) RecordMaxDeliveries(who string) (stop func(), err error) {
	sub, err := q.nc.QueueSubscribe(advisoryMaxDeliveries, deadLetterGroup, func(m *nats.Msg) {
		q.onMaxDeliveries(m.Data, who)
	})
	if err != nil {
		return nil, fmt.Errorf("queue: subscribe to max-deliveries advisories: %w", err)
	}
	return func() { _ = sub.Unsubscribe() }, nil
}

// maxDeliveriesAdvisory is the part of the server's
// io.nats.jetstream.advisory.v1.max_deliver advisory that sluice reads.
type maxDeliveriesAdvisory struct {
	Stream     string `json:"stream"`
	Consumer   string `json:"consumer"`
	StreamSeq  uint64 `json:"stream_seq"`
	Deliveries uint64 `json:"deliveries"`
}

// onMaxDeliveries records a task whose last delivery timed out, then
// removes it from the work queue.
func (q *Queue) onMaxDeliveries(data []byte, worker string) {
	var a maxDeliveriesAdvisory
	if err := json.Unmarshal(data, &a); err != nil || a.Stream != StreamTasks {
		return
	}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	d := &pb.DeadLetter{StreamSeq: a.StreamSeq, Deliveries: a.Deliveries, WorkerId: worker,
		Reason: fmt.Sprintf("no acknowledgement on any of %d deliveries (consumer %s)", a.Deliveries, a.Consumer)}
	raw, err := q.tasks.GetMsg(ctx, a.StreamSeq)
	if err == nil {
		d.Subject = raw.Subject
		task := new(pb.TileTask)
		if proto.Unmarshal(raw.Data, task) == nil {
			d.Task, d.MsgId = task, TaskID(task)
		} else {
			d.Raw = raw.Data
		}
	}
	q.deadLetter(ctx, d)
	if err == nil {
		if derr := q.tasks.DeleteMsg(ctx, a.StreamSeq); derr != nil && !errors.Is(derr, jetstream.ErrMsgNotFound) {
			q.log.Warn("queue: cannot remove dead task from the work queue", "seq", a.StreamSeq, "err", derr)
		}
	}
}

// pullBackoff spaces pulls that keep failing (NATS restarting, JetStream
// not ready): first, then doubling up to maxPullPause, reset by a pull that
// works. The client reconnects on its own; this only stops a worker from
// hammering a server that is coming up.
type pullBackoff struct {
	first, cur time.Duration
}

// maxPullPause bounds the pause, and so how long a worker may stay idle
// after the server is back.
const maxPullPause = 5 * time.Second

func (b *pullBackoff) next() time.Duration {
	if b.cur == 0 {
		b.cur = max(b.first, 100*time.Millisecond)
	} else {
		b.cur = min(2*b.cur, maxPullPause)
	}
	return b.cur
}

func (b *pullBackoff) reset() { b.cur = 0 }
