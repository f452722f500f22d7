package main

// Overnight reprocessing. A run is one parameter hash applied to a
// campaign's stored steps; every run keeps its own results under
// steps/<s>/runs/<hash>/ and runs/<hash>/, so runs never overwrite each
// other and stay comparable (`sluice compare`). `sluice reprocess` writes
// the run's configuration, then, step by step, skips what is already done
// (a run result under the hash, planned by this software version), reuses
// an existing plan, and queues as batch work only the tiles whose results
// are missing. Rerunning it after a crash, or twice, therefore queues
// exactly the missing work; the aggregator's upserts make the series the
// same bytes as an uninterrupted run. `sluice switch` makes a run the
// campaign's current one.

import (
	"context"
	"encoding/csv"
	"errors"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"sluice/internal/usermsg"
	"sluice/pkg/campaign"
	"sluice/pkg/events"
	"sluice/pkg/layout"
	"sluice/pkg/queue"
	"sluice/pkg/series"
	"sluice/pkg/store"
	"sluice/pkg/telemetry"
	"sluice/pkg/volio"
	"sluice/proto/sluicepb"
	"sluice/services/aggregator"
	"sluice/services/ingest"
)

// reprocessRequest is what `sluice reprocess` was asked to do.
type reprocessRequest struct {
	Campaign  string
	Steps     string     // selection such as "10-250,300" (numbers at the end of step names); "" = all
	Sets      []string   // dotted key=value assignments
	Config    string     // config file replacing the campaign's current config
	From      string     // directory of volumes to ingest as steps first
	Times     string     // CSV file of step,time_s for the volumes of From
	stepTimes *stepTimes // Times, read
	ReadOpt   volio.Options
	Workers   int // pass-1 goroutines (0 = all CPUs)
}

// runSummary is what startRun found and queued.
type runSummary struct {
	Hash     string
	Current  bool     // the run is the campaign's current one
	Steps    []string // selected steps in campaign order (time, then name)
	Done     []string // already complete under the hash with this software version
	Queued   []string // steps with tiles queued
	Tiles    int      // tiles queued
	Complete []string // steps with every tile stored but no result yet
	Redone   []string // results of another software version, cleared to be redone
	Ingested []string // steps ingested from --from
	Rejected []error  // scans of --from not ingested (an unusable marker)
}

// runStore is the object storage reprocessing needs.
type runStore interface {
	Get(ctx context.Context, key string) ([]byte, error)
	Put(ctx context.Context, key string, data []byte) error
	List(ctx context.Context, prefix string) ([]string, error)
	Dirs(ctx context.Context, prefix string) ([]string, error)
	Stat(ctx context.Context, key string) (store.Info, error)
	Delete(ctx context.Context, key string) error
}

// stepKeys is what the store holds of one step under one parameter hash.
type stepKeys struct {
	manifest, plan, result bool
	tiles                  map[int]bool
}

// scanStepWorkers bounds the store requests in flight while scanSteps reads
// steps (one S3 round trip each).
const scanStepWorkers = 8

// scanSteps finds the campaign's steps one directory level at a time and
// reads, per step, only what tells its state under hash: the manifest, the
// plan and run result of hash, and the tile results of hash. It never lists
// the chunks of the step's Zarr arrays (a campaign of 1000 steps of 10⁹
// voxels holds millions of them).
func scanSteps(ctx context.Context, st runStore, c layout.Campaign, hash string) (map[string]*stepKeys, error) {
	names, err := st.Dirs(ctx, c.Steps())
	if err != nil {
		return nil, fmt.Errorf("campaign %s: listing steps: %w", c.Name(), err)
	}
	exists := func(key string) (bool, error) { return store.Exists(ctx, st, key) }
	read := func(s string) (*stepKeys, error) {
		dir := c.Steps() + s + "/"
		sk := &stepKeys{tiles: map[int]bool{}}
		var err error
		if sk.manifest, err = exists(dir + "manifest.json"); err != nil {
			return nil, err
		}
		if sk.plan, err = exists(dir + "plans/" + hash + ".json"); err != nil {
			return nil, err
		}
		if sk.result, err = exists(dir + "runs/" + hash + "/result.json"); err != nil {
			return nil, err
		}
		tiles, err := st.List(ctx, dir+"tiles/"+hash+"/")
		if err != nil {
			return nil, err
		}
		for _, k := range tiles {
			rest := strings.TrimPrefix(k, dir+"tiles/"+hash+"/")
			if !strings.HasSuffix(rest, ".json") || strings.Contains(rest, "/") {
				continue
			}
			if n, err := strconv.Atoi(strings.TrimSuffix(rest, ".json")); err == nil {
				sk.tiles[n] = true
			}
		}
		return sk, nil
	}
	var (
		mu   sync.Mutex
		out  = map[string]*stepKeys{}
		errs []error
		wg   sync.WaitGroup
		sem  = make(chan struct{}, scanStepWorkers)
	)
	for _, s := range names {
		if _, err := c.Step(s); err != nil {
			continue // not a step directory
		}
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer func() { <-sem; wg.Done() }()
			sk, err := read(s)
			mu.Lock()
			defer mu.Unlock()
			if err != nil {
				errs = append(errs, fmt.Errorf("campaign %s: reading step %s: %w", c.Name(), s, err))
				return
			}
			out[s] = sk
		}()
	}
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	return out, nil
}

// stepSelection is a --steps value: numbers and ranges, "10-250,300,400-".
type stepSelection [][2]int

func parseSteps(s string) (stepSelection, error) {
	if strings.TrimSpace(s) == "" {
		return nil, nil
	}
	var sel stepSelection
	for _, part := range strings.Split(s, ",") {
		part = strings.TrimSpace(part)
		lo, hi, isRange := strings.Cut(part, "-")
		a, err := strconv.Atoi(lo)
		if err != nil || a < 0 {
			return nil, fmt.Errorf("--steps %q: %q is not a step number or range N-M", s, part)
		}
		b := a
		if isRange {
			if hi == "" {
				b = int(^uint(0) >> 1)
			} else if b, err = strconv.Atoi(hi); err != nil || b < a {
				return nil, fmt.Errorf("--steps %q: %q is not a range N-M with N ≤ M", s, part)
			}
		}
		sel = append(sel, [2]int{a, b})
	}
	return sel, nil
}

// stepNumber returns the number at the end of a step name (scan-0042 → 42).
func stepNumber(name string) (int, bool) {
	i := len(name)
	for i > 0 && name[i-1] >= '0' && name[i-1] <= '9' {
		i--
	}
	if i == len(name) {
		return 0, false
	}
	n, err := strconv.Atoi(name[i:])
	return n, err == nil
}

func (sel stepSelection) has(name string) bool {
	if sel == nil {
		return true
	}
	n, ok := stepNumber(name)
	if !ok {
		return false
	}
	for _, r := range sel {
		if n >= r[0] && n <= r[1] {
			return true
		}
	}
	return false
}

// archiveVolumes lists the volumes of a directory in name order: every entry
// but dot files, markers (scan_0042.raw.done or scan_0042.done, whose JSON
// may give the time) and header side files (<scan>.sluice.json). A step's
// time comes from times (--times) first, else from its marker; a volume
// whose marker is unusable (not the documented JSON, or ambiguous) is
// returned in rejected, not given t = 0. A row of times that names no
// volume of the directory is an error (a typo would otherwise leave a step
// without the time it was meant to get).
func archiveVolumes(dir string, times *stepTimes) (vols []ingest.Request, rejected []error, err error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, nil, fmt.Errorf("--from %s: %w", dir, err)
	}
	names := map[string]bool{}
	for _, e := range ents {
		names[e.Name()] = true
	}
	used := map[string]bool{}
	for _, e := range ents {
		name := e.Name()
		if strings.HasPrefix(name, ".") || strings.HasSuffix(name, ingest.Marker) || strings.HasSuffix(name, ".sluice.json") {
			continue
		}
		path := filepath.Join(dir, name)
		step, err := ingest.StepName(name)
		if err != nil {
			return nil, nil, err
		}
		req := ingest.Request{Step: step, Path: path, Priority: sluicepb.Priority_PRIORITY_BATCH}
		if r, ok := times.row(step); ok {
			req.TimeS, req.HasTime, req.TimeFrom = r.t, true, "--times"
			used[step] = true
		} else {
			marker, err := ingest.MarkerFor(names, name)
			if err == nil && marker != "" {
				req.TimeFrom = "marker"
				req.TimeS, req.HasTime, err = ingest.ReadMarker(filepath.Join(dir, marker))
			}
			if err != nil {
				rejected = append(rejected, fmt.Errorf("%s: %w", path, err))
				continue
			}
		}
		vols = append(vols, req)
	}
	if times != nil {
		for step, r := range times.rows {
			if !used[step] {
				return nil, nil, fmt.Errorf("--times %s:%d: step %s matches no volume in --from %s", times.file, r.line, step, dir)
			}
		}
	}
	return vols, rejected, nil
}

// stepTimes is a --times file: the experiment time of each step.
type stepTimes struct {
	file string
	rows map[string]timeRow
}

type timeRow struct {
	t    float64
	line int
}

func (s *stepTimes) row(step string) (timeRow, bool) {
	if s == nil {
		return timeRow{}, false
	}
	r, ok := s.rows[step]
	return r, ok
}

// readStepTimes reads a CSV file with the header step,time_s and one row
// per step: the step name (or the scan's file name, from which the step
// name is derived) and its experiment time in seconds, finite and ≥ 0.
// Lines starting with # are comments. Every error names the file and line.
func readStepTimes(path string) (*stepTimes, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("--times %w", err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comment, r.FieldsPerRecord, r.TrimLeadingSpace = '#', -1, true
	st := &stepTimes{file: path, rows: map[string]timeRow{}}
	header := true
	for {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("--times %w", err) // csv.ParseError carries file position
		}
		line, _ := r.FieldPos(0)
		at := fmt.Sprintf("--times %s:%d", path, line)
		for i := range rec {
			rec[i] = strings.TrimSpace(rec[i])
		}
		if header {
			header = false
			if len(rec) != 2 || !strings.EqualFold(rec[0], "step") || !strings.EqualFold(rec[1], "time_s") {
				return nil, fmt.Errorf("%s: the first line must be the header step,time_s, got %q", at, strings.Join(rec, ","))
			}
			continue
		}
		if len(rec) != 2 {
			return nil, fmt.Errorf("%s: want 2 fields step,time_s, got %d", at, len(rec))
		}
		step, err := ingest.StepName(rec[0])
		if err != nil || rec[0] == "" {
			return nil, fmt.Errorf("%s: %q is not a step name", at, rec[0])
		}
		t, err := strconv.ParseFloat(rec[1], 64)
		switch {
		case err != nil:
			return nil, fmt.Errorf("%s: time_s %q is not a number of seconds", at, rec[1])
		case math.IsNaN(t) || math.IsInf(t, 0):
			return nil, fmt.Errorf("%s: time_s %q is not finite", at, rec[1])
		case t < 0:
			return nil, fmt.Errorf("%s: time_s %g is negative", at, t)
		}
		if prev, dup := st.rows[step]; dup {
			return nil, fmt.Errorf("%s: step %s repeated (first on line %d)", at, step, prev.line)
		}
		st.rows[step] = timeRow{t: t, line: line}
	}
	if header {
		return nil, fmt.Errorf("--times %s: empty; want the header step,time_s and one row per step", path)
	}
	return st, nil
}

// listSome joins the first n names and says how many more there are.
func listSome(names []string, n int) string {
	if len(names) <= n {
		return strings.Join(names, ", ")
	}
	return fmt.Sprintf("%s and %d more", strings.Join(names[:n], ", "), len(names)-n)
}

// noTime lists the volumes that have no experiment time from --times, a
// marker or their own header. A fabricated t = 0 would put them all at the
// start of the campaign and date its events wrongly, so startRun refuses
// them; volumes whose header cannot be read are left to the ingest, which
// reports them.
func noTime(vols []ingest.Request, opt volio.Options) []string {
	var out []string
	for _, v := range vols {
		if v.HasTime {
			continue
		}
		if h, err := volio.ReadHeader(v.Path, opt); err == nil && !h.HasTime {
			out = append(out, filepath.Base(v.Path))
		}
	}
	return out
}

// runConfig works out the run's configuration: the campaign's current
// configuration (or --config), with --set applied.
func runConfig(rec campaign.Record, req reprocessRequest, created bool) (campaign.Config, error) {
	base := rec.Config
	if req.Config != "" && !created {
		c, err := campaign.Load(req.Config)
		if err != nil {
			return base, err
		}
		base = c
	}
	return base.Set(req.Sets)
}

// startRun records the run and queues its missing work; see the file
// comment. pub receives batch tile tasks.
func startRun(ctx context.Context, st runStore, pub ingest.Publisher, req reprocessRequest, log *slog.Logger) (runSummary, error) {
	var sum runSummary
	c, err := layout.NewCampaign(req.Campaign)
	if err != nil {
		return sum, err
	}
	sel, err := parseSteps(req.Steps)
	if err != nil {
		return sum, err
	}
	created := false
	rec, err := campaign.LoadRecord(ctx, st, c)
	if err != nil && req.From != "" {
		// An archive directory for a campaign the store does not know yet:
		// the campaign is created with --config (or the defaults).
		cfg, cerr := loadConfig(req.Config)
		if cerr != nil {
			return sum, cerr
		}
		if rec, err = ingest.EnsureCampaign(ctx, st, c.Name(), cfg, Version, ""); err != nil {
			return sum, err
		}
		created = true
	}
	if err != nil {
		return sum, err
	}
	cfg, err := runConfig(rec, req, created)
	if err != nil {
		return sum, fmt.Errorf("campaign %s: %w", c.Name(), err)
	}
	hash := cfg.Hash()
	sum.Hash, sum.Current = hash, hash == rec.Current
	req.ReadOpt = withDataset(req.ReadOpt, cfg)
	if err := campaign.PutJSON(ctx, st, campaign.RunConfigKey(c, hash), cfg); err != nil {
		return sum, fmt.Errorf("campaign %s: %w", c.Name(), err)
	}
	if err := addRun(ctx, st, c, hash); err != nil {
		return sum, err
	}

	if req.From != "" {
		vols, rejected, err := archiveVolumes(req.From, req.stepTimes)
		if err != nil {
			return sum, fmt.Errorf("campaign %s: %w", c.Name(), err)
		}
		sum.Rejected = rejected
		// Steps stored before keep their manifest (and time); only the new
		// ones must each have a time before anything is stored.
		var todo []ingest.Request
		for _, v := range vols {
			step, err := c.Step(v.Step)
			if err != nil {
				return sum, err
			}
			if ok, err := store.Exists(ctx, st, step.Manifest()); err != nil || ok {
				if err != nil {
					return sum, err
				}
				continue // ingested before: the manifest is written last
			}
			todo = append(todo, v)
		}
		if missing := noTime(todo, req.ReadOpt); len(missing) > 0 {
			return sum, fmt.Errorf("--from %s: %d scans have no experiment time (%s): give --times FILE (CSV step,time_s), a marker {\"time_s\": …} beside each scan, or a time in the scan's header", req.From, len(missing), listSome(missing, 3))
		}
		ing := &ingest.Ingester{Store: st, Log: log, Version: Version, ReadOpt: req.ReadOpt}
		for _, v := range todo {
			v.Campaign = c.Name()
			if _, err := ing.StoreStep(ctx, v); err != nil {
				return sum, fmt.Errorf("campaign %s step %s: %s: %w", c.Name(), v.Step, v.Path, err)
			}
			sum.Ingested = append(sum.Ingested, v.Step)
		}
	}

	steps, err := scanSteps(ctx, st, c, hash)
	if err != nil {
		return sum, err
	}
	type stepMan struct {
		name string
		man  campaign.Manifest
	}
	var chosen []stepMan
	for name, sk := range steps {
		if !sk.manifest || !sel.has(name) {
			continue
		}
		step, _ := c.Step(name)
		var man campaign.Manifest
		if err := campaign.GetJSON(ctx, st, step.Manifest(), &man); err != nil {
			return sum, fmt.Errorf("campaign %s step %s: %w", c.Name(), name, err)
		}
		chosen = append(chosen, stepMan{name, man})
	}
	sort.Slice(chosen, func(i, j int) bool {
		if chosen[i].man.TimeS != chosen[j].man.TimeS {
			return chosen[i].man.TimeS < chosen[j].man.TimeS
		}
		return chosen[i].name < chosen[j].name
	})
	if len(chosen) == 0 {
		return sum, fmt.Errorf("campaign %s: no stored steps match --steps %q", c.Name(), req.Steps)
	}
	for _, sm := range chosen {
		sum.Steps = append(sum.Steps, sm.name)
		step, _ := c.Step(sm.name)
		sk := steps[sm.name]
		var plan campaign.Plan
		havePlan := false
		if sk.plan {
			if err := campaign.GetJSON(ctx, st, campaign.PlanKey(step, hash), &plan); err != nil {
				return sum, fmt.Errorf("campaign %s step %s: %w", c.Name(), sm.name, err)
			}
			havePlan = plan.Version == Version
		}
		if sk.result && havePlan {
			sum.Done = append(sum.Done, sm.name)
			continue
		}
		if sk.plan && !havePlan {
			// Planned (and perhaps done) by another software version: its
			// tiles and result are cleared and the step is redone.
			if err := clearRunStep(ctx, st, step, hash); err != nil {
				return sum, err
			}
			sk.tiles, sk.result = map[int]bool{}, false
			sum.Redone = append(sum.Redone, sm.name)
		}
		if !havePlan {
			if plan, err = ingest.PlanStep(ctx, st, sm.man, cfg, req.Workers, Version); err != nil {
				return sum, fmt.Errorf("campaign %s step %s: pass 1: %w", c.Name(), sm.name, err)
			}
			plan.Priority = "batch"
			if err := campaign.PutJSON(ctx, st, campaign.PlanKey(step, hash), plan); err != nil {
				return sum, fmt.Errorf("campaign %s step %s: %w", c.Name(), sm.name, err)
			}
		}
		var missing []int
		for i := 0; i < plan.Tiles; i++ {
			if !sk.tiles[i] {
				missing = append(missing, i)
			}
		}
		if len(missing) == 0 {
			sum.Complete = append(sum.Complete, sm.name)
			continue
		}
		labels := campaign.RunLabelsKey(step, hash)
		if sum.Current {
			labels = step.Labels()
		}
		if err := ingest.PublishTileSet(ctx, pub, sm.man, plan, labels, sluicepb.Priority_PRIORITY_BATCH, nil, missing); err != nil {
			return sum, err
		}
		sum.Queued = append(sum.Queued, sm.name)
		sum.Tiles += len(missing)
	}
	return sum, nil
}

// clearRunStep removes a step's tile results and run result under hash.
func clearRunStep(ctx context.Context, st runStore, step layout.Step, hash string) error {
	prefix, err := step.Tiles(hash)
	if err != nil {
		return err
	}
	keys, err := st.List(ctx, prefix)
	if err != nil {
		return fmt.Errorf("%s: %w", step.Dir(), err)
	}
	for _, k := range append(keys, campaign.RunResultKey(step, hash)) {
		if err := st.Delete(ctx, k); err != nil {
			return fmt.Errorf("%s: %w", k, err)
		}
	}
	return nil
}

// addRun adds hash to campaign.json's runs (the current run is untouched).
func addRun(ctx context.Context, st runStore, c layout.Campaign, hash string) error {
	rec, err := campaign.LoadRecord(ctx, st, c)
	if err != nil {
		return err
	}
	for _, r := range rec.Runs {
		if r == hash {
			return nil
		}
	}
	rec.Runs = append(rec.Runs, hash)
	return campaign.PutJSON(ctx, st, c.Config(), rec)
}

// resolveRun turns "current", a full hash or a unique hash prefix into a
// run of the campaign.
func resolveRun(rec campaign.Record, s string) (string, error) {
	if s == "current" {
		return rec.Current, nil
	}
	var found []string
	for _, r := range rec.Runs {
		if r == s {
			return r, nil
		}
		if s != "" && strings.HasPrefix(r, s) {
			found = append(found, r)
		}
	}
	switch len(found) {
	case 1:
		return found[0], nil
	case 0:
		return "", fmt.Errorf("campaign %s has no run %q (runs: %s)", rec.Name, s, strings.Join(rec.Runs, ", "))
	}
	return "", fmt.Errorf("campaign %s: run prefix %q is ambiguous (%s)", rec.Name, s, strings.Join(found, ", "))
}

// switchSummary reports what switchRun changed.
type switchSummary struct {
	From, To string
	Rows     int
	Dropped  []string // steps without a result in the run (with partial)
	// RigLog, when not empty, says why the rig log could not be applied to
	// the series (its columns are then null).
	RigLog string
}

// switchRun makes hash the campaign's current run: campaign.json first (so
// an aggregator completing further steps of the run writes the contract
// paths), then each step's result.json, then the campaign series and the
// events from the run's series. Without partial, every stored step must
// have a result in the run. Label arrays stay where each run wrote them.
func switchRun(ctx context.Context, st runStore, name, run string, partial bool) (switchSummary, error) {
	var sum switchSummary
	c, err := layout.NewCampaign(name)
	if err != nil {
		return sum, err
	}
	rec, err := campaign.LoadRecord(ctx, st, c)
	if err != nil {
		return sum, err
	}
	hash, err := resolveRun(rec, run)
	if err != nil {
		return sum, err
	}
	sum.From, sum.To = rec.Current, hash
	var cfg campaign.Config
	if err := campaign.GetJSON(ctx, st, campaign.RunConfigKey(c, hash), &cfg); err != nil {
		return sum, fmt.Errorf("campaign %s run %s: %w", name, hash, err)
	}
	jk, _ := campaign.RunSeriesKeys(c, hash)
	var rows []series.Row
	if b, err := st.Get(ctx, jk); err == nil {
		if rows, err = series.Decode(b); err != nil {
			return sum, fmt.Errorf("campaign %s: %s: %w", name, jk, err)
		}
	} else if !errors.Is(err, fs.ErrNotExist) {
		return sum, err
	}
	steps, err := scanSteps(ctx, st, c, hash)
	if err != nil {
		return sum, err
	}
	var done []series.Row
	for _, r := range rows {
		if sk := steps[r.Step]; sk != nil && sk.result {
			done = append(done, r)
		}
	}
	var names []string
	for s, sk := range steps {
		if sk.manifest && !sk.result {
			names = append(names, s)
		}
	}
	sort.Strings(names)
	if len(names) > 0 && !partial {
		return sum, fmt.Errorf("campaign %s: run %s has no result for %d of %d steps (first %s); finish it with `sluice reprocess` or pass --partial",
			name, hash, len(names), len(names)+len(done), names[0])
	}
	sum.Dropped, sum.Rows = names, len(done)
	rec.Current, rec.Config = hash, cfg
	if err := campaign.PutJSON(ctx, st, c.Config(), rec); err != nil {
		return sum, err
	}
	for s, sk := range steps {
		if !sk.manifest {
			continue
		}
		step, _ := c.Step(s)
		if !sk.result {
			if err := st.Delete(ctx, step.Result()); err != nil {
				return sum, fmt.Errorf("campaign %s step %s: %w", name, s, err)
			}
			continue
		}
		b, err := st.Get(ctx, campaign.RunResultKey(step, hash))
		if err != nil {
			return sum, fmt.Errorf("campaign %s step %s: %w", name, s, err)
		}
		if err := st.Put(ctx, step.Result(), b); err != nil {
			return sum, fmt.Errorf("campaign %s step %s: %w", name, s, err)
		}
	}
	// The experiment-log columns as the new current run reads the stored
	// rig log (its own rig_log mapping, offset and interpolation).
	if err := campaign.ApplyRigLog(ctx, st, c, cfg.RigLog, done); err != nil {
		sum.RigLog = usermsg.Clean(err.Error(), "")
	}
	if err := series.Save(ctx, st, name, done); err != nil {
		return sum, err
	}
	opt := events.Defaults()
	if o := rec.Config.EventOptions(); o.Validate() == nil {
		opt = o
	}
	evs, err := events.Detect(done, opt)
	if err != nil {
		return sum, fmt.Errorf("campaign %s: events: %w", name, err)
	}
	return sum, campaign.PutJSON(ctx, st, campaign.EventsKey(c), evs)
}

// reprocessNode is the embedded node reprocess runs when no --nats is
// given: embedded NATS and local store under --data, workers, aggregator.
type reprocessNode struct {
	allInOne
	q   *queue.Queue
	agg *aggregator.Aggregator
}

func startReprocessNode(ctx context.Context, nf nodeFlags, st store.Store, workers int, log *slog.Logger) (*reprocessNode, error) {
	if err := os.MkdirAll(nf.data, 0o755); err != nil {
		return nil, err
	}
	q, srv, err := nf.openQueue(ctx, true, log)
	if err != nil {
		return nil, err
	}
	reg := registry()
	agg, am, _, err := newAggregator(ctx, st, q, reg, log)
	if err != nil {
		q.Close()
		if srv != nil {
			srv.Shutdown()
		}
		return nil, err
	}
	if _, err := serveHTTP(ctx, nf, nil, reg, nil, log); err != nil {
		return nil, err
	}
	g := newRunGroup(ctx)
	n := &reprocessNode{q: q, agg: agg}
	n.stopping = g.Context().Done()
	g.Go("aggregator", func(ctx context.Context) error { return runAggregator(ctx, q, agg, am, log) })
	host, _ := os.Hostname()
	id := fmt.Sprintf("%s:%d/reprocess", host, os.Getpid())
	g.Go("tile workers", func(ctx context.Context) error {
		return runWorkers(ctx, q, st, telemetry.NewWorker(reg), id, workers, log)
	})
	n.wg.Add(1)
	go func() {
		defer n.wg.Done()
		n.err = g.Wait()
		q.Close()
		if srv != nil {
			srv.Shutdown()
		}
	}()
	return n, nil
}

// failure returns the error that stopped the node, or nil while it runs or
// after an orderly stop.
func (n *reprocessNode) failure() error {
	select {
	case <-n.stopping:
		n.wg.Wait()
		return n.err
	default:
		return nil
	}
}

// waitRun follows a run until every selected step is done or failed, and
// returns the failed steps with their reasons.
func waitRun(ctx context.Context, st runStore, q *queue.Queue, c layout.Campaign, sum runSummary, since time.Time, bar *progressBar, nodeErr func() error) (map[string]string, error) {
	done := map[string]bool{}
	for _, s := range sum.Done {
		done[s] = true
	}
	failed := map[string]string{}
	jk, _ := campaign.RunSeriesKeys(c, sum.Hash)
	total := len(sum.Steps)
	lastDL := time.Time{}
	for {
		if b, err := st.Get(ctx, jk); err == nil {
			rows, _ := series.Decode(b)
			for _, r := range rows {
				if done[r.Step] {
					continue
				}
				step, err := c.Step(r.Step)
				if err != nil {
					continue
				}
				// The run result is the step's commit marker (a row of an
				// older software version may still be in the series).
				if ok, _ := store.Exists(ctx, st, campaign.RunResultKey(step, sum.Hash)); ok {
					done[r.Step] = true
				}
			}
		}
		if q != nil && time.Since(lastDL) > 3*time.Second {
			lastDL = time.Now()
			if dls, err := q.DeadLetters(ctx, c.Name()); err == nil {
				for _, dl := range dls {
					if dl.Task == nil || dl.Task.ParamHash != sum.Hash || done[dl.Task.Step] || (dl.At != nil && dl.At.AsTime().Before(since)) {
						continue
					}
					failed[dl.Task.Step] = fmt.Sprintf("tile %d: %s", dl.Task.Tile, dl.Reason)
				}
			}
		}
		n := 0
		for _, s := range sum.Steps {
			if done[s] {
				n++
			}
		}
		bar.update(int64(n), int64(total))
		if n+len(failed) >= total {
			return failed, nil
		}
		if nodeErr != nil {
			if err := nodeErr(); err != nil {
				return failed, err
			}
		}
		select {
		case <-ctx.Done():
			return failed, ctx.Err()
		case <-time.After(250 * time.Millisecond):
		}
	}
}

// runReprocess is `sluice reprocess`.
func runReprocess(args []string) int {
	fs := flag.NewFlagSet("reprocess", flag.ContinueOnError)
	var nf nodeFlags
	var in inputFlags
	nf.register(fs, withEmbedded|withStore|withNATS|withHTTP|withPolicy, "")
	in.register(fs)
	var req reprocessRequest
	fs.StringVar(&req.Steps, "steps", "", "steps to reprocess by the number ending their name: `10-250,300,400-` (default all)")
	fs.Func("set", "change one parameter, `key=value` with a dotted YAML key (segment.threshold=fixed, segment.fixed=[18000,30000]); repeatable", func(s string) error {
		req.Sets = append(req.Sets, s)
		return nil
	})
	fs.StringVar(&req.Config, "config", "", "campaign config `file` to start from instead of the current one (for a new campaign with --from: its config)")
	fs.StringVar(&req.From, "from", "", "ingest the volumes of `DIR` as steps first (steps already stored are kept)")
	fs.StringVar(&req.Times, "times", "", "CSV `FILE` with the header step,time_s giving each --from volume's experiment time in seconds (wins over markers and headers)")
	noWait := fs.Bool("no-wait", false, "queue the work and return (with --nats; the embedded node stops when reprocess returns)")
	doSwitch := fs.Bool("switch", false, "make the run the campaign's current one when all its steps are done")
	workers := fs.Int("workers", runtime.GOMAXPROCS(0), "tile workers of the embedded node")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if len(pos) != 1 {
		return fail(exitBadInput, "reprocess: give exactly one CAMPAIGN")
	}
	req.Campaign = pos[0]
	ropt, err := in.options()
	if err != nil {
		return fail(exitBadInput, "reprocess: %v", err)
	}
	if req.Times != "" {
		if req.From == "" {
			return fail(exitBadInput, "reprocess: --times gives the times of --from volumes; stored steps keep theirs (give --from DIR)")
		}
		if req.stepTimes, err = readStepTimes(req.Times); err != nil {
			return fail(exitBadInput, "reprocess: %v", err)
		}
	}
	req.ReadOpt = ropt
	ctx, stop := signalContext()
	defer stop()
	log := logger()
	if nf.nats == "" {
		if err := os.MkdirAll(nf.data, 0o755); err != nil {
			return fail(exitBadInput, "reprocess: %v", err)
		}
	}
	st, err := nf.openStore(ctx)
	if err != nil {
		return fail(exitBadInput, "reprocess: %v", err)
	}
	var q *queue.Queue
	var node *reprocessNode
	nctx, nstop := context.WithCancel(ctx)
	defer nstop()
	if nf.nats == "" {
		if node, err = startReprocessNode(nctx, nf, st, *workers, log); err != nil {
			return fail(exitBadInput, "reprocess: %v", err)
		}
		q = node.q
		defer func() { nstop(); node.wg.Wait() }()
	} else {
		nf.policyRole = queue.PolicyBystander // queues tasks, works none
		if q, _, err = nf.openQueue(ctx, false, log); err != nil {
			return fail(exitBadInput, "reprocess: %v", err)
		}
		defer q.Close()
	}
	t0 := time.Now()
	sum, err := startRun(ctx, st, taskPublisher{q}, req, log)
	if err != nil {
		return fail(exitBadInput, "reprocess: %v", err)
	}
	c, _ := layout.NewCampaign(req.Campaign)
	fmt.Fprintf(stdout, "run %s of campaign %s%s: %d steps selected, %d already done, %d tiles queued for %d steps",
		sum.Hash, req.Campaign, map[bool]string{true: " (current)", false: ""}[sum.Current], len(sum.Steps), len(sum.Done), sum.Tiles, len(sum.Queued))
	if len(sum.Ingested) > 0 {
		fmt.Fprintf(stdout, ", %d ingested from %s", len(sum.Ingested), req.From)
	}
	if len(sum.Redone) > 0 {
		fmt.Fprintf(stdout, ", %d redone (other software version)", len(sum.Redone))
	}
	if len(sum.Rejected) > 0 {
		fmt.Fprintf(stdout, ", %d scans of %s rejected", len(sum.Rejected), req.From)
	}
	fmt.Fprintln(stdout)
	for _, err := range sum.Rejected {
		fmt.Fprintln(os.Stderr, "sluice: "+userMessage(fmt.Sprintf("reprocess: scan not ingested: %v", err)))
	}
	// rejectedExit ends a run that went through with the scans it could
	// take: exit 2, since part of the input was refused.
	rejectedExit := func() int {
		return fail(exitBadInput, "reprocess: campaign %s: %d scans of %s rejected (see above); the other steps were processed", req.Campaign, len(sum.Rejected), req.From)
	}
	// Steps whose tiles are all stored but whose result is missing (a crash
	// between the last tile and the step's completion): complete them.
	for _, s := range sum.Complete {
		if node != nil {
			if _, err := node.agg.CompleteStep(ctx, req.Campaign, s, sum.Hash); err != nil {
				return fail(exitFailure, "reprocess: campaign %s step %s: %v", req.Campaign, s, err)
			}
			continue
		}
		step, _ := c.Step(s)
		var plan campaign.Plan
		if err := campaign.GetJSON(ctx, st, campaign.PlanKey(step, sum.Hash), &plan); err != nil {
			return fail(exitFailure, "reprocess: campaign %s step %s: %v", req.Campaign, s, err)
		}
		rk, _ := step.TileResult(plan.Tiles-1, sum.Hash)
		if _, err := q.PublishResult(ctx, &sluicepb.TileDone{Campaign: req.Campaign, Step: s, Tile: int32(plan.Tiles - 1),
			TileCount: int32(plan.Tiles), ParamHash: sum.Hash, ResultKey: rk}); err != nil {
			return fail(exitFailure, "reprocess: campaign %s step %s: %v", req.Campaign, s, err)
		}
	}
	if *noWait {
		if len(sum.Rejected) > 0 {
			return rejectedExit()
		}
		return exitOK
	}
	bar := newProgressBar(os.Stderr, "reprocess "+req.Campaign+" "+sum.Hash[:8])
	var nodeErr func() error
	if node != nil {
		nodeErr = node.failure
	}
	failed, err := waitRun(ctx, st, q, c, sum, t0, bar, nodeErr)
	bar.done()
	if err != nil {
		return fail(exitFailure, "reprocess: campaign %s run %s: %v", req.Campaign, sum.Hash, err)
	}
	el := time.Since(t0).Seconds()
	worked := len(sum.Steps) - len(sum.Done) - len(failed)
	fmt.Fprintf(stdout, "run %s: %d of %d steps done, %d failed; %d steps processed in %.1f s (%.2f steps/s)\n",
		sum.Hash, len(sum.Steps)-len(failed), len(sum.Steps), len(failed), worked, el, float64(worked)/max(el, 1e-9))
	if len(failed) > 0 {
		names := make([]string, 0, len(failed))
		for s := range failed {
			names = append(names, s)
		}
		sort.Strings(names)
		for _, s := range names {
			fmt.Fprintf(stdout, "  failed: step %s: %s\n", s, usermsg.Clean(failed[s], "", s))
		}
		return fail(exitFailure, "reprocess: campaign %s run %s: %d steps failed (see `sluice status %s`)", req.Campaign, sum.Hash, len(failed), req.Campaign)
	}
	if *doSwitch && !sum.Current {
		s, err := switchRun(ctx, st, req.Campaign, sum.Hash, false)
		if err != nil {
			return fail(exitFailure, "reprocess: %v", err)
		}
		fmt.Fprintf(stdout, "campaign %s now uses run %s (was %s): %d series rows\n", req.Campaign, s.To, s.From, s.Rows)
		if s.RigLog != "" {
			fmt.Fprintf(stdout, "rig log not applied: %s\n", s.RigLog)
		}
	}
	if len(sum.Rejected) > 0 {
		return rejectedExit()
	}
	return exitOK
}

// runSwitch is `sluice switch`.
func runSwitch(args []string) int {
	fs := flag.NewFlagSet("switch", flag.ContinueOnError)
	var cf campaignFlags
	cf.register(fs)
	run := fs.String("run", "", "parameter `hash` (or unique prefix, or \"current\") of the run to make current")
	partial := fs.Bool("partial", false, "allow a run without results for every stored step (those steps leave the series)")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if len(pos) != 1 || *run == "" {
		return fail(exitBadInput, "switch: usage: sluice switch CAMPAIGN --run HASH")
	}
	ctx, stop := signalContext()
	defer stop()
	st, err := cf.open(ctx)
	if err != nil {
		return fail(exitBadInput, "switch: %v", err)
	}
	s, err := switchRun(ctx, st, pos[0], *run, *partial)
	if err != nil {
		return fail(exitFailure, "switch: %v", err)
	}
	fmt.Fprintf(stdout, "campaign %s now uses run %s (was %s): %d series rows", pos[0], s.To, s.From, s.Rows)
	if len(s.Dropped) > 0 {
		fmt.Fprintf(stdout, "; %d steps without a result left the series", len(s.Dropped))
	}
	fmt.Fprintln(stdout)
	if s.RigLog != "" {
		fmt.Fprintf(stdout, "rig log not applied: %s\n", s.RigLog)
	}
	return exitOK
}
