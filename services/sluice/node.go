package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"log/slog"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"sluice/pkg/queue"
	"sluice/pkg/store"
	"sluice/pkg/telemetry"
	"sluice/pkg/web"
	"sluice/proto/sluicepb"
	"sluice/services/aggregator"
	"sluice/services/worker"
)

// nodeFlags say where the store and NATS are, how to authenticate to
// them and where to serve HTTP. Secrets never come from a flag value: they
// are read from files named by flags or from environment variables.
type nodeFlags struct {
	data, store, nats, natsCreds              string
	natsUser, natsPasswordFile, natsTokenFile string
	tlsCA, tlsCert, tlsKey, http, exposeNATS  string
	natsUsersFile                             string
	exposeTLSCert, exposeTLSKey, exposeTLSCA  string
	httpTokenFile, s3CredsFile                string
	ackWait                                   time.Duration
	maxDeliver, replicas                      int
	// policyRole: what this process does with the task consumers'
	// delivery policy (--ack-wait, --max-deliver) when they exist. Zero:
	// follow the policy in force, logging a difference. openQueue makes
	// the process that starts the embedded server its owner.
	policyRole queue.PolicyRole
}

// Environment variables holding secrets (files named by flags win).
const (
	envNATSUser     = "SLUICE_NATS_USER"
	envNATSPassword = "SLUICE_NATS_PASSWORD"
	envNATSToken    = "SLUICE_NATS_TOKEN"
	envHTTPToken    = "SLUICE_HTTP_TOKEN"
)

// nodeGroup is a group of node flags; each command registers the groups
// it reads, so that its help lists no flag it would ignore.
type nodeGroup uint

const (
	// withStore: --store, --s3-credentials-file.
	withStore nodeGroup = 1 << iota
	// withNATS: --nats and its client credentials and TLS.
	withNATS
	// withHTTP: --http, --http-token-file (metrics, health, live page).
	withHTTP
	// withPolicy: --ack-wait, --max-deliver (the task delivery policy).
	withPolicy
	// withEmbedded: --data and the embedded NATS server's --expose-nats
	// flags (run, reprocess).
	withEmbedded
)

// register defines the node flags of the groups in g; httpDefault is the
// default of --http (withHTTP only).
func (f *nodeFlags) register(fs *flag.FlagSet, g nodeGroup, httpDefault string) {
	embedded := g&withEmbedded != 0
	if embedded {
		fs.StringVar(&f.data, "data", defaultData, "data directory: local store in DATA/store, embedded NATS in DATA/nats")
		fs.StringVar(&f.exposeNATS, "expose-nats", "", "also listen for NATS clients on `host:port`, so workers on other machines can join (beyond loopback only with --nats-users-file, --nats-user or a NATS token)")
		fs.StringVar(&f.natsUsersFile, "nats-users-file", "", "users of the exposed NATS server: `FILE` with lines \"NAME PASSWORD\" (password may be a bcrypt hash) or a public user nkey")
		fs.StringVar(&f.exposeTLSCert, "expose-nats-tls-cert", "", "certificate `FILE` (PEM): the exposed NATS listener requires TLS")
		fs.StringVar(&f.exposeTLSKey, "expose-nats-tls-key", "", "key `FILE` (PEM) of --expose-nats-tls-cert")
		fs.StringVar(&f.exposeTLSCA, "expose-nats-tls-client-ca", "", "CA `FILE`: exposed NATS clients must show a certificate it signed (mutual TLS)")
	}
	if g&withStore != 0 {
		fs.StringVar(&f.store, "store", "", "object store: a directory, file:///dir or s3://bucket/prefix?endpoint=host:port&tls=false")
		fs.StringVar(&f.s3CredsFile, "s3-credentials-file", "", "S3 credentials `FILE` (lines access_key=…, secret_key=…; default: $SLUICE_S3_ACCESS_KEY/$SLUICE_S3_SECRET_KEY, then $AWS_ACCESS_KEY_ID/$AWS_SECRET_ACCESS_KEY)")
	}
	if g&withNATS != 0 {
		fs.StringVar(&f.nats, "nats", "", "NATS server URL(s), e.g. nats://nats-1:4222"+map[bool]string{true: " (default: embedded server)", false: ""}[embedded])
		fs.StringVar(&f.natsCreds, "nats-creds", "", "NATS credentials `FILE`: a .creds file (user JWT + seed) or a user nkey seed")
		fs.StringVar(&f.natsUser, "nats-user", os.Getenv(envNATSUser), "NATS user `NAME` (or $"+envNATSUser+"); password from --nats-password-file or $"+envNATSPassword)
		fs.StringVar(&f.natsPasswordFile, "nats-password-file", "", "`FILE` holding the NATS password (default: $"+envNATSPassword+")")
		fs.StringVar(&f.natsTokenFile, "nats-token-file", "", "`FILE` holding the NATS token (default: $"+envNATSToken+")")
		fs.StringVar(&f.tlsCA, "nats-tls-ca", "", "CA bundle to verify the NATS server")
		fs.StringVar(&f.tlsCert, "nats-tls-cert", "", "client certificate for NATS mutual TLS")
		fs.StringVar(&f.tlsKey, "nats-tls-key", "", "client key for NATS mutual TLS")
		fs.IntVar(&f.replicas, "nats-replicas", 0, "replicas of sluice's streams on a NATS cluster, 1–5 (default: a stream keeps what it has; a new one gets 3 on a cluster, 1 on a lone server)")
	}
	if g&withHTTP != 0 {
		fs.StringVar(&f.http, "http", httpDefault, "serve /metrics, /healthz, /readyz (and the live page on run/aggregate) on `addr` (off: none); beyond loopback a token is required")
		fs.StringVar(&f.httpTokenFile, "http-token-file", "", "`FILE` holding the bearer token HTTP clients must send (default: $"+envHTTPToken+")")
	}
	// Without the policy flags a process that creates the task consumers
	// (the first to open the queue) gives them the default policy.
	f.ackWait, f.maxDeliver = queue.DefaultPolicy.AckWait, queue.DefaultPolicy.MaxDeliver
	if g&withPolicy != 0 {
		fs.DurationVar(&f.ackWait, "ack-wait", queue.DefaultPolicy.AckWait, "redeliver a tile whose worker sent no heartbeat for this long")
		fs.IntVar(&f.maxDeliver, "max-deliver", queue.DefaultPolicy.MaxDeliver, "give a tile up (dead letter) after this many deliveries")
	}
}

// secret reads a secret from file when one is named, else from the
// environment variable env. Trailing line breaks and spaces are dropped; an
// empty file is an error.
func secret(flagName, file, env string) (string, error) {
	if file == "" {
		return os.Getenv(env), nil
	}
	b, err := os.ReadFile(file)
	if err != nil {
		var pe *os.PathError
		if errors.As(err, &pe) {
			err = pe.Err
		}
		return "", fmt.Errorf("--%s %s: %w", flagName, file, err)
	}
	v := strings.TrimRight(string(b), "\r\n\t ")
	if v == "" {
		return "", fmt.Errorf("--%s %s: file is empty", flagName, file)
	}
	return v, nil
}

func (f *nodeFlags) openStore(ctx context.Context) (store.Store, error) {
	loc := f.store
	if loc == "" {
		if f.data == "" {
			return nil, errors.New("--store is required")
		}
		loc = filepath.Join(f.data, "store")
	}
	var creds store.Credentials
	if f.s3CredsFile != "" {
		var err error
		if creds, err = store.LoadCredentials(f.s3CredsFile); err != nil {
			return nil, err
		}
	}
	return store.Open(ctx, loc, creds)
}

// natsAuth returns the client credentials: user + password, or token.
func (f *nodeFlags) natsAuth() (user, password, token string, err error) {
	if token, err = secret("nats-token-file", f.natsTokenFile, envNATSToken); err != nil {
		return
	}
	if f.natsUser != "" {
		if password, err = secret("nats-password-file", f.natsPasswordFile, envNATSPassword); err != nil {
			return
		}
		if password == "" {
			err = fmt.Errorf("--nats-user %s: no password (--nats-password-file or $%s)", f.natsUser, envNATSPassword)
			return
		}
		user = f.natsUser
		if f.natsTokenFile == "" {
			token = "" // an inherited $SLUICE_NATS_TOKEN does not compete with an explicit user
		}
	} else if f.natsPasswordFile != "" {
		err = errors.New("--nats-password-file needs --nats-user")
	}
	return
}

// serverConfig is the embedded server's configuration: the store under
// --data, and for --expose-nats the listener, its TLS and who may connect
// (--nats-users-file, --nats-user + password, or the NATS token).
func (f *nodeFlags) serverConfig() (queue.ServerConfig, error) {
	cfg := queue.ServerConfig{StoreDir: filepath.Join(f.data, "nats"), Listen: f.exposeNATS,
		TLSCert: f.exposeTLSCert, TLSKey: f.exposeTLSKey, TLSClientCA: f.exposeTLSCA}
	user, password, token, err := f.natsAuth()
	if err != nil {
		return cfg, err
	}
	cfg.Token = token
	if user != "" {
		cfg.Users = append(cfg.Users, queue.User{Name: user, Password: password})
	}
	if f.natsUsersFile != "" {
		us, ks, err := queue.LoadUsers(f.natsUsersFile)
		if err != nil {
			return cfg, err
		}
		cfg.Users, cfg.NKeys = append(cfg.Users, us...), ks
	}
	return cfg, nil
}

// openQueue connects to --nats, or starts the embedded server when allowed
// and no URL is given.
func (f *nodeFlags) openQueue(ctx context.Context, embedded bool, log *slog.Logger) (*queue.Queue, *queue.Server, error) {
	if f.replicas < 0 || f.replicas > 5 {
		return nil, nil, fmt.Errorf("--nats-replicas %d: give 1 to 5 (or leave it out)", f.replicas)
	}
	cfg := queue.Config{URL: f.nats, CredsFile: f.natsCreds, TLSCA: f.tlsCA, TLSCert: f.tlsCert, TLSKey: f.tlsKey, Replicas: f.replicas,
		Logger: log, Policy: queue.Policy{AckWait: f.ackWait, MaxDeliver: f.maxDeliver}, Role: f.policyRole}
	var srv *queue.Server
	if f.nats == "" {
		if !embedded {
			return nil, nil, errors.New("--nats is required")
		}
		scfg, err := f.serverConfig()
		if err != nil {
			return nil, nil, err
		}
		if srv, err = queue.StartServer(scfg); err != nil {
			return nil, nil, err
		}
		cfg.Server = srv // in-process clients use the server's own credentials
		// The process that runs the deployment's NATS server owns the
		// task delivery policy: its --ack-wait/--max-deliver are written.
		cfg.Role = queue.PolicyOwner
	} else {
		// Credentials in the URL would sit in shell history, process
		// lists and logs.
		for _, u := range strings.Split(f.nats, ",") {
			if hasUserInfo(u) {
				return nil, nil, errors.New("--nats URL holds credentials; use --nats-user with --nats-password-file, --nats-token-file or --nats-creds")
			}
		}
		var err error
		if cfg.User, cfg.Password, cfg.Token, err = f.natsAuth(); err != nil {
			return nil, nil, err
		}
	}
	q, err := queue.Open(ctx, cfg)
	if err != nil {
		if srv != nil {
			srv.Shutdown()
		}
		return nil, nil, err
	}
	return q, srv, nil
}

// checkHTTP refuses, before anything starts, an HTTP address beyond
// loopback without a token, and an unreadable token file.
func (f *nodeFlags) checkHTTP() error {
	if f.http == "" || f.http == "off" {
		return nil
	}
	hc, err := f.httpServe()
	if err != nil {
		return fmt.Errorf("http: %w", err)
	}
	return web.CheckBind(hc.Addr, hc.Token)
}

// hasUserInfo reports whether a URL ([scheme://][user[:pass]@]host[:port]
// [/…]) carries user information.
func hasUserInfo(u string) bool {
	if _, rest, ok := strings.Cut(u, "://"); ok {
		u = rest
	}
	authority, _, _ := strings.Cut(u, "/")
	return strings.Contains(authority, "@")
}

// httpServe is where and how serveHTTP serves: --http, and the token from
// --http-token-file or $SLUICE_HTTP_TOKEN.
func (f *nodeFlags) httpServe() (web.ServeConfig, error) {
	tok, err := secret("http-token-file", f.httpTokenFile, envHTTPToken)
	return web.ServeConfig{Addr: f.http, Token: tok}, err
}

// registry returns a Prometheus registry with the process collectors.
func registry() *prometheus.Registry {
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return reg
}

// serveHTTP serves mux plus /metrics, /healthz and /readyz on nf.http
// behind web.Guard (token, limits, timeouts) and returns the address it
// listens on; an empty or "off" address serves nothing.
func serveHTTP(ctx context.Context, nf nodeFlags, mux *http.ServeMux, reg *prometheus.Registry, ready func() bool, log *slog.Logger) (string, error) {
	if nf.http == "" || nf.http == "off" {
		return "", nil
	}
	hc, err := nf.httpServe()
	if err != nil {
		return "", fmt.Errorf("http: %w", err)
	}
	if mux == nil {
		mux = http.NewServeMux()
	}
	mux.Handle("GET /metrics", promhttp.HandlerFor(reg, promhttp.HandlerOpts{Registry: reg}))
	mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, r *http.Request) { fmt.Fprintln(w, "ok") })
	mux.HandleFunc("GET /readyz", func(w http.ResponseWriter, r *http.Request) {
		if ready != nil && !ready() {
			http.Error(w, "not ready", http.StatusServiceUnavailable)
			return
		}
		fmt.Fprintln(w, "ready")
	})
	hc.Log = log
	addr, err := web.Serve(ctx, hc, mux)
	if err != nil {
		return "", fmt.Errorf("http: %w", err)
	}
	return addr, nil
}

// taskPublisher adapts the queue to ingest.Publisher.
type taskPublisher struct{ q *queue.Queue }

func (p taskPublisher) PublishTask(ctx context.Context, t *sluicepb.TileTask) error {
	_, err := p.q.PublishTask(ctx, t)
	return err
}

// workerBeat is the interval of the workers' beats to the aggregator (0:
// queue.DefaultBeat); tests shorten it.
var workerBeat time.Duration

// runWorkers pulls tile tasks until ctx ends, then drains, beating to the
// aggregator meanwhile (queue.WorkOptions.Beat).
//
// A store that refuses this worker (store.IsRefused: wrong keys, a full or
// read-only disk) would fail every tile here, so the worker stops taking
// tiles, hands the tile back (nacked with delay, for a worker that can) and
// returns that error: the process exits with one line saying what to fix.
func runWorkers(ctx context.Context, q *queue.Queue, st store.Store, m *telemetry.Worker, id string, concurrency int, log *slog.Logger) error {
	ctx, refused := context.WithCancelCause(ctx)
	defer refused(nil)
	w := &worker.Worker{Store: st, ID: id, Metrics: m, Log: log}
	err := q.Work(ctx, func(ctx context.Context, t *sluicepb.TileTask) error {
		if t.Attempt > 1 {
			m.TilesRedelivered.Inc()
		}
		prio := "live"
		if t.Priority == sluicepb.Priority_PRIORITY_BATCH {
			prio = "batch"
		}
		done, err := w.Process(ctx, t)
		if err != nil {
			m.TilesFailed.WithLabelValues("process").Inc()
			log.Warn("tile failed", "campaign", t.Campaign, "step", t.Step, "tile", t.Tile, "attempt", t.Attempt, "err", err)
			if t.Attempt >= uint32(q.Policy().MaxDeliver) || queue.IsPermanent(err) {
				m.TilesDeadLetter.Inc()
			}
			if store.IsRefused(err) {
				refused(err)
			}
			return err
		}
		if err := publishResult(ctx, q, done, log); err != nil {
			m.TilesFailed.WithLabelValues("publish").Inc()
			return err
		}
		m.TilesProcessed.WithLabelValues(prio).Inc()
		return nil
	}, queue.WorkOptions{Concurrency: concurrency, WorkerID: id, Beat: workerBeat})
	if cause := context.Cause(ctx); err == nil && store.IsRefused(cause) {
		return fmt.Errorf("worker %s stopped: the object store refuses it: %w", id, cause)
	}
	return err
}

// publishResult publishes a finished tile's result, retrying with a
// growing pause for up to a minute while NATS is unreachable: the tile's
// heartbeat keeps the task ours meanwhile, so an outage shorter than that
// costs no recomputation and no delivery attempt. The result's message id
// makes a publish that did reach the server before an error a duplicate.
func publishResult(ctx context.Context, q *queue.Queue, done *sluicepb.TileDone, log *slog.Logger) error {
	const budget = time.Minute
	start, wait := time.Now(), 250*time.Millisecond
	for attempt := 1; ; attempt++ {
		_, err := q.PublishResult(ctx, done)
		if err == nil || ctx.Err() != nil || time.Since(start)+wait > budget {
			return err
		}
		log.Warn("result publish failed; retrying", "campaign", done.Campaign, "step", done.Step, "tile", done.Tile, "attempt", attempt, "in", wait, "err", err)
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(wait):
		}
		wait = min(2*wait, 5*time.Second)
	}
}

// runAggregator consumes step announcements, tile results and dead-letter
// records and keeps the queue-backlog gauges until ctx ends. The first of
// them to fail stops the others and its error is returned, so the process
// exits instead of staying up with a dead consumer.
func runAggregator(ctx context.Context, q *queue.Queue, a *aggregator.Aggregator, m *telemetry.Aggregator, log *slog.Logger) error {
	// The aggregator outlives crashing workers: it too records tiles that
	// ran out of deliveries.
	host, _ := os.Hostname()
	stopDead, err := q.RecordMaxDeliveries(fmt.Sprintf("aggregator@%s:%d", host, os.Getpid()))
	if err != nil {
		return err
	}
	defer stopDead()
	g := newRunGroup(ctx)
	g.Go("step announcements", func(ctx context.Context) error {
		return q.StepsReady(ctx, aggregator.StopOnRefusal(a.StepReady))
	})
	g.Go("tile results", func(ctx context.Context) error { return q.Results(ctx, aggregator.StopOnRefusal(a.TileDone)) })
	// One durable consumer: each dead letter is handled once, and one not
	// yet handled when the aggregator stopped comes after a restart
	// (StepFailed stores the failure before the record is acknowledged).
	g.Go("dead letters", func(ctx context.Context) error {
		return q.FollowDeadLetters(ctx, aggregator.StopOnRefusal(a.StepFailed))
	})
	// Workers beat every few seconds: /api/health counts those heard of
	// lately.
	g.Go("worker beats", func(ctx context.Context) error { return q.WatchWorkers(ctx, a.WorkerBeat) })
	g.Go("queue lag", func(ctx context.Context) error {
		t := time.NewTicker(2 * time.Second)
		defer t.Stop()
		for {
			select {
			case <-ctx.Done():
				return nil
			case <-t.C:
			}
			if lag, err := q.Lag(ctx); err == nil {
				m.QueueLag.WithLabelValues("live").Set(float64(lag.Live + lag.LiveInFlight))
				m.QueueLag.WithLabelValues("batch").Set(float64(lag.Batch + lag.BatchInFlight))
			}
		}
	})
	// The rig log may grow after the last step is measured: its columns
	// are re-applied to the series whenever the stored log changes.
	g.Go("rig log", func(ctx context.Context) error { a.WatchRigLogs(ctx, 5*time.Second); return nil })
	g.Go("", func(ctx context.Context) error { return watchConn(ctx, q) })
	return g.Wait()
}

// watchConn returns an error when the queue's connection closes for good
// while ctx lives (the client gave up: credentials refused, protocol
// error), and nil when ctx ends. A server that is down is not "for good":
// the client reconnects for ever.
//
// Meanwhile it says in the log when JetStream stops answering (a NATS
// cluster without a majority, a server restarting) and when it answers
// again: the process waits through such an outage rather than exit.
func watchConn(ctx context.Context, q *queue.Queue) error {
	go q.WatchJetStream(ctx, 5*time.Second)
	select {
	case <-ctx.Done():
		return nil
	case <-q.Lost():
		if ctx.Err() != nil {
			return nil
		}
		return q.LostErr()
	}
}

// newAggregator builds an aggregator with its metrics and hub.
func newAggregator(ctx context.Context, st store.Store, q *queue.Queue, reg *prometheus.Registry, log *slog.Logger) (*aggregator.Aggregator, *telemetry.Aggregator, *web.Hub, error) {
	m := telemetry.NewAggregator(reg)
	hub := web.NewHub()
	a := &aggregator.Aggregator{Store: st, Publisher: eventPublisher{q}, Metrics: m, Hub: hub, Log: log, Version: Version,
		Lag: func(ctx context.Context) (int64, int64, error) {
			l, err := q.Lag(ctx)
			return int64(l.Live + l.LiveInFlight), int64(l.Batch + l.BatchInFlight), err
		}}
	if err := a.Start(ctx); err != nil {
		return nil, nil, nil, err
	}
	reg.MustRegister(prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: "sluice_workers",
		Help: "Worker processes present: heard from within three of their beat intervals."},
		func() float64 { return float64(a.WorkersPresent()) }))
	return a, m, hub, nil
}

// eventPublisher adapts the queue to aggregator.EventPublisher.
type eventPublisher struct{ q *queue.Queue }

func (p eventPublisher) PublishEvent(ctx context.Context, id string, e *sluicepb.StepEvent) error {
	_, err := p.q.PublishEvent(ctx, id, e)
	return err
}

// errIdle is the cause with which a worker started with --exit-when-idle
// stops: the task queue stayed empty.
var errIdle = errors.New("the task queue stayed empty")

// waitQueueIdle returns nil once the task queue (live and batch) has held no
// task — neither waiting nor delivered to any worker — at every look, one
// look per poll, for at least idle. A task in flight at another worker keeps
// this one waiting: should that worker die, the task is redelivered and
// someone must still be there to take it. A failed look starts the wait
// over (an unreachable server is not an empty queue). It returns ctx's
// error when ctx ends first.
func waitQueueIdle(ctx context.Context, q *queue.Queue, idle, poll time.Duration) error {
	var since time.Time
	t := time.NewTicker(poll)
	defer t.Stop()
	for {
		l, err := q.Lag(ctx)
		now := time.Now()
		switch {
		case err != nil || l.Live+l.Batch+l.LiveInFlight+l.BatchInFlight > 0:
			since = time.Time{}
		case since.IsZero():
			since = now
		case now.Sub(since) >= idle:
			return nil
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-t.C:
		}
	}
}
