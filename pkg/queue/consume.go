package queue

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"google.golang.org/protobuf/proto"

	pb "sluice/proto/sluicepb"
)

// consume runs a durable pull consumer on stream, decoding each message into
// a fresh T and calling handler one message at a time, until ctx is
// cancelled, with heartbeats while it runs. A nil error acks; an error naks with a growing delay (results
// must never be lost, so there is no delivery limit); a Permanent error
// naks the message and stops the consumer with that error; an undecodable
// message is dead-lettered and terminated.
func consume[T proto.Message](ctx context.Context, q *Queue, stream, durable, filter string, fresh func() T, handler func(context.Context, T) error) error {
	cons, err := q.js.CreateOrUpdateConsumer(ctx, stream, jetstream.ConsumerConfig{
		Durable:       durable,
		FilterSubject: filter,
		AckPolicy:     jetstream.AckExplicitPolicy,
		AckWait:       q.policy.AckWait,
		MaxDeliver:    -1,
	})
	if err != nil {
		return fmt.Errorf("queue: consumer %s: %w", durable, err)
	}
	pause := pullBackoff{first: time.Second}
	for ctx.Err() == nil {
		// One message per pull: a slow handler (a step completing) must not
		// hold other messages past their ack wait.
		b, err := cons.Fetch(1, jetstream.FetchMaxWait(time.Second))
		if err != nil {
			if q.nc.IsClosed() {
				return fmt.Errorf("queue: consumer %s: %w", durable, q.LostErr())
			}
			if consumerGone(err, cons) {
				return fmt.Errorf("queue: consumer %s is gone from the server: %w", durable, err)
			}
			d := pause.next()
			q.log.Warn("queue: pull failed; retrying", "consumer", durable, "err", err, "in", d)
			select {
			case <-ctx.Done():
			case <-time.After(d):
			}
			continue
		}
		pause.reset()
		for m := range b.Messages() {
			meta, _ := m.Metadata()
			var seq, n uint64
			if meta != nil {
				seq, n = meta.Sequence.Stream, meta.NumDelivered
			}
			v := fresh()
			if err := proto.Unmarshal(m.Data(), v); err != nil {
				q.deadLetter(ctx, &pb.DeadLetter{Subject: m.Subject(), StreamSeq: seq, Deliveries: n, Reason: "poison: " + err.Error(), Raw: m.Data()})
				_ = m.TermWithReason("poison")
				continue
			}
			stop := q.keepAlive(m, q.policy.AckWait/3, fmt.Sprintf("%s#%d", stream, seq))
			err := handler(ctx, v)
			stop()
			if err != nil && IsPermanent(err) {
				// No retry can help (the handler's store refuses it, say):
				// hand the message back and stop, so the process exits
				// with this one line.
				_ = m.Nak()
				return fmt.Errorf("queue: consumer %s stopped: %w", durable, err)
			}
			if err != nil {
				q.log.Warn("queue: handler failed, will retry", "consumer", durable, "seq", seq, "attempt", n, "err", err)
				_ = m.NakWithDelay(min(time.Duration(n)*time.Second, time.Minute))
				continue
			}
			actx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
			if err := m.DoubleAck(actx); err != nil {
				q.log.Warn("queue: ack not confirmed", "consumer", durable, "seq", seq, "err", err)
			}
			cancel()
		}
		if err := b.Error(); err != nil && consumerGone(err, cons) {
			// Deleted on the server: pulls would come back empty for
			// ever. Stop, so the process exits and its restart creates
			// the consumer again.
			return fmt.Errorf("queue: consumer %s is gone from the server: %w", durable, err)
		}
	}
	return nil
}

// isConsumerGone reports whether a pull failed because its durable consumer
// no longer exists.
func isConsumerGone(err error) bool {
	return errors.Is(err, jetstream.ErrConsumerDeleted) || errors.Is(err, jetstream.ErrConsumerNotFound)
}

// consumerGone is isConsumerGone for a pull on one of cons: a pull on a
// consumer deleted before the pull was made comes back as "no responders",
// which a JetStream that is restarting answers too, so then the server is
// asked whether the consumer is still there.
func consumerGone(err error, cons ...jetstream.Consumer) bool {
	if isConsumerGone(err) {
		return true
	}
	if !errors.Is(err, nats.ErrNoResponders) && !errors.Is(err, jetstream.ErrNoStreamResponse) {
		return false
	}
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	for _, c := range cons {
		if _, ierr := c.Info(ctx); errors.Is(ierr, jetstream.ErrConsumerNotFound) {
			return true
		}
	}
	return false
}

// Results runs handler on every tile result, in arrival order, until ctx is
// cancelled. The consumer is durable: results published while no aggregator
// runs wait for it. handler must be idempotent: a result can arrive twice
// (redelivery after a crash before the ack).
func (q *Queue) Results(ctx context.Context, handler func(context.Context, *pb.TileDone) error) error {
	return consume(ctx, q, StreamResults, ConsumerResults, subjectResult+">", func() *pb.TileDone { return new(pb.TileDone) }, handler)
}

// StepsReady runs handler on every step announcement, as Results does.
func (q *Queue) StepsReady(ctx context.Context, handler func(context.Context, *pb.StepReady) error) error {
	return consume(ctx, q, StreamSteps, ConsumerSteps, subjectReady+">", func() *pb.StepReady { return new(pb.StepReady) }, handler)
}

// Events calls handler on the events of one campaign ("" for all), starting
// with those already stored when replay is set, until ctx is cancelled.
// Nothing is acknowledged: every caller sees every event.
func (q *Queue) Events(ctx context.Context, campaign string, replay bool, handler func(*pb.StepEvent)) error {
	filter := subjectEvent + ">"
	if campaign != "" {
		filter = subjectEvent + Token(campaign)
	}
	cfg := jetstream.OrderedConsumerConfig{FilterSubjects: []string{filter}, DeliverPolicy: jetstream.DeliverNewPolicy}
	if replay {
		cfg.DeliverPolicy = jetstream.DeliverAllPolicy
	}
	cons, err := q.js.OrderedConsumer(ctx, StreamEvents, cfg)
	if err != nil {
		return fmt.Errorf("queue: events consumer: %w", err)
	}
	cc, err := cons.Consume(func(m jetstream.Msg) {
		e := new(pb.StepEvent)
		if proto.Unmarshal(m.Data(), e) == nil {
			handler(e)
		}
	})
	if err != nil {
		return fmt.Errorf("queue: events consumer: %w", err)
	}
	<-ctx.Done()
	cc.Drain()
	<-cc.Closed()
	return nil
}

// FollowDeadLetters runs handler on every dead-letter record, oldest first,
// until ctx is cancelled, as Results does: a durable consumer remembers
// the last record acknowledged, so a restarted caller resumes after it and
// a record whose handler failed or never returned comes again. handler
// must be idempotent and should make what it learns durable before
// returning nil: a record acknowledged is not delivered again.
func (q *Queue) FollowDeadLetters(ctx context.Context, handler func(context.Context, *pb.DeadLetter) error) error {
	return consume(ctx, q, StreamDead, ConsumerDead, subjectDead+">", func() *pb.DeadLetter { return new(pb.DeadLetter) }, handler)
}

// DeadLetters returns the dead-letter records of one campaign ("" for all)
// stored so far, oldest first.
func (q *Queue) DeadLetters(ctx context.Context, campaign string) ([]*pb.DeadLetter, error) {
	filter := subjectDead + ">"
	if campaign != "" {
		filter = subjectDead + Token(campaign)
	}
	return readAll(ctx, q, StreamDead, filter, func() *pb.DeadLetter { return new(pb.DeadLetter) })
}

// readAll reads the messages of a stream that match filter, as stored now.
func readAll[T proto.Message](ctx context.Context, q *Queue, stream, filter string, fresh func() T) ([]T, error) {
	// The ordered consumer is ephemeral but lives on the server until its
	// inactivity threshold: delete it when done, or a caller that polls
	// (status, the web API, a test waiting for a dead letter) piles up
	// consumers until the server refuses new ones.
	cons, err := q.js.OrderedConsumer(ctx, stream, jetstream.OrderedConsumerConfig{
		FilterSubjects: []string{filter}, InactiveThreshold: 30 * time.Second})
	if err != nil {
		return nil, fmt.Errorf("queue: read %s: %w", stream, err)
	}
	defer func() {
		if ci := cons.CachedInfo(); ci != nil {
			dctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 5*time.Second)
			defer cancel()
			_ = q.js.DeleteConsumer(dctx, stream, ci.Name) // best effort: the threshold removes it otherwise
		}
	}()
	info, err := cons.Info(ctx)
	if err != nil {
		return nil, fmt.Errorf("queue: read %s: %w", stream, err)
	}
	pending := info.NumPending
	var out []T
	for uint64(len(out)) < pending {
		b, err := cons.Fetch(int(min(pending-uint64(len(out)), 256)), jetstream.FetchMaxWait(5*time.Second))
		if err != nil {
			return nil, fmt.Errorf("queue: read %s: %w", stream, err)
		}
		n := 0
		for m := range b.Messages() {
			n++
			v := fresh()
			if err := proto.Unmarshal(m.Data(), v); err != nil {
				return nil, fmt.Errorf("queue: read %s seq: undecodable message on %s: %w", stream, m.Subject(), err)
			}
			out = append(out, v)
		}
		if err := b.Error(); err != nil && n == 0 {
			return nil, fmt.Errorf("queue: read %s: %w", stream, err)
		}
		if n == 0 {
			break
		}
	}
	return out, nil
}

// Lag is the work in the task queue.
type Lag struct {
	// Tasks stored and not yet acknowledged (waiting or in progress), per
	// priority, counted from the stream itself.
	Live, Batch uint64
	// Tasks delivered and not yet acknowledged, from the consumers.
	LiveInFlight, BatchInFlight uint64
}

// Lag reports the backlog of the task queue (for metrics and autoscaling).
func (q *Queue) Lag(ctx context.Context) (Lag, error) {
	var l Lag
	si, err := q.tasks.Info(ctx, jetstream.WithSubjectFilter("sluice.task.>"))
	if err != nil {
		return Lag{}, fmt.Errorf("queue: stream %s: %w", StreamTasks, err)
	}
	for subj, n := range si.State.Subjects {
		if strings.HasPrefix(subj, subjectLive) {
			l.Live += n
		} else {
			l.Batch += n
		}
	}
	li, err := q.live.Info(ctx)
	if err != nil {
		return Lag{}, fmt.Errorf("queue: consumer %s: %w", ConsumerLive, err)
	}
	bi, err := q.batch.Info(ctx)
	if err != nil {
		return Lag{}, fmt.Errorf("queue: consumer %s: %w", ConsumerBatch, err)
	}
	l.LiveInFlight, l.BatchInFlight = uint64(li.NumAckPending), uint64(bi.NumAckPending)
	return l, nil
}

// ErrNoProgress is returned for a progress key that holds nothing.
var ErrNoProgress = errors.New("queue: no progress recorded")

// ErrConflict is returned by UpdateProgress when the key changed since the
// revision the caller read.
var ErrConflict = errors.New("queue: progress changed concurrently")

// ProgressKey returns the key of a step's progress in the KV bucket.
func ProgressKey(campaign, step string) string {
	return "step." + Token(campaign) + "." + Token(step)
}

// GetProgress returns the value and revision stored under key.
func (q *Queue) GetProgress(ctx context.Context, key string) ([]byte, uint64, error) {
	e, err := q.kv.Get(ctx, key)
	if errors.Is(err, jetstream.ErrKeyNotFound) {
		return nil, 0, fmt.Errorf("queue: progress %s: %w", key, ErrNoProgress)
	}
	if err != nil {
		return nil, 0, fmt.Errorf("queue: progress %s: %w", key, err)
	}
	return e.Value(), e.Revision(), nil
}

// PutProgress stores value under key unconditionally.
func (q *Queue) PutProgress(ctx context.Context, key string, value []byte) (uint64, error) {
	rev, err := q.kv.Put(ctx, key, value)
	if err != nil {
		return 0, fmt.Errorf("queue: progress %s: %w", key, err)
	}
	return rev, nil
}

// UpdateProgress stores value under key only if the key is still at
// revision rev (0: only if the key does not exist yet), and returns the new
// revision; otherwise ErrConflict, and the caller reads and retries.
func (q *Queue) UpdateProgress(ctx context.Context, key string, value []byte, rev uint64) (uint64, error) {
	var n uint64
	var err error
	if rev == 0 {
		n, err = q.kv.Create(ctx, key, value)
	} else {
		n, err = q.kv.Update(ctx, key, value, rev)
	}
	if errors.Is(err, jetstream.ErrKeyExists) || isWrongSequence(err) {
		return 0, fmt.Errorf("queue: progress %s at revision %d: %w", key, rev, ErrConflict)
	}
	if err != nil {
		return 0, fmt.Errorf("queue: progress %s: %w", key, err)
	}
	return n, nil
}

func isWrongSequence(err error) bool {
	var apiErr *jetstream.APIError
	return errors.As(err, &apiErr) && apiErr.ErrorCode == jetstream.JSErrCodeStreamWrongLastSequence
}

// DeleteProgress removes key.
func (q *Queue) DeleteProgress(ctx context.Context, key string) error {
	if err := q.kv.Delete(ctx, key); err != nil {
		return fmt.Errorf("queue: progress %s: %w", key, err)
	}
	return nil
}

// WatchJetStream asks for the task stream's state every interval until ctx
// ends, and logs when JetStream stops answering (a NATS cluster that has
// lost its majority, a lone server restarting) — once, then every 30 s
// while it lasts — and when it answers again. Nothing else changes: pulls
// and publishes wait and retry on their own; this says why work stopped.
func (q *Queue) WatchJetStream(ctx context.Context, interval time.Duration) {
	const remind = 30 * time.Second
	t := time.NewTicker(interval)
	defer t.Stop()
	var down, said time.Time
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
		c, cancel := context.WithTimeout(ctx, interval)
		_, err := q.js.Stream(c, StreamTasks)
		cancel()
		if ctx.Err() != nil {
			return
		}
		now := time.Now()
		switch {
		case err != nil && down.IsZero():
			down, said = now, now
			q.log.Warn("queue: JetStream does not answer (NATS cluster without a majority, or a server restarting); waiting for it, work resumes by itself", "err", err)
		case err != nil && now.Sub(said) >= remind:
			said = now
			q.log.Warn("queue: still waiting for JetStream", "for", now.Sub(down).Round(time.Second).String(), "err", err)
		case err == nil && !down.IsZero():
			q.log.Info("queue: JetStream answers again", "after", now.Sub(down).Round(time.Second).String())
			down = time.Time{}
		}
	}
}
