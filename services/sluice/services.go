package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"log/slog"
	"os"
	"os/signal"
	"path/filepath"
	"runtime"
	"sync"
	"syscall"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"sluice/internal/usermsg"
	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/queue"
	"sluice/pkg/store"
	"sluice/pkg/telemetry"
	"sluice/pkg/volio"
	"sluice/pkg/web"
	"sluice/proto/sluicepb"
	"sluice/services/ingest"
)

func logger() *slog.Logger {
	return slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: slog.LevelInfo}))
}

func signalContext() (context.Context, context.CancelFunc) {
	return signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
}

// loadConfig reads --config or returns the defaults.
func loadConfig(path string) (campaign.Config, error) {
	if path == "" {
		return campaign.Default(), nil
	}
	return campaign.Load(path)
}

// conn is what a standalone service process holds: a signal-aware
// context, the store, the queue and a metrics registry.
type conn struct {
	ctx   context.Context
	close func()
	log   *slog.Logger
	st    store.Store
	q     *queue.Queue
	reg   *prometheus.Registry
}

// connect opens the store and the queue (never an embedded server) for
// the command what; on failure it prints the error and returns the exit
// status.
func (nf nodeFlags) connect(what string) (*conn, int) {
	if err := nf.checkHTTP(); err != nil {
		return nil, fail(exitBadInput, "%s: %v", what, err)
	}
	ctx, stop := signalContext()
	log := logger()
	st, err := nf.openStore(ctx)
	if err != nil {
		stop()
		return nil, fail(exitBadInput, "%s: %v", what, err)
	}
	q, _, err := nf.openQueue(ctx, false, log)
	if err != nil {
		stop()
		return nil, fail(exitBadInput, "%s: %v", what, err)
	}
	reg := registry()
	return &conn{ctx: ctx, close: func() { q.Close(); stop() }, log: log, st: retrying(st, reg, log), q: q, reg: reg}, exitOK
}

// retrying wraps st so that object-store faults are retried with backoff
// (store.DefaultRetry) and counted in the sluice_store_* metrics on reg.
func retrying(st store.Store, reg prometheus.Registerer, log *slog.Logger) store.Store {
	m := telemetry.NewStore(reg)
	return store.WithRetry(st, store.RetryPolicy{}, func(op string, err error, again bool) {
		m.Observe(op, err, again)
		log.Warn("store operation failed", "op", op, "retrying", again, "err", err)
	})
}

// runWorker is `sluice worker`.
func runWorker(args []string) int {
	fs := flag.NewFlagSet("worker", flag.ContinueOnError)
	var nf nodeFlags
	nf.register(fs, withStore|withNATS|withHTTP|withPolicy, "127.0.0.1:8471")
	conc := fs.Int("concurrency", runtime.GOMAXPROCS(0), "tiles processed at once")
	id := fs.String("id", "", "worker name in results and dead letters (default host:pid)")
	idle := fs.Duration("exit-when-idle", 0, "leave once the whole task queue has been empty this long (0: never; for batch-scheduler allocations)")
	if _, code, ok := parseOrUsage(fs, args); !ok {
		return code
	}
	if *idle < 0 || (*idle > 0 && *idle < time.Second) {
		return fail(exitBadInput, "worker: --exit-when-idle %v: give 0 (never) or at least 1s", *idle)
	}
	c, code := nf.connect("worker")
	if c == nil {
		return code
	}
	defer c.close()
	ctx, st, q, reg, log := c.ctx, c.st, c.q, c.reg, c.log
	m := telemetry.NewWorker(reg)
	addr, err := serveHTTP(ctx, nf, nil, reg, nil, log)
	if err != nil {
		return fail(exitFailure, "worker: %v", err)
	}
	wid := *id
	if wid == "" {
		host, _ := os.Hostname()
		wid = fmt.Sprintf("%s:%d", host, os.Getpid())
	}
	log.Info("worker started", "id", wid, "concurrency", *conc, "store", fmt.Sprint(st), "http", addr)
	// With --exit-when-idle the idle watch ends the group's parent
	// context: every part drains and stops as on a signal.
	gctx, leave := context.WithCancelCause(ctx)
	defer leave(nil)
	if *idle > 0 {
		go func() {
			if waitQueueIdle(gctx, q, *idle, time.Second) == nil {
				leave(errIdle)
			}
		}()
	}
	g := newRunGroup(gctx)
	g.Go("tile workers", func(ctx context.Context) error { return runWorkers(ctx, q, st, m, wid, *conc, log) })
	g.Go("", func(ctx context.Context) error { return watchConn(ctx, q) })
	err = g.Wait()
	if err == nil && errors.Is(context.Cause(gctx), errIdle) {
		log.Info("worker leaves: the task queue stayed empty", "id", wid, "for", idle.String())
		fmt.Fprintf(os.Stderr, "worker %s: the task queue stayed empty for %v; leaving\n", wid, *idle)
		return exitOK
	}
	if err != nil {
		return fail(exitFailure, "worker: %v", err)
	}
	log.Info("worker drained and stopped", "id", wid)
	return exitOK
}

// runAggregate is `sluice aggregate`.
func runAggregate(args []string) int {
	fs := flag.NewFlagSet("aggregate", flag.ContinueOnError)
	var nf nodeFlags
	nf.register(fs, withStore|withNATS|withHTTP|withPolicy, "127.0.0.1:8470")
	if _, code, ok := parseOrUsage(fs, args); !ok {
		return code
	}
	c, code := nf.connect("aggregate")
	if c == nil {
		return code
	}
	defer c.close()
	ctx, st, q, reg, log := c.ctx, c.st, c.q, c.reg, c.log
	a, m, hub, err := newAggregator(ctx, st, q, reg, log)
	if err != nil {
		return fail(exitFailure, "aggregate: %v", err)
	}
	addr, err := serveHTTP(ctx, nf, web.Handler(a, hub, log), reg, nil, log)
	if err != nil {
		return fail(exitFailure, "aggregate: %v", err)
	}
	log.Info("aggregator started", "http", addr)
	if err := runAggregator(ctx, q, a, m, log); err != nil {
		return fail(exitFailure, "aggregate: %v", err)
	}
	return exitOK
}

// ingestFlags are shared by `sluice ingest` and `sluice run`.
type ingestFlags struct {
	campaign, config, watch, step string
	settle                        time.Duration
	timeS                         optionalFloat
	batch, createWatch            bool
	// times is --times FILE; timeFromMTime allows file modification
	// times to date scans with no other time.
	times         string
	timeFromMTime bool
	// poll is the watcher's scan interval (0: its default, 1 s); tests
	// shorten it so that a scan's five attempts take milliseconds.
	poll time.Duration
	// rigLog is --rig-log FILE: the flow rig's CSV log, followed while
	// the directory is watched.
	rigLog string
}

func (f *ingestFlags) register(fs *flag.FlagSet, single bool) {
	fs.StringVar(&f.campaign, "campaign", "", "campaign name ([a-z0-9][a-z0-9._-]{0,63})")
	fs.StringVar(&f.config, "config", "", "campaign config file (YAML); used when the campaign is created")
	fs.StringVar(&f.watch, "watch", "", "watch `DIR` and ingest each scan once its marker file exists (scan_0042.raw.done or scan_0042.done)")
	fs.BoolVar(&f.createWatch, "create-watch", false, "create the --watch directory if it does not exist (without it a missing directory is an error)")
	fs.DurationVar(&f.settle, "settle", 0, "also accept scans without a marker once unchanged for this long (e.g. 30s)")
	fs.StringVar(&f.times, "times", "", "CSV `FILE` with the header step,time_s giving steps' experiment times in seconds (wins over markers and headers; re-read when it changes)")
	fs.BoolVar(&f.timeFromMTime, "time-from-mtime", false, "date a scan that has no time from --times, its marker or its header by its file modification time, in seconds from that of the campaign's first scan so dated (without it such a scan is rejected)")
	fs.StringVar(&f.rigLog, "rig-log", "", "follow the flow rig's CSV `FILE` (columns mapped in the campaign config's rig_log section) while watching, and store it for the series (pore volumes injected, capillary number, transducer pressures)")
	if single {
		fs.StringVar(&f.step, "step", "", "step name for a single FILE (default: from the file name)")
		fs.Var(&f.timeS, "time", "experiment time of the step in `seconds` (default: its --times row, else the scan's marker {\"time_s\": …}, else its header, else with --time-from-mtime its modification time; refused when none gives one)")
		fs.BoolVar(&f.batch, "batch", false, "queue the tiles as batch work (archives) instead of live")
	}
}

// checkWatch makes sure the --watch directory is there before anything
// starts: a mistyped path must not become a new empty folder watched for
// ever. It is created only when --create-watch asks for it. A --times file
// must read correctly from the start too.
func (f ingestFlags) checkWatch() error {
	if f.times != "" {
		if _, err := readStepTimes(f.times); err != nil {
			return err
		}
	}
	if f.watch == "" {
		if f.createWatch {
			return errors.New("--create-watch needs --watch DIR")
		}
		return nil
	}
	fi, err := os.Stat(f.watch)
	switch {
	case err == nil && !fi.IsDir():
		return fmt.Errorf("--watch %s is not a directory", f.watch)
	case err == nil:
		return nil
	case errors.Is(err, os.ErrNotExist) && f.createWatch:
		return os.MkdirAll(f.watch, 0o755)
	case errors.Is(err, os.ErrNotExist):
		return fmt.Errorf("--watch %s: no such directory (check the path, or add --create-watch to create it)", f.watch)
	}
	return fmt.Errorf("--watch %w", err)
}

// startIngest ensures the campaign exists and returns an ingester.
func startIngest(ctx context.Context, f ingestFlags, in inputFlags, st ingest.Store, pub ingest.Publisher, ready func(*sluicepb.StepReady), m *telemetry.Ingest, log *slog.Logger) (*ingest.Ingester, error) {
	if f.campaign == "" {
		return nil, errors.New("--campaign is required")
	}
	if err := layout.CheckName("campaign", f.campaign); err != nil {
		return nil, err
	}
	cfg, err := loadConfig(f.config)
	if err != nil {
		return nil, err
	}
	rec, err := ingest.EnsureCampaign(ctx, st, f.campaign, cfg, Version, "")
	if err != nil {
		return nil, err
	}
	if err := checkRigLog(f, rec.Config); err != nil {
		return nil, err
	}
	ropt, err := in.options()
	if err != nil {
		return nil, err
	}
	ropt = withDataset(ropt, cfg)
	if cfg.VoxelSize == "" && ropt.VoxelSize == 0 {
		log.Warn("no voxel_size in the campaign config and no --voxel-size: a scan without one in its own metadata will be refused", "campaign", f.campaign)
	}
	return &ingest.Ingester{Store: st, Queue: pub, Metrics: m, Log: log, Version: Version, ReadOpt: ropt, Stepped: ready}, nil
}

// watchAndIngest runs the directory watcher until ctx ends.
func watchAndIngest(ctx context.Context, ing *ingest.Ingester, f ingestFlags, log *slog.Logger) error {
	w := &ingest.Watcher{Dir: f.watch, Settle: f.settle, Poll: f.poll, Log: log, ModTimes: f.timeFromMTime}
	w.GaveUp = func(a ingest.Arrival, attempts int, err error) {
		req := ingest.Request{Campaign: f.campaign, Step: a.Step, Path: a.Path}
		if rerr := ing.Reject(ctx, req, attempts, err); rerr != nil {
			log.Error("rejected scan not recorded", "path", a.Path, "err", rerr)
		}
	}
	times := &liveTimes{path: f.times}
	if f.rigLog != "" {
		c, err := layout.NewCampaign(f.campaign)
		if err != nil {
			return err
		}
		cfg, err := rigConfig(ctx, ing.Store, c)
		if err != nil {
			return err
		}
		rt := &rigTail{path: f.rigLog, st: ing.Store, c: c, cfg: cfg, log: log}
		go func() {
			if err := tailRigLog(ctx, rt, f.poll); err != nil {
				log.Error("rig log no longer followed", "file", f.rigLog, "error", usermsg.Clean(err.Error(), ""))
			}
		}()
	}
	return w.Run(ctx, func(a ingest.Arrival) error {
		t0 := time.Now()
		req := ingest.Request{Campaign: f.campaign, Step: a.Step, Path: a.Path, TimeS: a.TimeS, HasTime: a.HasTime, TimeFrom: "marker",
			ModTime: a.ModTime, Priority: sluicepb.Priority_PRIORITY_LIVE}
		row, ok, err := times.row(a.Step)
		if err != nil {
			return fmt.Errorf("%s: %w", a.Path, err)
		}
		if ok {
			req.TimeS, req.HasTime, req.TimeFrom = row.t, true, "--times"
		}
		r, err := ing.Ingest(ctx, req)
		if errors.Is(err, ingest.ErrDone) {
			log.Info("scan already measured; skipped", "path", a.Path, "step", a.Step)
			return nil
		}
		if err != nil {
			return err
		}
		log.Info("step ingested", "campaign", f.campaign, "step", a.Step, "tiles", r.TileCount, "seconds", fmt.Sprintf("%.2f", time.Since(t0).Seconds()))
		return nil
	})
}

// liveTimes is a --times file read again whenever it changes, so that
// rows added during the experiment date the scans that follow. A zero
// path has no rows.
type liveTimes struct {
	path  string
	size  int64
	mtime time.Time
	t     *stepTimes
}

// row returns the time of step, if the file has one.
func (l *liveTimes) row(step string) (timeRow, bool, error) {
	if l.path == "" {
		return timeRow{}, false, nil
	}
	fi, err := os.Stat(l.path)
	if err != nil {
		return timeRow{}, false, fmt.Errorf("--times %w", err)
	}
	if l.t == nil || fi.Size() != l.size || !fi.ModTime().Equal(l.mtime) {
		t, err := readStepTimes(l.path)
		if err != nil {
			return timeRow{}, false, err
		}
		l.t, l.size, l.mtime = t, fi.Size(), fi.ModTime()
	}
	r, ok := l.t.row(step)
	return r, ok, nil
}

// runIngest is `sluice ingest`.
func runIngest(args []string) int {
	fs := flag.NewFlagSet("ingest", flag.ContinueOnError)
	var nf nodeFlags
	var in inputFlags
	var f ingestFlags
	nf.register(fs, withStore|withNATS|withHTTP, "127.0.0.1:8472")
	in.register(fs)
	f.register(fs, true)
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if (len(pos) == 1) == (f.watch != "") {
		return fail(exitBadInput, "ingest: give either one FILE or --watch DIR")
	}
	// Flags of the other mode would be ignored: refuse them.
	set := givenFlags(fs)
	for _, c := range []struct {
		flag  string
		watch bool // the flag belongs to --watch
		msg   string
	}{
		{"step", false, "--step names the step of one FILE; with --watch each scan's step comes from its file name"},
		{"time", false, "--time dates one FILE; with --watch scans take their times from --times, their markers or headers"},
		{"batch", false, "--batch queues one FILE as batch work; with --watch scans are queued live"},
		{"http", true, "--http serves metrics while watching (--watch); one FILE serves nothing (--http off is accepted)"},
		{"http-token-file", true, "--http-token-file guards the HTTP server of --watch; one FILE serves nothing"},
		{"settle", true, "--settle is for --watch (scans without a marker); one FILE is taken as it is"},
	} {
		if c.flag == "http" && (nf.http == "off" || nf.http == "") {
			continue // "serve nothing" is what one FILE does anyway
		}
		if set[c.flag] && c.watch == (f.watch == "") {
			return fail(exitBadInput, "ingest: %s", c.msg)
		}
	}
	if err := f.checkWatch(); err != nil {
		return fail(exitBadInput, "ingest: %v", err)
	}
	nf.policyRole = queue.PolicyBystander // ingest queues tasks and works none
	c, code := nf.connect("ingest")
	if c == nil {
		return code
	}
	defer c.close()
	ctx, st, q, reg, log := c.ctx, c.st, c.q, c.reg, c.log
	m := telemetry.NewIngest(reg)
	ready := func(r *sluicepb.StepReady) { q.PublishStepReady(ctx, r) }
	ing, err := startIngest(ctx, f, in, st, taskPublisher{q}, ready, m, log)
	if err != nil {
		return fail(exitBadInput, "ingest: %v", err)
	}
	if f.watch != "" {
		if _, err := serveHTTP(ctx, nf, nil, reg, nil, log); err != nil {
			return fail(exitFailure, "ingest: %v", err)
		}
		// A watcher whose queue connection is gone would give up every
		// scan after its retries: stop instead, and be restarted.
		log.Info("watching for scans", "dir", f.watch, "campaign", f.campaign)
		g := newRunGroup(ctx)
		g.Go("watcher", func(ctx context.Context) error { return watchAndIngest(ctx, ing, f, log) })
		g.Go("", func(ctx context.Context) error { return watchConn(ctx, q) })
		if err := g.Wait(); err != nil {
			return fail(exitFailure, "ingest: %v", err)
		}
		return exitOK
	}
	path := pos[0]
	step := f.step
	if step == "" {
		if step, err = ingest.StepName(path); err != nil {
			return fail(exitBadInput, "%v", err)
		}
	}
	req := ingest.Request{Campaign: f.campaign, Step: step, Path: path, TimeS: f.timeS.v, HasTime: f.timeS.set, TimeFrom: "--time"}
	if !req.HasTime {
		row, ok, err := (&liveTimes{path: f.times}).row(step)
		if err != nil {
			return fail(exitBadInput, "ingest: %v", err)
		}
		req.TimeS, req.HasTime, req.TimeFrom = row.t, ok, "--times"
	}
	if !req.HasTime {
		req.TimeFrom = "marker"
		if req.TimeS, req.HasTime, err = scanTime(path, ing.ReadOpt, f.timeFromMTime); err != nil {
			return fail(exitBadInput, "ingest: %v", err)
		}
	}
	if !req.HasTime && f.timeFromMTime {
		if req.ModTime, err = ingest.ModTime(path); err != nil {
			return fail(exitBadInput, "ingest: %v", err)
		}
	}
	bar := newProgressBar(os.Stderr, "ingest "+step)
	ing.Progress = bar.update
	prio := sluicepb.Priority_PRIORITY_LIVE
	if f.batch {
		prio = sluicepb.Priority_PRIORITY_BATCH
	}
	req.Priority = prio
	r, err := ing.Ingest(ctx, req)
	bar.done()
	if err != nil {
		return fail(exitBadInput, "%v", err)
	}
	fmt.Fprintf(stdout, "step %s of campaign %s stored; %d tile tasks queued (parameter hash %s)\n", r.Step, r.Campaign, r.TileCount, r.ParamHash)
	return exitOK
}

// scanTime is the experiment time of a single scan given without --time:
// from its marker (scan_0042.raw.done or scan_0042.done) when that holds
// one, else from the scan's header (returned as no time: the ingest reads
// it). A scan with neither is refused rather than stored at t = 0, which
// would date the campaign's events wrongly, unless mtimeOK (the ingest
// then dates it by its modification time); a header that cannot be read
// is left to the ingest, which names the problem.
func scanTime(path string, opt volio.Options, mtimeOK bool) (float64, bool, error) {
	dir, name := filepath.Split(filepath.Clean(path))
	if dir == "" {
		dir = "."
	}
	if ents, err := os.ReadDir(dir); err == nil {
		names := map[string]bool{}
		for _, e := range ents {
			names[e.Name()] = true
		}
		marker, err := ingest.MarkerFor(names, name)
		if err != nil {
			return 0, false, err
		}
		if marker != "" {
			t, ok, err := ingest.ReadMarker(filepath.Join(dir, marker))
			if err != nil || ok {
				return t, ok, err
			}
		}
	}
	h, err := volio.ReadHeader(path, opt)
	if err != nil || h.HasTime || mtimeOK {
		return 0, false, nil
	}
	return 0, false, fmt.Errorf("%s has no experiment time (no --times row, no marker with time_s, none in its header): give --time SECONDS, --times FILE, or --time-from-mtime", path)
}

// allInOne is the embedded deployment: NATS, store, watcher, workers and
// aggregator in one process.
type allInOne struct {
	url  string
	nats string // client URL of the embedded NATS server when exposed
	// stopping is closed when the node begins to stop: its context ended,
	// or one of its parts ended (failed) and stopped the others.
	stopping <-chan struct{}
	// wg is done when every part has stopped and the queue is closed.
	wg sync.WaitGroup
	// err is the failure that stopped the node (nil after an orderly
	// stop); read it after wg.Wait.
	err error
}

// runAll is `sluice run`.
func runAll(args []string) int {
	fs := flag.NewFlagSet("run", flag.ContinueOnError)
	var nf nodeFlags
	var in inputFlags
	var f ingestFlags
	nf.register(fs, withEmbedded|withStore|withNATS|withHTTP|withPolicy, "127.0.0.1:8470")
	in.register(fs)
	f.register(fs, false)
	workers := fs.Int("workers", runtime.GOMAXPROCS(0), "tile workers in this process (0: none, for separate `sluice worker` processes)")
	if _, code, ok := parseOrUsage(fs, args); !ok {
		return code
	}
	if f.watch == "" {
		// Without --watch the node ingests nothing: the flags that say
		// how to ingest would be ignored.
		set := givenFlags(fs)
		for _, name := range []string{"campaign", "config", "settle", "times", "time-from-mtime", "shape", "dtype", "byte-order", "voxel-size", "max-voxels"} {
			if set[name] {
				return fail(exitBadInput, "run: --%s applies to the scans of --watch DIR, and none is given", name)
			}
		}
	}
	ctx, stop := signalContext()
	defer stop()
	log := logger()
	node, err := startAll(ctx, nf, in, f, *workers, log)
	if err != nil {
		return fail(exitBadInput, "run: %v", err)
	}
	fmt.Fprintf(stdout, "sluice running: live page http://%s/  metrics http://%s/metrics\n", node.url, node.url)
	select {
	case <-ctx.Done():
		log.Info("shutting down: draining workers")
	case <-node.stopping:
		log.Error("a part of the node failed; stopping the others")
	}
	node.wg.Wait()
	if node.err != nil {
		return fail(exitFailure, "run: %v", node.err)
	}
	return exitOK
}

// startAll starts the all-in-one node; it stops when ctx ends or one of its
// parts fails (wait on node.wg, then read node.err).
func startAll(ctx context.Context, nf nodeFlags, in inputFlags, f ingestFlags, workers int, log *slog.Logger) (*allInOne, error) {
	if err := nf.checkHTTP(); err != nil {
		return nil, err
	}
	if err := f.checkWatch(); err != nil {
		return nil, err
	}
	if err := os.MkdirAll(nf.data, 0o755); err != nil {
		return nil, err
	}
	st, err := nf.openStore(ctx)
	if err != nil {
		return nil, err
	}
	q, srv, err := nf.openQueue(ctx, true, log)
	if err != nil {
		return nil, err
	}
	reg := registry()
	st = retrying(st, reg, log)
	wm := telemetry.NewWorker(reg)
	im := telemetry.NewIngest(reg)
	agg, am, hub, err := newAggregator(ctx, st, q, reg, log)
	if err != nil {
		return nil, err
	}
	var ing *ingest.Ingester
	if f.watch != "" {
		ready := func(r *sluicepb.StepReady) { q.PublishStepReady(ctx, r) }
		if ing, err = startIngest(ctx, f, in, st, taskPublisher{q}, ready, im, log); err != nil {
			return nil, err
		}
	}
	g := newRunGroup(ctx)
	addr, err := serveHTTP(g.Context(), nf, web.Handler(agg, hub, log), reg, nil, log)
	if err != nil {
		return nil, err
	}
	node := &allInOne{url: addr, stopping: g.Context().Done()}
	if srv != nil && srv.ClientURL() != "" {
		node.nats = srv.ClientURL()
		log.Info("NATS exposed for extra workers", "url", srv.ClientURL())
	}
	g.Go("aggregator", func(ctx context.Context) error { return runAggregator(ctx, q, agg, am, log) })
	// workers = 0: no tile workers in this process (separate `sluice
	// worker` processes join through --expose-nats).
	if workers > 0 {
		host, _ := os.Hostname()
		id := fmt.Sprintf("%s:%d/run", host, os.Getpid())
		g.Go("tile workers", func(ctx context.Context) error { return runWorkers(ctx, q, st, wm, id, workers, log) })
	}
	if ing != nil {
		g.Go("watcher", func(ctx context.Context) error { return watchAndIngest(ctx, ing, f, log) })
	}
	node.wg.Add(1)
	go func() {
		defer node.wg.Done()
		node.err = g.Wait()
		q.Close()
		if srv != nil {
			srv.Shutdown()
		}
	}()
	return node, nil
}
