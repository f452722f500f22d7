// Package queue carries sluice's tile tasks, tile results, step
// announcements, events and dead letters over NATS JetStream, and keeps the
// aggregator's progress in a JetStream key-value bucket.
//
// Streams and subjects (<c> is the campaign name with "." written as "=",
// which keeps every valid name one subject token):
//
//	SLUICE_TASKS    sluice.task.live.<c>, sluice.task.batch.<c>   work queue
//	SLUICE_RESULTS  sluice.result.<c>                             work queue
//	SLUICE_STEPS    sluice.ready.<c>                              work queue
//	SLUICE_EVENTS   sluice.event.<c>                              kept 7 days
//	SLUICE_DEAD     sluice.dead.<c>                               kept 30 days
//	KV sluice_progress                                            aggregator state
//	(no stream)     sluice.worker.beat                            worker beats, core NATS
//
// Every worker (Work) publishes a WorkerBeat every WorkOptions.Beat (5 s by
// default): its id, host, pid, start, tiles done and failed, tasks in hand.
// The aggregator (WatchWorkers) counts a worker present while its last beat
// is younger than BeatsMissed of its intervals; a worker that stops in
// order says so in a last beat and leaves the count at once.
//
// Every task is published with the message id campaign/step/tile/param-hash
// (layout.Step.TileID), so a task published twice within the stream's
// duplicate window is stored once. Results carry the same id; step
// announcements campaign/step/param-hash; events the id their publisher
// gives (the aggregator's: campaign/completed/step/param-hash and
// campaign/kind/step), so an event published again is stored once too.
//
// Workers pull with two durable consumers, one on live and one on batch
// subjects, one message per pull, explicit acknowledgement. While a handler
// runs, the worker sends InProgress every Heartbeat, which restarts the ack
// timer, so a slow tile is not redelivered while its worker lives; a worker
// that dies stops the heartbeats and its tile is redelivered after AckWait
// (or the consumer's BackOff step). A handler error naks the message with the
// policy's retry delay; after MaxDeliver deliveries, or at once for a
// Permanent error or an undecodable (poison) message, a DeadLetter record is
// published to SLUICE_DEAD and the message is terminated. A tile whose last
// delivery is never acknowledged (its worker died) is recorded from the
// server's max-deliveries advisory by whichever worker receives it.
//
// Live before batch: before every pull a worker asks the live consumer
// first and the batch consumer only when the live one has nothing at that
// moment; when both are empty it waits on live only (IdleWait) and looks
// again. So a worker never starts a batch tile while a live tile is
// available to it, and a live tile published while all workers are busy
// waits for at most one in-flight tile per worker. Tiles already in progress
// are not pre-empted. "Available" means known to the live consumer: the
// server tells consumers about a stored message asynchronously, so a live
// task acknowledged to its publisher less than a few milliseconds before a
// worker looks can lose to a batch task already visible.
package queue

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"slices"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"sluice/pkg/layout"
	pb "sluice/proto/sluicepb"
)

// MaxMessage is the largest message sluice publishes (tasks carry keys,
// never voxels).
const MaxMessage = 1 << 20

// Stream, subject, consumer and bucket names.
const (
	StreamTasks   = "SLUICE_TASKS"
	StreamResults = "SLUICE_RESULTS"
	StreamSteps   = "SLUICE_STEPS"
	StreamEvents  = "SLUICE_EVENTS"
	StreamDead    = "SLUICE_DEAD"

	ConsumerLive    = "workers-live"
	ConsumerBatch   = "workers-batch"
	ConsumerResults = "aggregator-results"
	ConsumerSteps   = "aggregator-steps"
	ConsumerDead    = "aggregator-dead-letters"

	ProgressBucket = "sluice_progress"

	subjectLive   = "sluice.task.live."
	subjectBatch  = "sluice.task.batch."
	subjectResult = "sluice.result."
	subjectReady  = "sluice.ready."
	subjectEvent  = "sluice.event."
	subjectDead   = "sluice.dead."

	advisoryMaxDeliveries = "$JS.EVENT.ADVISORY.CONSUMER.MAX_DELIVERIES." + StreamTasks + ".*"
	deadLetterGroup       = "sluice-dead-letters"
)

// Token returns the subject token of a campaign name: the name with every
// "." written as "=" (not a name character, so the mapping is one to one).
func Token(campaign string) string { return strings.ReplaceAll(campaign, ".", "=") }

// TaskSubject returns the subject a task of the campaign is published on.
func TaskSubject(p pb.Priority, campaign string) string {
	if p == pb.Priority_PRIORITY_BATCH {
		return subjectBatch + Token(campaign)
	}
	return subjectLive + Token(campaign)
}

// Policy is the delivery policy of the task consumers. It belongs to the
// deployment, not to each process: it is kept in the durable consumers
// themselves, written when they are created and afterwards only by a
// process with the PolicyOwner role (see PolicyRole). RetryDelay is not
// stored on the server; each process uses its own.
type Policy struct {
	// AckWait is how long the server waits for an ack or a heartbeat
	// before redelivering (default 30 s). With BackOff set, the server
	// uses BackOff[0] instead.
	AckWait time.Duration
	// MaxDeliver bounds deliveries of one task (default 5).
	MaxDeliver int
	// BackOff, when set, is the server's redelivery delay after the n-th
	// unacknowledged delivery (n = 1, 2, …; the last value repeats) and the
	// delay before retrying after a handler error. At most MaxDeliver long.
	// When empty, unacknowledged tasks come back after AckWait and failed
	// ones after RetryDelay.
	BackOff []time.Duration
	// RetryDelay is the delay before retrying after a handler error when
	// BackOff is empty (default 1 s).
	RetryDelay time.Duration
}

// DefaultPolicy is the policy used for zero fields.
var DefaultPolicy = Policy{AckWait: 30 * time.Second, MaxDeliver: 5, RetryDelay: time.Second}

func (p Policy) withDefaults() Policy {
	if p.AckWait <= 0 {
		p.AckWait = DefaultPolicy.AckWait
	}
	if p.MaxDeliver <= 0 {
		p.MaxDeliver = DefaultPolicy.MaxDeliver
	}
	if p.RetryDelay <= 0 {
		p.RetryDelay = DefaultPolicy.RetryDelay
	}
	if len(p.BackOff) > 0 {
		p.AckWait = p.BackOff[0]
	}
	return p
}

func (p Policy) validate() error {
	if len(p.BackOff) > p.MaxDeliver {
		return fmt.Errorf("queue: policy has %d backoff steps for %d deliveries", len(p.BackOff), p.MaxDeliver)
	}
	for _, d := range p.BackOff {
		if d <= 0 {
			return fmt.Errorf("queue: policy backoff step %v is not positive", d)
		}
	}
	return nil
}

// shortestWait is the shortest time the server waits for an ack.
func (p Policy) shortestWait() time.Duration {
	w := p.AckWait
	for _, d := range p.BackOff {
		w = min(w, d)
	}
	return w
}

// retryDelay is the nak delay after the given (1-based) failed delivery.
func (p Policy) retryDelay(attempt uint64) time.Duration {
	if len(p.BackOff) == 0 {
		return p.RetryDelay
	}
	i := min(int(attempt), len(p.BackOff)-1)
	return p.BackOff[i]
}

// Config says how to reach NATS and how the streams are set up.
type Config struct {
	// Server is an embedded server to connect to in-process; URL is
	// ignored when it is set.
	Server *Server
	// URL is a NATS client URL list (nats://host:4222,nats://…).
	URL string
	// CredsFile is a NATS credentials file (JWT + nkey seed) or a file
	// holding a user nkey seed alone (servers without JWT accounts).
	CredsFile string
	// Token authenticates with a server token (see ServerConfig.Token).
	Token string
	// User and Password authenticate as a user of the server.
	User, Password string
	// TLSCA, TLSCert, TLSKey: CA bundle to verify the server, and a client
	// certificate and key for mutual TLS.
	TLSCA, TLSCert, TLSKey string
	// Name names the connection in server monitoring.
	Name string
	// Replicas of every stream and of the KV bucket. 0 (auto): a stream
	// that exists keeps its replicas, so a process started without the
	// setting never scales a clustered stream down; a new one gets 3 when
	// the server is part of a cluster and 1 when it stands alone.
	Replicas int
	// DuplicateWindow is how long message ids are remembered (default 2 min).
	DuplicateWindow time.Duration
	// Policy is the task delivery policy.
	Policy Policy
	// Role says whether this process sets the task delivery policy or
	// follows the one in force (default: follows).
	Role PolicyRole
	// Logger receives warnings (default slog.Default()).
	Logger *slog.Logger
}

// PolicyRole says what Open does with the delivery policy of the task
// consumers when they already exist. Whoever creates them (the first
// process to open the queue) writes its Policy in any role.
type PolicyRole int

const (
	// PolicyFollower keeps the policy in force and works with it. When
	// Config.Policy differs from it, Open logs one line with both, so a
	// worker started with other flags does not change the policy for every
	// worker of the deployment. Workers and aggregators.
	PolicyFollower PolicyRole = iota
	// PolicyBystander keeps the policy in force without a word: for
	// processes that work no tasks (ingest, status), whose flags say
	// nothing about delivery.
	PolicyBystander
	// PolicyOwner writes Config.Policy into the consumers, replacing the
	// one in force (the change is logged): the process that runs the
	// deployment's NATS server, or an explicit administrative update.
	PolicyOwner
)

// String gives the policy as it is logged: "ack wait 30s, max deliver 5"
// (and the backoff steps when there are any).
func (p Policy) String() string {
	s := fmt.Sprintf("ack wait %v, max deliver %d", p.AckWait, p.MaxDeliver)
	if len(p.BackOff) > 0 {
		s += fmt.Sprintf(", backoff %v", p.BackOff)
	}
	return s
}

// sameOnServer reports whether two policies give the consumers the same
// configuration (RetryDelay is not part of it).
func (p Policy) sameOnServer(o Policy) bool {
	return p.AckWait == o.AckWait && p.MaxDeliver == o.MaxDeliver && slices.Equal(p.BackOff, o.BackOff)
}

// Queue is a connection to JetStream with sluice's streams set up.
type Queue struct {
	nc     *nats.Conn
	js     jetstream.JetStream
	kv     jetstream.KeyValue
	live   jetstream.Consumer
	batch  jetstream.Consumer
	tasks  jetstream.Stream
	policy Policy
	log    *slog.Logger
	closed chan struct{} // closed when the connection is closed for good
}

// Open connects, creates or updates the streams, consumers and KV bucket,
// and returns the Queue.
func Open(ctx context.Context, cfg Config) (*Queue, error) {
	pol := cfg.Policy.withDefaults()
	if err := pol.validate(); err != nil {
		return nil, err
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.Default()
	}
	if cfg.Replicas < 0 {
		return nil, fmt.Errorf("queue: replicas %d: give 0 (auto) or 1 to 5", cfg.Replicas)
	}
	if cfg.DuplicateWindow <= 0 {
		cfg.DuplicateWindow = 2 * time.Minute
	}
	if cfg.Name == "" {
		cfg.Name = "sluice"
	}
	opts, url, where, err := connectOptions(cfg)
	if err != nil {
		return nil, err
	}
	closed := make(chan struct{})
	opts = append(opts, nats.ClosedHandler(func(*nats.Conn) { close(closed) }))
	nc, err := nats.Connect(url, opts...)
	if err != nil {
		return nil, fmt.Errorf("queue: connect to %s: %w", where, oneLine(err, connectSecrets(cfg)...))
	}
	q := &Queue{nc: nc, policy: pol, log: cfg.Logger, closed: closed}
	if err := q.setup(ctx, cfg); err != nil {
		nc.Close()
		return nil, err
	}
	return q, nil
}

func (q *Queue) setup(ctx context.Context, cfg Config) error {
	js, err := jetstream.New(q.nc)
	if err != nil {
		return fmt.Errorf("queue: jetstream: %w", err)
	}
	q.js = js
	streams := []jetstream.StreamConfig{
		{Name: StreamTasks, Subjects: []string{"sluice.task.>"}, Retention: jetstream.WorkQueuePolicy},
		{Name: StreamResults, Subjects: []string{subjectResult + ">"}, Retention: jetstream.WorkQueuePolicy},
		{Name: StreamSteps, Subjects: []string{subjectReady + ">"}, Retention: jetstream.WorkQueuePolicy},
		{Name: StreamEvents, Subjects: []string{subjectEvent + ">"}, MaxAge: 7 * 24 * time.Hour},
		{Name: StreamDead, Subjects: []string{subjectDead + ">"}, MaxAge: 30 * 24 * time.Hour},
	}
	for _, sc := range streams {
		sc.Storage = jetstream.FileStorage
		if sc.Replicas, err = q.replicas(ctx, cfg.Replicas, sc.Name); err != nil {
			return err
		}
		sc.Duplicates = cfg.DuplicateWindow
		sc.MaxMsgSize = MaxMessage
		s, err := js.CreateOrUpdateStream(ctx, sc)
		if err != nil {
			return fmt.Errorf("queue: stream %s: %w", sc.Name, err)
		}
		if sc.Name == StreamTasks {
			q.tasks = s
		}
	}
	if err := q.setupTaskConsumers(ctx, cfg.Role); err != nil {
		return err
	}
	kvReplicas, err := q.replicas(ctx, cfg.Replicas, "KV_"+ProgressBucket)
	if err != nil {
		return err
	}
	kv, err := js.CreateOrUpdateKeyValue(ctx, jetstream.KeyValueConfig{
		Bucket:   ProgressBucket,
		History:  1,
		Storage:  jetstream.FileStorage,
		Replicas: kvReplicas,
	})
	if err != nil {
		return fmt.Errorf("queue: key-value bucket %s: %w", ProgressBucket, err)
	}
	q.kv = kv
	return nil
}

// replicas returns the replica count for stream: want when set; else the
// stream's own when it exists; else 3 on a cluster and 1 on a lone server.
func (q *Queue) replicas(ctx context.Context, want int, stream string) (int, error) {
	if want > 0 {
		return want, nil
	}
	s, err := q.js.Stream(ctx, stream)
	switch {
	case err == nil:
		return max(1, s.CachedInfo().Config.Replicas), nil
	case !errors.Is(err, jetstream.ErrStreamNotFound):
		return 0, fmt.Errorf("queue: stream %s: %w", stream, err)
	case q.nc.ConnectedClusterName() != "":
		return 3, nil
	default:
		return 1, nil
	}
}

// taskConsumers are the durable consumers the policy applies to.
var taskConsumers = [...]struct{ name, filter string }{{ConsumerLive, subjectLive + ">"}, {ConsumerBatch, subjectBatch + ">"}}

func taskConsumerConfig(name, filter string, p Policy) jetstream.ConsumerConfig {
	return jetstream.ConsumerConfig{
		Durable:       name,
		FilterSubject: filter,
		AckPolicy:     jetstream.AckExplicitPolicy,
		AckWait:       p.AckWait,
		MaxDeliver:    p.MaxDeliver,
		BackOff:       p.BackOff,
		MaxAckPending: -1,
	}
}

// policyOf is the delivery policy a consumer configuration holds, with
// this process's RetryDelay (which is not stored on the server).
func (q *Queue) policyOf(cc jetstream.ConsumerConfig) Policy {
	return Policy{AckWait: cc.AckWait, MaxDeliver: cc.MaxDeliver, BackOff: cc.BackOff, RetryDelay: q.policy.RetryDelay}
}

// setupTaskConsumers creates the live and batch consumers with q.policy,
// or finds them; then, as role says (see PolicyRole), writes q.policy into
// them or takes the policy in force from them. Creation is create-only on
// the server, so two processes starting together cannot both write their
// policy: the second finds the first's consumers.
func (q *Queue) setupTaskConsumers(ctx context.Context, role PolicyRole) error {
	want := q.policy
	for _, c := range taskConsumers {
		cons, err := q.js.Consumer(ctx, StreamTasks, c.name)
		if errors.Is(err, jetstream.ErrConsumerNotFound) {
			cons, err = q.js.CreateConsumer(ctx, StreamTasks, taskConsumerConfig(c.name, c.filter, want))
			if errors.Is(err, jetstream.ErrConsumerExists) { // created meanwhile by another process
				cons, err = q.js.Consumer(ctx, StreamTasks, c.name)
			}
		}
		if err != nil {
			return fmt.Errorf("queue: consumer %s: %w", c.name, err)
		}
		if c.name == ConsumerLive {
			q.live = cons
		} else {
			q.batch = cons
		}
	}
	if role == PolicyOwner {
		return q.SetPolicy(ctx, want)
	}
	inForce := q.policyOf(q.live.CachedInfo().Config)
	if inForce.sameOnServer(want) {
		return nil
	}
	q.policy = inForce
	if role == PolicyFollower {
		q.log.Warn(fmt.Sprintf("queue: task delivery policy in force is %v; this process asked for %v and keeps the one in force (it is set where the NATS server runs, or by `sluice queue-policy`)", inForce, want))
	}
	return nil
}

// SetPolicy writes p (zero fields: the defaults) into the task consumers,
// replacing the deployment's policy in force, logs the change, and makes p
// this queue's policy. The server applies it at once to every delivery;
// other processes keep the heartbeat interval and last-delivery count they
// derived from the old policy until they reopen the queue.
func (q *Queue) SetPolicy(ctx context.Context, p Policy) error {
	if p.RetryDelay <= 0 {
		p.RetryDelay = q.policy.RetryDelay
	}
	p = p.withDefaults()
	if err := p.validate(); err != nil {
		return err
	}
	for _, c := range taskConsumers {
		cons := q.live
		if c.name == ConsumerBatch {
			cons = q.batch
		}
		had := q.policyOf(cons.CachedInfo().Config)
		if had.sameOnServer(p) {
			continue
		}
		cons, err := q.js.UpdateConsumer(ctx, StreamTasks, taskConsumerConfig(c.name, c.filter, p))
		if err != nil {
			return fmt.Errorf("queue: consumer %s: set delivery policy %v: %w", c.name, p, err)
		}
		if c.name == ConsumerLive {
			q.live = cons
		} else {
			q.batch = cons
		}
		q.log.Info("queue: task delivery policy changed", "consumer", c.name, "was", had.String(), "now", p.String())
	}
	q.policy = p
	return nil
}

// Close drains the connection: pending publishes are flushed and
// subscriptions finish their current message, then the connection closes.
func (q *Queue) Close() error {
	if q.nc.IsClosed() {
		return nil
	}
	if err := q.nc.Drain(); err != nil {
		q.nc.Close()
		return fmt.Errorf("queue: drain: %w", err)
	}
	select {
	case <-q.closed:
	case <-time.After(30 * time.Second):
		q.nc.Close()
	}
	return nil
}

// Lost returns a channel that is closed when the connection is closed for
// good: by Close, or by the client giving up, which it does only on errors
// that reconnecting cannot cure (the server refusing the credentials twice
// in a row, a protocol error), never on a server that is merely down.
// LostErr then says why.
func (q *Queue) Lost() <-chan struct{} { return q.closed }

// LostErr describes why the connection closed: the last error the client
// saw, or a plain statement when it saw none.
func (q *Queue) LostErr() error {
	if err := q.nc.LastError(); err != nil {
		return fmt.Errorf("queue: NATS connection closed for good: %w", err)
	}
	return errors.New("queue: NATS connection closed for good")
}

// Conn returns the underlying NATS connection (for health checks).
func (q *Queue) Conn() *nats.Conn { return q.nc }

// Policy returns the delivery policy in force (defaults filled in).
func (q *Queue) Policy() Policy { return q.policy }

// CheckTask validates the identity fields of a task.
func CheckTask(t *pb.TileTask) error {
	if t == nil {
		return errors.New("queue: nil task")
	}
	if _, err := layout.NewStep(t.Campaign, t.Step); err != nil {
		return fmt.Errorf("queue: task: %w", err)
	}
	if t.Tile < 0 || (t.TileCount > 0 && t.Tile >= t.TileCount) {
		return fmt.Errorf("queue: task %s/%s: tile %d of %d", t.Campaign, t.Step, t.Tile, t.TileCount)
	}
	if !layout.ValidParamHash(t.ParamHash) {
		return fmt.Errorf("queue: task %s/%s/%d: parameter hash %q is not [a-z0-9]{1,64}", t.Campaign, t.Step, t.Tile, t.ParamHash)
	}
	return nil
}

// TaskID returns the message id of a task, campaign/step/tile/param-hash.
func TaskID(t *pb.TileTask) string {
	return fmt.Sprintf("%s/%s/%d/%s", t.Campaign, t.Step, t.Tile, t.ParamHash)
}

// PublishTask publishes one tile task on its live or batch subject and
// waits for the server to store it. duplicate reports that a task with the
// same id was already published within the duplicate window, in which case
// nothing new was stored.
func (q *Queue) PublishTask(ctx context.Context, t *pb.TileTask) (duplicate bool, err error) {
	if err := CheckTask(t); err != nil {
		return false, err
	}
	if t.PublishedAt == nil {
		t = proto.CloneOf(t)
		t.PublishedAt = timestamppb.Now()
	}
	return q.publish(ctx, TaskSubject(t.Priority, t.Campaign), TaskID(t), t)
}

func (q *Queue) publish(ctx context.Context, subject, id string, m proto.Message) (bool, error) {
	data, err := proto.Marshal(m)
	if err != nil {
		return false, fmt.Errorf("queue: encode %s: %w", id, err)
	}
	if len(data) > MaxMessage {
		return false, fmt.Errorf("queue: message %s is %d bytes, over the %d byte limit", id, len(data), MaxMessage)
	}
	var opts []jetstream.PublishOpt
	if id != "" {
		opts = append(opts, jetstream.WithMsgID(id))
	}
	ack, err := q.js.Publish(ctx, subject, data, opts...)
	if err != nil {
		return false, fmt.Errorf("queue: publish %s on %s: %w", id, subject, err)
	}
	return ack.Duplicate, nil
}

// PublishResult publishes a tile result with the tile's id, so a result
// published again within the duplicate window is stored once.
func (q *Queue) PublishResult(ctx context.Context, d *pb.TileDone) (duplicate bool, err error) {
	id := fmt.Sprintf("%s/%s/%d/%s", d.Campaign, d.Step, d.Tile, d.ParamHash)
	if err := CheckTask(&pb.TileTask{Campaign: d.Campaign, Step: d.Step, Tile: d.Tile, TileCount: d.TileCount, ParamHash: d.ParamHash}); err != nil {
		return false, fmt.Errorf("queue: result: %w", err)
	}
	return q.publish(ctx, subjectResult+Token(d.Campaign), id, d)
}

// PublishStepReady announces an ingested step; the id campaign/step/param-hash
// makes a repeated announcement a duplicate.
func (q *Queue) PublishStepReady(ctx context.Context, r *pb.StepReady) (duplicate bool, err error) {
	if _, err := layout.NewStep(r.Campaign, r.Step); err != nil {
		return false, fmt.Errorf("queue: step ready: %w", err)
	}
	return q.publish(ctx, subjectReady+Token(r.Campaign), r.Campaign+"/"+r.Step+"/"+r.ParamHash, r)
}

// PublishEvent publishes a step event with the message id id (required),
// so an event announced again within the duplicate window — its publisher
// crashed or failed after the publish and before recording it — is stored
// once. The caller records the event as announced only after this returns
// nil; an error means the event may not be stored and is to be published
// again with the same id.
func (q *Queue) PublishEvent(ctx context.Context, id string, e *pb.StepEvent) (duplicate bool, err error) {
	if err := layout.CheckName("campaign", e.Campaign); err != nil {
		return false, fmt.Errorf("queue: event: %w", err)
	}
	if id == "" {
		return false, fmt.Errorf("queue: event %s/%s/%v has no message id", e.Campaign, e.Step, e.Kind)
	}
	if e.At == nil {
		e = proto.CloneOf(e)
		e.At = timestamppb.Now()
	}
	return q.publish(ctx, subjectEvent+Token(e.Campaign), id, e)
}
