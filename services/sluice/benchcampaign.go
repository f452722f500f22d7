package main

import (
	"bufio"
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"sort"
	"strconv"
	"strings"
	"syscall"
	"text/tabwriter"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/layout"
	"sluice/pkg/scan"
	"sluice/pkg/scenario"
	"sluice/pkg/series"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// benchCampaignName is the campaign the benchmark creates in its data
// directory.
const benchCampaignName = "bench"

// benchCampaignOptions are the flags of `sluice bench campaign`.
type benchCampaignOptions struct {
	size, steps, tile, workers, procs, procCores, base, ahead int
	seed                                                      uint64
	data                                                      string
	keep, json                                                bool
	timeout                                                   time.Duration
	sets                                                      []string // --set key=value on the campaign config
}

// benchStepResult is one step of the benchmark campaign.
type benchStepResult struct {
	Step string `json:"step"`
	// LatencyS runs from the scan's marker file being written to the step's
	// series row being written (mtime of the run result, the step's commit
	// marker, written right after the row).
	LatencyS float64 `json:"latency_s"`
	// AggregateS runs from the last tile result of the step being stored to
	// the series row: the aggregator's share of the latency.
	AggregateS float64 `json:"aggregate_s"`
}

// benchStage is one stage of the per-step breakdown.
type benchStage struct {
	Role  string  `json:"role"` // ingest, worker, aggregator
	Stage string  `json:"stage"`
	Count float64 `json:"count"` // observations: steps for ingest/aggregator, tiles for workers
	// TotalS is the time summed over all observations (for workers: summed
	// over tiles that ran in parallel, so it may exceed the wall time).
	TotalS   float64 `json:"total_s"`
	PerStepS float64 `json:"per_step_s"`
}

// benchProcess is the peak resident memory of one process.
type benchProcess struct {
	Role      string  `json:"role"`
	PID       int     `json:"pid"`
	PeakRSSMB float64 `json:"peak_rss_mb"`
	Source    string  `json:"source"` // how it was read
	// GoMaxProcs is the worker process's GOMAXPROCS as its /metrics
	// reports it (go_sched_gomaxprocs_threads); 0 when not read.
	GoMaxProcs int `json:"gomaxprocs,omitempty"`
}

// benchCampaignReport is what `sluice bench campaign` prints (--json).
type benchCampaignReport struct {
	Size          int               `json:"size"`
	Steps         int               `json:"steps"`
	Tile          int               `json:"tile"`
	Halo          int               `json:"halo"` // grey halo read around each tile core (voxels)
	TilesPerStep  int               `json:"tiles_per_step"`
	Workers       int               `json:"workers_per_process"`
	Procs         int               `json:"worker_processes"`            // 0: workers inside the node
	ProcCores     int               `json:"cores_per_process,omitempty"` // GOMAXPROCS of each worker process; 0: all
	CPUs          int               `json:"cpus"`
	VoxelsPerStep int64             `json:"voxels_per_step"`
	BytesPerStep  int64             `json:"bytes_per_step"`
	Results       []benchStepResult `json:"steps_done"`
	SeriesRows    int               `json:"series_rows"`
	// WallS runs from the first marker to the last series row.
	WallS       float64        `json:"wall_s"`
	MVoxPerS    float64        `json:"mvox_per_s"`
	LatencyP50S float64        `json:"latency_p50_s"`
	LatencyP95S float64        `json:"latency_p95_s"`
	Stages      []benchStage   `json:"stages"`
	Processes   []benchProcess `json:"processes"`
	Data        string         `json:"data,omitempty"` // kept data directory
}

// runBenchCampaign is `sluice bench campaign`: a synthetic campaign through
// the real pipeline with throughput, latency percentiles and peak memory.
func runBenchCampaign(args []string) int {
	fs := flag.NewFlagSet("bench campaign", flag.ContinueOnError)
	var o benchCampaignOptions
	fs.IntVar(&o.size, "size", 512, "edge of the cubic uint16 scans in voxels")
	fs.IntVar(&o.steps, "steps", 10, "number of scans")
	fs.IntVar(&o.tile, "tile", 256, "tile edge in voxels (Zarr chunk edge)")
	fs.IntVar(&o.workers, "workers", runtime.GOMAXPROCS(0), "tiles processed at once per worker process (or in the node)")
	fs.IntVar(&o.procs, "procs", 0, "run the workers as this many separate `sluice worker` processes (0: inside the node)")
	fs.IntVar(&o.procCores, "proc-cores", 0, "with --procs: cores (GOMAXPROCS) given to each worker process (0: all of the machine's)")
	fs.IntVar(&o.base, "base", 128, "edge of the rendered grain pack that is mirrored to --size")
	fs.IntVar(&o.ahead, "ahead", 2, "scans written ahead of the last series row (beamline back-pressure)")
	fs.Uint64Var(&o.seed, "seed", 1, "rock seed")
	fs.StringVar(&o.data, "data", "", "data directory (default: a temporary directory, removed unless --keep)")
	fs.BoolVar(&o.keep, "keep", false, "keep the data directory")
	fs.BoolVar(&o.json, "json", false, "print the report as JSON")
	fs.DurationVar(&o.timeout, "timeout", time.Hour, "give up after this long")
	fs.Func("set", "change one parameter of the benchmark's campaign config, `key=value` with a dotted YAML key (measure.skip_topological=true); repeatable", func(s string) error {
		o.sets = append(o.sets, s)
		return nil
	})
	if _, code, ok := parseOrUsage(fs, args); !ok {
		return code
	}
	if o.size < 16 || o.steps < 1 || o.tile < 8 || o.workers < 1 || o.procs < 0 || o.procCores < 0 || o.base < 32 || o.ahead < 1 {
		return fail(exitBadInput, "bench campaign: need --size ≥ 16, --steps ≥ 1, --tile ≥ 8, --workers ≥ 1, --procs ≥ 0, --proc-cores ≥ 0, --base ≥ 32, --ahead ≥ 1")
	}
	ctx, stop := signalContext()
	defer stop()
	ctx, cancel := context.WithTimeout(ctx, o.timeout)
	defer cancel()
	rep, err := benchCampaign(ctx, o)
	if err != nil {
		return fail(exitFailure, "bench campaign: %v", err)
	}
	if o.json {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(rep); err != nil {
			return fail(exitFailure, "bench campaign: %v", err)
		}
		return exitOK
	}
	printBenchCampaign(stdout, rep)
	return exitOK
}

// benchCampaign runs the campaign and measures it.
func benchCampaign(ctx context.Context, o benchCampaignOptions) (*benchCampaignReport, error) {
	data := o.data
	if data == "" {
		d, err := os.MkdirTemp("", "sluice-bench-")
		if err != nil {
			return nil, err
		}
		data = d
	} else if ents, err := os.ReadDir(data); err == nil && len(ents) > 0 {
		return nil, fmt.Errorf("%s is not empty; give an empty or new --data", data)
	}
	if !o.keep {
		defer os.RemoveAll(data)
	}
	incoming := filepath.Join(data, "incoming")
	if err := os.MkdirAll(incoming, 0o755); err != nil {
		return nil, err
	}
	quiet := !o.json
	say := func(format string, a ...any) {
		if quiet {
			fmt.Fprintf(stdout, format, a...)
		}
	}

	// The rock: a grain pack of base³ voxels filling the box (no sleeve), so
	// that mirrored copies join seamlessly.
	b := min(o.base, o.size)
	sc := &scenario.Campaign{Shape: [3]int{b, b, b}, Steps: 12, Seed: o.seed, NoCore: true} // fluid states cycled over the steps
	say("preparing a %d³ grain pack, mirrored to %d³ scans …\n", b, o.size)
	if err := sc.Prepare(); err != nil {
		return nil, err
	}
	cfg := singleScanConfig(sc, o.tile)
	cfg.Segment.Sample.Y, cfg.Segment.Sample.X, cfg.Segment.Sample.Radius = 0, 0, 0
	if len(o.sets) > 0 {
		var err error
		if cfg, err = cfg.Set(o.sets); err != nil {
			return nil, fmt.Errorf("--set: %w", err)
		}
	}
	cfgPath := filepath.Join(data, "campaign.yaml")
	if err := writeDemoConfig(cfgPath, cfg); err != nil {
		return nil, err
	}
	hash := cfg.Hash()
	halo, err := scan.Halo(cfg)
	if err != nil {
		return nil, err
	}
	// The base scans (up to 12 fluid states, 2·base³ bytes each) are
	// rendered before the node starts and the scenario is dropped, so the
	// node's memory holds the pipeline, not the renderer.
	bases := make([]*volume.Volume[uint16], min(o.steps, sc.Steps))
	for i := range bases {
		// Start mid-drainage (state 6 of 12, as BenchmarkTile in pkg/scan):
		// the first states hold little or no gas, hence few wn interfaces
		// and contact lines, and would flatter the measurement stages.
		lab, _, _ := sc.Step((i + sc.Steps/2) % sc.Steps)
		p := forward.Default()
		p.Seed = uint64(i + 1)
		g, err := forward.Render(lab, p)
		if err != nil {
			return nil, err
		}
		bases[i] = forward.Uint16(g)
	}
	voxelSize := sc.VoxelSize
	sc = nil
	// Forget the set-up's memory peak (Linux clear_refs 5 resets VmHWM to
	// the current RSS).
	debug.FreeOSMemory()
	os.WriteFile("/proc/self/clear_refs", []byte("5"), 0)

	log := slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: slog.LevelWarn}))
	nf := nodeFlags{data: data, http: "127.0.0.1:0", ackWait: 30 * time.Second, maxDeliver: 5}
	inproc := o.workers
	if o.procs > 0 {
		nf.exposeNATS = "127.0.0.1:-1"
		inproc = 0
	}
	nctx, nstop := context.WithCancel(ctx)
	defer nstop()
	node, err := startAll(nctx, nf, inputFlags{}, ingestFlags{campaign: benchCampaignName, config: cfgPath, watch: incoming}, inproc, log)
	if err != nil {
		return nil, err
	}
	var children []*benchChild
	defer func() {
		for _, c := range children {
			c.stop()
		}
	}()
	for i := 0; i < o.procs; i++ {
		c, err := startBenchWorker(node.nats, filepath.Join(data, "store"), o.workers, o.procCores, i)
		if err != nil {
			return nil, err
		}
		children = append(children, c)
	}

	n := o.size
	tiling := volume.Tiling{Whole: volume.Box{Max: [3]int{n, n, n}}, Tile: [3]int{o.tile, o.tile, o.tile}}
	rep := &benchCampaignReport{Size: n, Steps: o.steps, Tile: o.tile, Halo: halo, TilesPerStep: tiling.Len(), Workers: o.workers, Procs: o.procs, ProcCores: o.procCores,
		CPUs: runtime.NumCPU(), VoxelsPerStep: int64(n) * int64(n) * int64(n)}
	rep.BytesPerStep = rep.VoxelsPerStep * 2
	storeRoot := filepath.Join(data, "store")
	mtime := func(key string) (time.Time, bool) {
		fi, err := os.Stat(filepath.Join(storeRoot, filepath.FromSlash(key)))
		if err != nil {
			return time.Time{}, false
		}
		return fi.ModTime(), true
	}

	// The beamline: write each scan, then its marker; at most o.ahead scans
	// ahead of the last series row.
	type written struct {
		name string
		at   time.Time
	}
	markers := make(chan written, o.steps)
	doneCount := make(chan int, o.steps)
	genErr := make(chan error, 1)
	go func() {
		done := 0
		for i := 0; i < o.steps; i++ {
			for i-done >= o.ahead {
				select {
				case done = <-doneCount:
				case <-nctx.Done():
					return
				}
			}
			name := fmt.Sprintf("scan-%04d", i)
			b := bases[i%len(bases)]                                                  // fluid states (and noise) repeat every 12 steps
			at, err := writeBenchScan(incoming, name, b, 60*float64(i), voxelSize, n) // a scan a minute
			if err != nil {
				genErr <- err
				return
			}
			say("wrote %s (%d³ uint16, %.0f MB)\n", name, n, float64(rep.BytesPerStep)/1e6)
			markers <- written{name, at}
		}
	}()

	pending := map[string]time.Time{}
	markedAt := map[string]time.Time{}
	var first time.Time
	var last time.Time
	tick := time.NewTicker(100 * time.Millisecond)
	defer tick.Stop()
	for len(rep.Results) < o.steps {
		select {
		case w := <-markers:
			pending[w.name] = w.at
			markedAt[w.name] = w.at
			if first.IsZero() {
				first = w.at
			}
		case err := <-genErr:
			return nil, fmt.Errorf("writing scans: %w", err)
		case <-ctx.Done():
			return nil, fmt.Errorf("%d of %d steps done: %w", len(rep.Results), o.steps, ctx.Err())
		case <-tick.C:
		}
		for name, at := range pending {
			step, err := layout.NewStep(benchCampaignName, name)
			if err != nil {
				return nil, err
			}
			rowAt, ok := mtime(campaign.RunResultKey(step, hash))
			if !ok {
				continue
			}
			var lastTile time.Time
			for i := 0; i < tiling.Len(); i++ {
				k, _ := step.TileResult(i, hash)
				if t, ok := mtime(k); ok && t.After(lastTile) {
					lastTile = t
				}
			}
			r := benchStepResult{Step: name, LatencyS: rowAt.Sub(at).Seconds()}
			if !lastTile.IsZero() {
				r.AggregateS = rowAt.Sub(lastTile).Seconds()
			}
			rep.Results = append(rep.Results, r)
			delete(pending, name)
			if rowAt.After(last) {
				last = rowAt
			}
			say("%s: series row %.2f s after its marker\n", name, r.LatencyS)
			doneCount <- len(rep.Results)
		}
	}
	sort.Slice(rep.Results, func(i, j int) bool { return rep.Results[i].Step < rep.Results[j].Step })
	rep.WallS = last.Sub(first).Seconds()
	if rep.WallS > 0 {
		rep.MVoxPerS = float64(rep.VoxelsPerStep) * float64(o.steps) / rep.WallS / 1e6
	}
	lat := make([]float64, len(rep.Results))
	var agg float64
	for i, r := range rep.Results {
		lat[i] = r.LatencyS
		agg += r.AggregateS
	}
	rep.LatencyP50S, rep.LatencyP95S = nearestRank(lat, 50), nearestRank(lat, 95)
	st, err := storeAt(storeRoot)
	if err != nil {
		return nil, err
	}
	rows, err := series.Load(ctx, st, benchCampaignName)
	if err != nil {
		return nil, err
	}
	rep.SeriesRows = len(rows)
	// Detection: marker written → ingest started on the scan (manifest
	// received_at); the watcher polls once a second.
	var detect float64
	for name, at := range markedAt {
		step, err := layout.NewStep(benchCampaignName, name)
		if err != nil {
			return nil, err
		}
		var man campaign.Manifest
		if err := campaign.GetJSON(ctx, st, step.Manifest(), &man); err != nil {
			return nil, err
		}
		detect += max(man.ReceivedAt.Sub(at).Seconds(), 0)
	}
	rep.Stages = append(rep.Stages, benchStage{Role: "ingest", Stage: "detect (marker → start)", Count: float64(o.steps), TotalS: detect, PerStepS: detect / float64(o.steps)})

	// Stage breakdown from the pipeline's own histograms.
	ingest, err := scrapeStageSums("http://"+node.url+"/metrics", "sluice_ingest_stage_duration_seconds")
	if err != nil {
		return nil, err
	}
	for _, s := range sortedKeys(ingest) {
		rep.Stages = append(rep.Stages, benchStage{Role: "ingest", Stage: s, Count: ingest[s][1], TotalS: ingest[s][0], PerStepS: ingest[s][0] / float64(o.steps)})
	}
	urls := []string{"http://" + node.url + "/metrics"}
	if o.procs > 0 {
		urls = urls[:0]
		for _, c := range children {
			urls = append(urls, "http://"+c.http+"/metrics")
		}
	}
	for _, c := range children {
		v, err := scrapeGauge("http://"+c.http+"/metrics", "go_sched_gomaxprocs_threads")
		if err != nil {
			return nil, err
		}
		c.gomaxprocs = int(v)
	}
	work := map[string][2]float64{}
	for _, u := range urls {
		m, err := scrapeStageSums(u, "sluice_tile_stage_duration_seconds")
		if err != nil {
			return nil, err
		}
		for k, v := range m {
			w := work[k]
			work[k] = [2]float64{w[0] + v[0], w[1] + v[1]}
		}
	}
	for _, s := range sortedKeys(work) {
		rep.Stages = append(rep.Stages, benchStage{Role: "worker", Stage: s, Count: work[s][1], TotalS: work[s][0], PerStepS: work[s][0] / float64(o.steps)})
	}
	rep.Stages = append(rep.Stages, benchStage{Role: "aggregator", Stage: "last tile → series row", Count: float64(o.steps), TotalS: agg, PerStepS: agg / float64(o.steps)})

	// Peak memory: the node (this process) now, the worker processes after
	// they exit.
	self := "node: embedded NATS, ingest, aggregator, scan writer"
	if inproc > 0 {
		self += ", workers"
	}
	if kb, err := vmHWM("/proc/self/status"); err == nil {
		rep.Processes = append(rep.Processes, benchProcess{Role: self, PID: os.Getpid(), PeakRSSMB: float64(kb) / 1024, Source: "VmHWM of /proc/self/status (all roles of this process)"})
	}
	nstop()
	node.wg.Wait()
	for i, c := range children {
		kb, err := c.stop()
		if err != nil {
			return nil, err
		}
		rep.Processes = append(rep.Processes, benchProcess{Role: fmt.Sprintf("worker %d", i+1), PID: c.cmd.Process.Pid, PeakRSSMB: float64(kb) / 1024, Source: "getrusage ru_maxrss of the child", GoMaxProcs: c.gomaxprocs})
	}
	children = nil
	if o.keep {
		rep.Data = data
	}
	return rep, nil
}

// writeBenchScan writes a raw uint16 scan of n³ voxels with its header,
// then the marker, and returns when the marker was written. The base scan
// is mirrored to n³ one z-plane at a time, so the writer holds one plane
// besides the base, whatever n.
func writeBenchScan(dir, name string, base *volume.Volume[uint16], t, voxelSize float64, n int) (time.Time, error) {
	b := base.Box.Size()
	mirror := func(i, n int) int { // reflect i into 0..n-1 (…, n-1, n-1, …, 0, 0, 1, …)
		i %= 2 * n
		if i >= n {
			i = 2*n - 1 - i
		}
		return i
	}
	mx := make([]int, n)
	for x := range mx {
		mx[x] = mirror(x, b[2])
	}
	path := filepath.Join(dir, name+".raw")
	f, err := os.Create(path)
	if err != nil {
		return time.Time{}, err
	}
	w := bufio.NewWriterSize(f, 1<<20)
	plane := make([]byte, 2*n*n)
	for z := 0; z < n; z++ {
		bz := mirror(z, b[0])
		for y := 0; y < n; y++ {
			row := base.Pix[(bz*b[1]+mirror(y, b[1]))*b[2]:]
			out := plane[2*y*n : 2*(y+1)*n]
			for x, bx := range mx {
				binary.LittleEndian.PutUint16(out[2*x:], row[bx])
			}
		}
		if _, err := w.Write(plane); err != nil {
			f.Close()
			return time.Time{}, err
		}
	}
	if err := w.Flush(); err != nil {
		f.Close()
		return time.Time{}, err
	}
	if err := f.Close(); err != nil {
		return time.Time{}, err
	}
	ts := t
	h, err := json.Marshal(volio.RawHeader{Shape: []int{n, n, n}, DType: "uint16", ByteOrder: "little",
		VoxelSize: volume.FormatLength(voxelSize), TimeS: &ts})
	if err != nil {
		return time.Time{}, err
	}
	if err := os.WriteFile(path+".sluice.json", h, 0o644); err != nil {
		return time.Time{}, err
	}
	if err := os.WriteFile(path+".done", []byte(fmt.Sprintf("{\"time_s\": %g}\n", t)), 0o644); err != nil {
		return time.Time{}, err
	}
	return time.Now(), nil
}

// benchChild is a `sluice worker` process.
type benchChild struct {
	cmd        *exec.Cmd
	http       string
	waited     bool
	gomaxprocs int
}

// startBenchWorker starts `sluice worker` (this executable) against the
// node's NATS listener and store.
func startBenchWorker(natsURL, store string, concurrency, cores, i int) (*benchChild, error) {
	if natsURL == "" {
		return nil, errors.New("the node exposes no NATS listener for worker processes")
	}
	exe, err := os.Executable()
	if err != nil {
		return nil, err
	}
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return nil, err
	}
	addr := ln.Addr().String()
	ln.Close()
	cmd := exec.Command(exe, "worker", "--nats", natsURL, "--store", store, "--http", addr,
		"--concurrency", strconv.Itoa(concurrency), "--id", fmt.Sprintf("bench-worker-%d", i+1))
	cmd.Stderr = os.Stderr
	if cores > 0 {
		// The Go runtime reads GOMAXPROCS from the environment; the worker
		// sizes its tile-internal goroutines from runtime.GOMAXPROCS.
		cmd.Env = append(os.Environ(), "GOMAXPROCS="+strconv.Itoa(cores))
	}
	if err := cmd.Start(); err != nil {
		return nil, err
	}
	c := &benchChild{cmd: cmd, http: addr}
	// Ready when its /healthz answers.
	for k := 0; k < 300; k++ {
		if r, err := http.Get("http://" + addr + "/healthz"); err == nil {
			r.Body.Close()
			return c, nil
		}
		time.Sleep(100 * time.Millisecond)
	}
	c.stop()
	return nil, fmt.Errorf("worker process %d did not serve %s within 30 s", i+1, addr)
}

// stop ends the worker gracefully (SIGTERM: it drains) and returns its peak
// resident set in KiB (getrusage ru_maxrss, KiB on Linux).
func (c *benchChild) stop() (int64, error) {
	if c.waited {
		return 0, nil
	}
	c.waited = true
	c.cmd.Process.Signal(syscall.SIGTERM)
	err := c.cmd.Wait()
	if c.cmd.ProcessState == nil {
		return 0, err
	}
	ru, ok := c.cmd.ProcessState.SysUsage().(*syscall.Rusage)
	if !ok {
		return 0, errors.New("no resource usage of the worker process")
	}
	return ru.Maxrss, nil
}

// vmHWM reads the peak resident set (KiB) from a /proc/<pid>/status file.
func vmHWM(path string) (int64, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return 0, err
	}
	for _, l := range strings.Split(string(b), "\n") {
		if v, ok := strings.CutPrefix(l, "VmHWM:"); ok {
			return strconv.ParseInt(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(v), "kB")), 10, 64)
		}
	}
	return 0, fmt.Errorf("%s: no VmHWM line", path)
}

// scrapeStageSums reads the _sum and _count of a histogram labelled by
// stage from a Prometheus text exposition: stage → [sum, count].
// fetchMetrics returns a Prometheus text page (at most 16 MiB).
func fetchMetrics(url string) (string, error) {
	r, err := http.Get(url)
	if err != nil {
		return "", err
	}
	defer r.Body.Close()
	b, err := io.ReadAll(io.LimitReader(r.Body, 16<<20))
	return string(b), err
}

// scrapeGauge reads one unlabelled sample from a Prometheus text page.
func scrapeGauge(url, metric string) (float64, error) {
	page, err := fetchMetrics(url)
	if err != nil {
		return 0, err
	}
	for _, l := range strings.Split(page, "\n") {
		if v, ok := strings.CutPrefix(l, metric+" "); ok {
			return strconv.ParseFloat(strings.TrimSpace(v), 64)
		}
	}
	return 0, fmt.Errorf("%s: no %s sample", url, metric)
}

func scrapeStageSums(url, metric string) (map[string][2]float64, error) {
	page, err := fetchMetrics(url)
	if err != nil {
		return nil, err
	}
	out := map[string][2]float64{}
	for _, l := range strings.Split(page, "\n") {
		for k, suffix := range []string{"_sum{", "_count{"} {
			rest, ok := strings.CutPrefix(l, metric+suffix)
			if !ok {
				continue
			}
			labels, value, ok := strings.Cut(rest, "} ")
			if !ok {
				continue
			}
			_, stage, ok := strings.Cut(labels, `stage="`)
			if !ok {
				continue
			}
			stage, _, _ = strings.Cut(stage, `"`)
			v, err := strconv.ParseFloat(strings.TrimSpace(value), 64)
			if err != nil {
				return nil, fmt.Errorf("%s: %q: %w", url, l, err)
			}
			e := out[stage]
			e[k] = v
			out[stage] = e
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%s: no %s", url, metric)
	}
	return out, nil
}

// nearestRank is the p-th percentile of xs by the nearest-rank method: the
// smallest value with at least p % of the values at or below it (common
// practice).
func nearestRank(xs []float64, p float64) float64 {
	if len(xs) == 0 {
		return math.NaN()
	}
	s := append([]float64(nil), xs...)
	sort.Float64s(s)
	k := int(math.Ceil(p / 100 * float64(len(s))))
	return s[min(max(k, 1), len(s))-1]
}

func sortedKeys(m map[string][2]float64) []string {
	ks := make([]string, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	sort.Strings(ks)
	return ks
}

// printBenchCampaign prints the report as tables.
func printBenchCampaign(w io.Writer, r *benchCampaignReport) {
	where := "inside the node"
	if r.Procs > 0 {
		where = fmt.Sprintf("in %d worker processes", r.Procs)
		if r.ProcCores > 0 {
			where += fmt.Sprintf(" of %d core(s) each", r.ProcCores)
		}
	}
	fmt.Fprintf(w, "\n%d steps of %d³ uint16 (%.0f MB each), %d tiles of %d³ (halo %d) per step, %d workers %s, %d CPUs\n",
		r.Steps, r.Size, float64(r.BytesPerStep)/1e6, r.TilesPerStep, r.Tile, r.Halo, r.Workers, where, r.CPUs)
	fmt.Fprintf(w, "series rows: %d\n", r.SeriesRows)
	fmt.Fprintf(w, "throughput: %.2f MVox/s sustained (%.1f s from the first marker to the last series row)\n", r.MVoxPerS, r.WallS)
	fmt.Fprintf(w, "latency marker → series row: p50 %.2f s, p95 %.2f s\n\n", r.LatencyP50S, r.LatencyP95S)
	tw := tabwriter.NewWriter(w, 0, 2, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "role\tstage\tobservations\ttotal s\tper step s\t")
	for _, s := range r.Stages {
		fmt.Fprintf(tw, "%s\t%s\t%.0f\t%.2f\t%.2f\t\n", s.Role, s.Stage, s.Count, s.TotalS, s.PerStepS)
	}
	tw.Flush()
	fmt.Fprintln(w, "(worker stages are summed over tiles processed in parallel)")
	fmt.Fprintln(w)
	tw = tabwriter.NewWriter(w, 0, 2, 2, ' ', 0)
	fmt.Fprintln(tw, "process\tpid\tpeak RSS MB\tsource")
	for _, p := range r.Processes {
		fmt.Fprintf(tw, "%s\t%d\t%.0f\t%s\n", p.Role, p.PID, p.PeakRSSMB, p.Source)
	}
	tw.Flush()
	if r.Data != "" {
		fmt.Fprintf(w, "\ndata kept in %s\n", r.Data)
	}
}
