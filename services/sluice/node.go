package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"os"
	"path/filepath"
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

// nodeFlags say where the store and NATS are and where to serve HTTP.
type nodeFlags struct {
	data, store, nats, natsCreds, natsToken  string
	tlsCA, tlsCert, tlsKey, http, exposeNATS string
	s3Access, s3Secret                       string
	ackWait                                  time.Duration
	maxDeliver                               int
}

func (f *nodeFlags) register(fs *flag.FlagSet, httpDefault string, embedded bool) {
	if embedded {
		fs.StringVar(&f.data, "data", "sluice-data", "data directory: local store in DATA/store, embedded NATS in DATA/nats")
		fs.StringVar(&f.exposeNATS, "expose-nats", "", "also listen for NATS clients on `host:port`, so workers on other machines can join")
	}
	fs.StringVar(&f.store, "store", "", "object store: a directory, file:///dir or s3://bucket/prefix?endpoint=host:port&tls=false")
	fs.StringVar(&f.nats, "nats", "", "NATS server URL(s), e.g. nats://nats-1:4222"+map[bool]string{true: " (default: embedded server)", false: ""}[embedded])
	fs.StringVar(&f.natsCreds, "nats-creds", "", "NATS credentials file")
	fs.StringVar(&f.natsToken, "nats-token", os.Getenv("SLUICE_NATS_TOKEN"), "NATS token (or SLUICE_NATS_TOKEN)")
	fs.StringVar(&f.tlsCA, "nats-tls-ca", "", "CA bundle to verify the NATS server")
	fs.StringVar(&f.tlsCert, "nats-tls-cert", "", "client certificate for NATS mutual TLS")
	fs.StringVar(&f.tlsKey, "nats-tls-key", "", "client key for NATS mutual TLS")
	fs.StringVar(&f.http, "http", httpDefault, "serve /metrics, /healthz, /readyz (and the live page on run/aggregate) on `addr`")
	fs.DurationVar(&f.ackWait, "ack-wait", 30*time.Second, "redeliver a tile whose worker sent no heartbeat for this long")
	fs.IntVar(&f.maxDeliver, "max-deliver", 5, "give a tile up (dead letter) after this many deliveries")
}

func (f *nodeFlags) openStore(ctx context.Context) (store.Store, error) {
	loc := f.store
	if loc == "" {
		if f.data == "" {
			return nil, errors.New("--store is required")
		}
		loc = filepath.Join(f.data, "store")
	}
	return store.Open(ctx, loc, store.Credentials{AccessKey: store.Secret(f.s3Access), SecretKey: store.Secret(f.s3Secret)})
}

// openQueue connects to --nats, or starts the embedded server when allowed
// and no URL is given.
func (f *nodeFlags) openQueue(ctx context.Context, embedded bool, log *slog.Logger) (*queue.Queue, *queue.Server, error) {
	cfg := queue.Config{URL: f.nats, CredsFile: f.natsCreds, Token: f.natsToken, TLSCA: f.tlsCA, TLSCert: f.tlsCert, TLSKey: f.tlsKey,
		Logger: log, Policy: queue.Policy{AckWait: f.ackWait, MaxDeliver: f.maxDeliver}}
	var srv *queue.Server
	if f.nats == "" {
		if !embedded {
			return nil, nil, errors.New("--nats is required")
		}
		var err error
		srv, err = queue.StartServer(queue.ServerConfig{StoreDir: filepath.Join(f.data, "nats"), Listen: f.exposeNATS, Token: f.natsToken})
		if err != nil {
			return nil, nil, err
		}
		cfg.Server = srv
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

// registry returns a Prometheus registry with the process collectors.
func registry() *prometheus.Registry {
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return reg
}

// serveHTTP serves mux plus /metrics, /healthz and /readyz on addr and
// returns the address it listens on.
func serveHTTP(ctx context.Context, addr string, mux *http.ServeMux, reg *prometheus.Registry, ready func() bool, log *slog.Logger) (string, error) {
	if addr == "" || addr == "off" {
		return "", nil
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
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return "", fmt.Errorf("http: %v", err)
	}
	srv := &http.Server{Handler: mux, ReadHeaderTimeout: 10 * time.Second}
	go func() {
		if err := srv.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			log.Error("http server", "err", err)
		}
	}()
	context.AfterFunc(ctx, func() {
		sctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
		defer cancel()
		srv.Shutdown(sctx)
	})
	return ln.Addr().String(), nil
}

// taskPublisher adapts the queue to ingest.Publisher.
type taskPublisher struct{ q *queue.Queue }

func (p taskPublisher) PublishTask(ctx context.Context, t *sluicepb.TileTask) error {
	_, err := p.q.PublishTask(ctx, t)
	return err
}

// runWorkers pulls tile tasks until ctx ends, then drains.
func runWorkers(ctx context.Context, q *queue.Queue, st store.Store, m *telemetry.Worker, id string, concurrency int, log *slog.Logger) error {
	w := &worker.Worker{Store: st, ID: id, Metrics: m, Log: log}
	return q.Work(ctx, func(ctx context.Context, t *sluicepb.TileTask) error {
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
			if t.Attempt >= uint32(q.Policy().MaxDeliver) {
				m.TilesDeadLetter.Inc()
			}
			return err
		}
		if _, err := q.PublishResult(ctx, done); err != nil {
			m.TilesFailed.WithLabelValues("publish").Inc()
			return err
		}
		m.TilesProcessed.WithLabelValues(prio).Inc()
		return nil
	}, queue.WorkOptions{Concurrency: concurrency, WorkerID: id})
}

// runAggregator consumes step announcements and tile results and watches
// the dead-letter records and the queue backlog until ctx ends.
func runAggregator(ctx context.Context, q *queue.Queue, a *aggregator.Aggregator, m *telemetry.Aggregator, log *slog.Logger) error {
	errc := make(chan error, 3)
	go func() { errc <- q.StepsReady(ctx, a.StepReady) }()
	go func() { errc <- q.Results(ctx, a.TileDone) }()
	go func() {
		t := time.NewTicker(2 * time.Second)
		defer t.Stop()
		seen := map[string]bool{}
		for {
			select {
			case <-ctx.Done():
				errc <- nil
				return
			case <-t.C:
			}
			if lag, err := q.Lag(ctx); err == nil {
				m.QueueLag.WithLabelValues("live").Set(float64(lag.Live + lag.LiveInFlight))
				m.QueueLag.WithLabelValues("batch").Set(float64(lag.Batch + lag.BatchInFlight))
			}
			dls, err := q.DeadLetters(ctx, "")
			if err != nil {
				continue
			}
			for _, dl := range dls {
				id := dl.MsgId + "/" + fmt.Sprint(dl.StreamSeq)
				if !seen[id] {
					seen[id] = true
					a.StepFailed(ctx, dl)
				}
			}
		}
	}()
	var first error
	for i := 0; i < 3; i++ {
		if err := <-errc; err != nil && first == nil && ctx.Err() == nil {
			first = err
		}
	}
	return first
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
	return a, m, hub, nil
}

type eventPublisher struct{ q *queue.Queue }

func (p eventPublisher) PublishEvent(ctx context.Context, e *sluicepb.StepEvent) error {
	return p.q.PublishEvent(ctx, e)
}
