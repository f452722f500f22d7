// Package aggregator completes steps: it collects the tile results of each
// step, and when all tiles of a step under one parameter hash are stored it
// merges them (measure.Combine: sums of additive partials, union-find over
// cluster faces), writes the step result, upserts the step's row into the
// campaign series (one row per step, ever: a repeated completion rewrites
// the same row), detects experiment events, updates the metrics and tells
// the live page.
//
// Its state is the object store itself — which tile results exist, which
// step results exist, which steps failed (a record written before the dead
// letter is acknowledged) — so a restarted aggregator loses nothing: redelivered
// or repeated tile results simply re-check completion. One aggregator runs
// per deployment (it is the only writer of the series files).
package aggregator

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"path"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"sluice/internal/usermsg"
	"sluice/pkg/campaign"
	"sluice/pkg/events"
	"sluice/pkg/layout"
	"sluice/pkg/measure"
	"sluice/pkg/riglog"
	"sluice/pkg/scan"
	"sluice/pkg/series"
	"sluice/pkg/telemetry"
	"sluice/pkg/web"
	"sluice/proto/sluicepb"
)

// Store is the object storage the aggregator reads and writes.
type Store interface {
	Get(ctx context.Context, key string) ([]byte, error)
	Put(ctx context.Context, key string, data []byte) error
	List(ctx context.Context, prefix string) ([]string, error)
	// Dirs lists one level of key segments below prefix (see store.Store).
	Dirs(ctx context.Context, prefix string) ([]string, error)
}

// EventPublisher publishes step events (completion, failure, breakthrough,
// steady state) on the queue's event subject. id is the message id: an
// event published twice with one id (within the queue's duplicate window)
// is stored once. A nil error means the event is stored.
type EventPublisher interface {
	PublishEvent(ctx context.Context, id string, e *sluicepb.StepEvent) error
}

// Aggregator completes steps and serves their state.
type Aggregator struct {
	Store     Store
	Publisher EventPublisher // may be nil
	Metrics   *telemetry.Aggregator
	Hub       *web.Hub // may be nil
	Log       *slog.Logger
	Version   string
	// EventOptions are the steady-state tolerances.
	EventOptions events.Options
	// Lag, when set, reports the queue backlog for the health panel.
	Lag func(ctx context.Context) (live, batch int64, err error)

	mu        sync.Mutex
	campaigns map[string]*campaignState
	// writing serialises step completions, the read-modify-write of the
	// series files (TileDone and CompleteStep may run concurrently).
	writing   sync.Mutex
	started   time.Time
	tileTimes []time.Time               // recent tile arrivals, for tiles/s
	arrived   map[string]map[int32]bool // tiles seen per (step, hash) tile prefix
	lastLat   float64
	rigErr    map[string]string      // the last rig-log error logged per campaign
	rigSeen   map[string]string      // the stored rig log last re-applied per campaign (riglive.go)
	workers   map[string]heardWorker // by worker id (WorkerBeat)
	// plannedSeen (plan keys found) and manifests (by step directory) are
	// caches of write-once objects for finding a step's previous step
	// (filling.go); guarded by writing.
	plannedSeen map[string]bool
	manifests   map[string]campaign.Manifest
}

type campaignState struct {
	record campaign.Record
	steps  map[string]*stepState
}

type stepState struct {
	web.StepStatus
	hash  string
	tiles map[int32]bool
}

// Start initialises the aggregator from the store (campaigns, steps and
// results written before a restart). It runs before any other method.
//
// It lists one level at a time — the campaigns, each campaign's steps —
// and then, per step, only the tile results of the campaign's current
// parameter hash, never the Zarr chunks below the steps. TilesDone counts
// the current hash's tiles only.
func (a *Aggregator) Start(ctx context.Context) error {
	if a.Log == nil {
		a.Log = slog.Default()
	}
	if a.EventOptions.K == 0 {
		a.EventOptions = events.Defaults()
	}
	a.started = time.Now()
	a.campaigns = map[string]*campaignState{}
	names, err := a.Store.Dirs(ctx, layout.Root+"/")
	if err != nil {
		return fmt.Errorf("aggregator: listing campaigns: %w", err)
	}
	for _, name := range names {
		c, err := layout.NewCampaign(name)
		if err != nil {
			continue // not a campaign directory
		}
		r, err := campaign.LoadRecord(ctx, a.Store, c)
		if err != nil {
			a.Log.Warn("aggregator: campaign skipped at start-up", "campaign", name, "err", err)
			continue
		}
		steps, err := a.loadSteps(ctx, c, r.Current)
		if err != nil {
			return err
		}
		cs := a.insertCampaign(r)
		for _, st := range steps {
			cs.steps[st.Step] = st
		}
		if rows, err := series.Load(ctx, a.Store, r.Name); err == nil {
			for _, row := range rows {
				cs.step(row.Step).TimeS = row.Time
			}
			a.updateGauges(r.Name, rows)
		}
	}
	return nil
}

// startWorkers bounds the store reads in flight while Start reads steps.
const startWorkers = 8

// loadSteps reads the state of every step of campaign c under hash.
func (a *Aggregator) loadSteps(ctx context.Context, c layout.Campaign, hash string) ([]*stepState, error) {
	names, err := a.Store.Dirs(ctx, c.Steps())
	if err != nil {
		return nil, fmt.Errorf("aggregator: listing the steps of campaign %s: %w", c.Name(), err)
	}
	out := make([]*stepState, len(names))
	errs := make([]error, len(names))
	sem := make(chan struct{}, startWorkers)
	var wg sync.WaitGroup
	for i, name := range names {
		step, err := c.Step(name)
		if err != nil {
			continue // not a step directory
		}
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer func() { <-sem; wg.Done() }()
			out[i], errs[i] = a.loadStep(ctx, step, hash)
		}()
	}
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	var steps []*stepState
	for _, st := range out {
		if st != nil {
			steps = append(steps, st)
		}
	}
	return steps, nil
}

// loadStep reads one step's state under hash: done when its run result
// (the step's commit marker) exists, else failed when a failure record
// exists, else processing when tile results of hash exist, else ingested
// when its manifest exists.
func (a *Aggregator) loadStep(ctx context.Context, step layout.Step, hash string) (*stepState, error) {
	st := &stepState{StepStatus: web.StepStatus{Step: step.Name()}, tiles: map[int32]bool{}}
	fail := func(err error) (*stepState, error) {
		return nil, fmt.Errorf("aggregator: reading step %s: %w", step.Dir(), err)
	}
	exists := func(key string) (bool, error) {
		_, err := a.Store.Get(ctx, key)
		if errors.Is(err, fs.ErrNotExist) {
			return false, nil
		}
		return err == nil, err
	}
	if hash != "" {
		b, err := a.Store.Get(ctx, campaign.PlanKey(step, hash))
		if err != nil && !errors.Is(err, fs.ErrNotExist) {
			return fail(err)
		}
		if err == nil {
			// An undecodable plan fails its step's completion with its own
			// message; here it only leaves the tile total unknown.
			var plan campaign.Plan
			if err := json.Unmarshal(b, &plan); err != nil {
				a.Log.Warn("aggregator: undecodable plan", "key", campaign.PlanKey(step, hash), "err", err)
			}
			st.TilesTotal = plan.Tiles
		}
		done, err := exists(campaign.RunResultKey(step, hash))
		if err != nil {
			return fail(err)
		}
		if done {
			st.Status, st.TilesDone = "done", st.TilesTotal
			return st, nil
		}
		prefix, err := step.Tiles(hash)
		if err != nil {
			return fail(err)
		}
		keys, err := a.Store.List(ctx, prefix)
		if err != nil {
			return fail(err)
		}
		for _, k := range keys {
			if strings.HasSuffix(k, ".json") {
				st.TilesDone++
			}
		}
		b, err = a.Store.Get(ctx, campaign.FailureKey(step, hash))
		if err != nil && !errors.Is(err, fs.ErrNotExist) {
			return fail(err)
		}
		if err == nil {
			var f Failure
			if err := json.Unmarshal(b, &f); err != nil {
				return fail(fmt.Errorf("%s: %w", campaign.FailureKey(step, hash), err))
			}
			st.Status, st.Reason = "failed", f.reason()
			return st, nil
		}
		if st.TilesDone > 0 {
			st.Status = "processing"
			return st, nil
		}
	}
	ingested, err := exists(step.Manifest())
	if err != nil {
		return fail(err)
	}
	if ingested {
		st.Status = "ingested"
	}
	return st, nil
}

// campaign returns (loading if needed) a campaign's state; nil if it has no
// readable campaign.json. Callers must not hold a.mu: campaign.json is read
// without it, because the web API takes a.mu too and a store that is
// retrying (up to a minute) must not freeze the live page. Two callers may
// both read a new campaign; the first to insert it wins. The fields of the
// returned state are guarded by a.mu.
func (a *Aggregator) campaign(ctx context.Context, name string) *campaignState {
	a.mu.Lock()
	cs, ok := a.campaigns[name]
	a.mu.Unlock()
	if ok {
		return cs
	}
	c, err := layout.NewCampaign(name)
	if err != nil {
		return nil
	}
	r, err := campaign.LoadRecord(ctx, a.Store, c)
	if err != nil {
		return nil
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.insertCampaign(r)
}

// insertCampaign adds the state of a campaign read from r, unless another
// caller added it first, and returns the state in the map. Callers hold a.mu.
func (a *Aggregator) insertCampaign(r campaign.Record) *campaignState {
	if cs, ok := a.campaigns[r.Name]; ok {
		return cs
	}
	cs := &campaignState{record: r, steps: map[string]*stepState{}}
	a.campaigns[r.Name] = cs
	if a.Metrics != nil {
		a.Metrics.Campaign(r.Name)
	}
	return cs
}

func (cs *campaignState) step(name string) *stepState {
	st, ok := cs.steps[name]
	if !ok {
		st = &stepState{StepStatus: web.StepStatus{Step: name}, tiles: map[int32]bool{}}
		cs.steps[name] = st
	}
	return st
}

// StepReady records a newly ingested step.
func (a *Aggregator) StepReady(ctx context.Context, r *sluicepb.StepReady) error {
	if err := CheckStepReady(r); err != nil {
		a.dropInvalid(err)
		return nil
	}
	cs := a.campaign(ctx, r.Campaign)
	if cs == nil {
		return fmt.Errorf("aggregator: step %s/%s of unknown campaign", r.Campaign, r.Step)
	}
	a.mu.Lock()
	st := cs.step(r.Step)
	if st.Status == "" || st.Status == "ingested" {
		st.Status = "processing"
	}
	st.TilesTotal, st.TimeS, st.hash = int(r.TileCount), r.TimeS, r.ParamHash
	a.mu.Unlock()
	a.publish("progress", map[string]any{"campaign": r.Campaign, "step": r.Step})
	return nil
}

// TileDone handles one tile result; when it completes its step, the step is
// merged and recorded. It is idempotent.
func (a *Aggregator) TileDone(ctx context.Context, d *sluicepb.TileDone) error {
	if a.Metrics != nil {
		a.Metrics.TilesReceived.Inc()
	}
	if err := CheckTileDone(d); err != nil {
		a.dropInvalid(err)
		return nil
	}
	step, err := layout.NewStep(d.Campaign, d.Step)
	if err != nil {
		return err
	}
	prefix, err := step.Tiles(d.ParamHash)
	if err != nil {
		return err
	}
	// Count arrivals in memory and list the store only the first time a
	// (step, hash) is seen by this process (tiles stored before a restart)
	// and when the count says the step is complete — not on every tile.
	n, err := a.arrive(ctx, prefix, d.Tile)
	if err != nil {
		return err
	}
	cs := a.campaign(ctx, d.Campaign)
	if cs == nil {
		return fmt.Errorf("aggregator: result for unknown campaign %s", d.Campaign)
	}
	a.mu.Lock()
	current := cs.record.Current == d.ParamHash
	if current {
		st := cs.step(d.Step)
		st.tiles[d.Tile] = true
		st.TilesDone, st.TilesTotal, st.TimeS = n, int(d.TileCount), d.TimeS
		if st.Status != "done" {
			st.Status = "processing"
		}
	}
	now := time.Now()
	a.tileTimes = append(a.tileTimes, now)
	if len(a.tileTimes) > 512 {
		a.tileTimes = a.tileTimes[256:]
	}
	a.mu.Unlock()
	if n < int(d.TileCount) {
		a.publish("progress", map[string]any{"campaign": d.Campaign, "step": d.Step, "tiles_done": n, "tiles_total": d.TileCount})
		return nil
	}
	keys, err := a.Store.List(ctx, prefix)
	if err != nil {
		return err
	}
	if len(keys) < int(d.TileCount) {
		a.forget(prefix) // the count ran ahead of the store: recount next time
		return nil
	}
	err = a.complete(ctx, step, d.ParamHash, keys, d)
	if err == nil {
		a.forget(prefix)
	}
	return err
}

// arrive records a tile of the step whose tile results live under prefix
// and returns how many distinct tiles have arrived.
func (a *Aggregator) arrive(ctx context.Context, prefix string, tile int32) (int, error) {
	a.mu.Lock()
	set, ok := a.arrived[prefix]
	a.mu.Unlock()
	if !ok {
		keys, err := a.Store.List(ctx, prefix)
		if err != nil {
			return 0, err
		}
		set = map[int32]bool{}
		for _, k := range keys {
			if i, err := strconv.Atoi(strings.TrimSuffix(path.Base(k), ".json")); err == nil {
				set[int32(i)] = true
			}
		}
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.arrived == nil {
		a.arrived = map[string]map[int32]bool{}
	}
	if old, ok := a.arrived[prefix]; ok {
		set = old
	}
	set[tile] = true
	a.arrived[prefix] = set
	return len(set), nil
}

func (a *Aggregator) forget(prefix string) {
	a.mu.Lock()
	delete(a.arrived, prefix)
	a.mu.Unlock()
}

// complete merges the tiles of a finished step.
func (a *Aggregator) complete(ctx context.Context, step layout.Step, hash string, keys []string, d *sluicepb.TileDone) error {
	a.writing.Lock()
	defer a.writing.Unlock()
	return a.completeLocked(ctx, step, hash, keys)
}

// completeLocked is complete for a caller holding a.writing. A step whose
// previous step is still in progress is put off (see filling.go) and
// completed when that one is done or failed.
func (a *Aggregator) completeLocked(ctx context.Context, step layout.Step, hash string, keys []string) error {
	if b, err := a.Store.Get(ctx, campaign.RunResultKey(step, hash)); err == nil && len(b) > 0 {
		// Already completed (a redelivered or repeated tile): nothing to do,
		// the series row exists; a step that waited for this one may not
		// have been completed yet (a crash right after the run result).
		return a.completeWaiting(ctx, step, hash)
	}
	var man campaign.Manifest
	if err := campaign.GetJSON(ctx, a.Store, step.Manifest(), &man); err != nil {
		return err
	}
	var plan campaign.Plan
	if err := campaign.GetJSON(ctx, a.Store, campaign.PlanKey(step, hash), &plan); err != nil {
		return err
	}
	if len(keys) != plan.Tiles {
		return fmt.Errorf("aggregator: %s: %d tile results for %d tiles", step.Dir(), len(keys), plan.Tiles)
	}
	parts := make([]*measure.Partial, 0, len(keys))
	for _, k := range keys {
		var p measure.Partial
		if err := campaign.GetJSON(ctx, a.Store, k, &p); err != nil {
			return err
		}
		parts = append(parts, &p)
	}
	mo, err := plan.Config.MeasureOptions()
	if err != nil {
		return err
	}
	res, err := measure.Combine(parts, man.Whole(), man.VoxelSize, mo)
	if err != nil {
		return fmt.Errorf("aggregator: %s: %w", step.Dir(), err)
	}
	if ph := plan.Thresholds.Phases; ph.Fluids != "" {
		res.PhasesDetected, res.PhasesNote = ph.InScan(), ph.Describe()
	}
	scan.SetDrift(res, plan.Thresholds)
	pf, gt, wait, err := a.stepPair(ctx, step, hash, man, plan)
	if err != nil {
		return fmt.Errorf("aggregator: %s: pore-filling events: %w", step.Dir(), err)
	}
	if wait != "" {
		a.Log.Info("step waits for the previous step's labels (pore-filling events)", "campaign", step.Campaign().Name(),
			"step", step.Name(), "previous_step", wait, "param_hash", hash)
		return nil
	}
	res.PoreFilling, res.GanglionTracking = pf, gt
	scan.SetRegistration(res, plan.Registration, man.VoxelSize)
	b, err := json.MarshalIndent(res, "", "  ")
	if err != nil {
		return err
	}
	row, err := series.FromResult(step.Name(), man.TimeS, b)
	if err != nil {
		return err
	}
	cs, current := a.refreshCurrent(ctx, step.Campaign(), hash)
	// The run series first, then the contract paths of the current run,
	// then the events, and the run result last: it is the commit marker of
	// the step (reprocess and the check above skip a step whose run result
	// exists), so a crash or an error anywhere before it leaves the step to
	// be completed again when its result is redelivered, and what it
	// repeats gives the same bytes or, for events, the same message ids.
	runRows, err := a.upsertRun(ctx, step.Campaign(), hash, row, plan.Config.RigLog)
	if err != nil {
		return err
	}
	rows := runRows
	if current {
		if err := a.Store.Put(ctx, step.Result(), b); err != nil {
			return err
		}
		if rows, err = a.upsertCurrent(ctx, step.Campaign(), row, plan.Config.RigLog); err != nil {
			return err
		}
	}
	if err := a.announce(ctx, step, hash, man.TimeS, current, rows); err != nil {
		return err
	}
	if err := a.Store.Put(ctx, campaign.RunResultKey(step, hash), b); err != nil {
		return err
	}
	latency := 0.0
	if !man.IngestedAt.IsZero() {
		start := man.IngestedAt
		if !man.ReceivedAt.IsZero() {
			start = man.ReceivedAt
		}
		latency = time.Since(start).Seconds()
	}
	a.mu.Lock()
	if current && cs != nil {
		st := cs.step(step.Name())
		st.Status, st.TilesDone, st.TilesTotal, st.TimeS, st.LatencyS = "done", plan.Tiles, plan.Tiles, man.TimeS, latency
		a.lastLat = latency
	}
	a.mu.Unlock()
	if a.Metrics != nil && current {
		a.Metrics.StepsCompleted.WithLabelValues(step.Campaign().Name()).Inc()
		if latency > 0 {
			a.Metrics.StepLatency.Observe(latency)
		}
		a.updateGauges(step.Campaign().Name(), rows)
	}
	a.Log.Info("step complete", "campaign", step.Campaign().Name(), "step", step.Name(), "param_hash", hash,
		"tiles", plan.Tiles, "saturation_nonwetting", series.F(row.SatNonwetting), "latency_s", fmt.Sprintf("%.2f", latency))
	a.publish("step", map[string]any{"campaign": step.Campaign().Name(), "step": step.Name(), "param_hash": hash})
	return a.completeWaiting(ctx, step, hash)
}

// CompletedEventID is the message id of the completion event of a step
// under a parameter hash: campaign/completed/step/hash.
func CompletedEventID(step layout.Step, hash string) string {
	return step.Campaign().Name() + "/completed/" + step.Name() + "/" + hash
}

// EventID is the message id of a detected experiment event:
// campaign/kind/step.
func EventID(c layout.Campaign, e events.Event) string { return c.Name() + "/" + e.ID() }

// announce publishes the step's completion and, for the campaign's current
// run, the experiment events not announced before. Events are at least
// once and, within the queue's duplicate window, exactly once: each is
// published with its message id before it is recorded (the completion by
// the run result that complete writes next, experiment events in
// events.json), and any error is returned, so the step's result is
// redelivered and the announcement repeated with the same ids.
func (a *Aggregator) announce(ctx context.Context, step layout.Step, hash string, timeS float64, current bool, rows []series.Row) error {
	c := step.Campaign()
	var known []events.Event
	if current {
		// Read what was announced before publishing anything: an unreadable
		// record stops the step here, before the completion goes out.
		var err error
		if known, err = a.announced(ctx, c); err != nil {
			return err
		}
	}
	if a.Publisher != nil {
		e := &sluicepb.StepEvent{Campaign: c.Name(), Step: step.Name(), Kind: sluicepb.StepEvent_KIND_COMPLETED,
			TimeS: timeS, ResultKey: step.Result(), Detail: fmt.Sprintf("step %s measured", step.Name())}
		if err := a.Publisher.PublishEvent(ctx, CompletedEventID(step, hash), e); err != nil {
			return fmt.Errorf("aggregator: %s: completion event: %w", step.Dir(), err)
		}
	}
	if !current {
		return nil
	}
	return a.detectEvents(ctx, c, rows, known)
}

// announced returns the experiment events recorded in the campaign's
// events.json (none when it does not exist). A file that cannot be read or
// decoded is an error naming it: taking it for "nothing announced" would
// announce every event again, and ignoring it would lose new ones.
func (a *Aggregator) announced(ctx context.Context, c layout.Campaign) ([]events.Event, error) {
	key := campaign.EventsKey(c)
	b, err := a.Store.Get(ctx, key)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("aggregator: %w", err)
	}
	evs, err := events.Decode(key, b)
	if err != nil {
		return nil, fmt.Errorf("aggregator: %w", err)
	}
	return evs, nil
}

// refreshCurrent re-reads campaign.json, so a run switched to by another
// process (`sluice switch`) is honoured, and reports whether hash is the
// campaign's current run. A campaign.json that cannot be read leaves the
// state known before.
func (a *Aggregator) refreshCurrent(ctx context.Context, c layout.Campaign, hash string) (*campaignState, bool) {
	cs := a.campaign(ctx, c.Name())
	if cs == nil {
		return nil, false
	}
	if err := a.syncRecord(ctx, cs, c); err != nil {
		a.Log.Warn("aggregator: campaign.json not re-read; keeping the current run known before", "campaign", c.Name(), "err", err)
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	return cs, cs.record.Current == hash
}

// syncRecord re-reads the campaign's campaign.json (a small object) into
// cs, so that the current parameter hash shows as the store has it right
// after another process (`sluice switch`, which touches only the store and
// sends no message) changed it. When the current hash changed, the steps'
// states are read again under the new hash (as Start reads them), because
// status and tile counts belong to one run. Nothing is read under a.mu (see
// campaign). A tile result handled between the listing here and the swap
// below is counted again by the step's next tile or its completion.
func (a *Aggregator) syncRecord(ctx context.Context, cs *campaignState, c layout.Campaign) error {
	r, err := campaign.LoadRecord(ctx, a.Store, c)
	if err != nil {
		return err
	}
	a.mu.Lock()
	was := cs.record.Current
	if r.Current == "" || r.Current == was {
		if r.Current != "" {
			cs.record = r
		}
		a.mu.Unlock()
		return nil
	}
	a.mu.Unlock()
	steps, err := a.loadSteps(ctx, c, r.Current)
	if err != nil {
		return err
	}
	var times map[string]float64
	jk, _ := campaign.RunSeriesKeys(c, r.Current)
	if b, err := a.Store.Get(ctx, jk); err == nil {
		if rows, err := series.Decode(b); err == nil {
			times = map[string]float64{}
			for _, row := range rows {
				times[row.Step] = row.Time
			}
		}
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	if cs.record.Current != was {
		cs.record = r // another caller swapped the steps meanwhile
		return nil
	}
	fresh := make(map[string]*stepState, len(steps))
	for _, st := range steps {
		// A step's time belongs to its scan, not to the run.
		if t, ok := times[st.Step]; ok {
			st.TimeS = t
		} else if old, ok := cs.steps[st.Step]; ok {
			st.TimeS = old.TimeS
		}
		fresh[st.Step] = st
	}
	cs.record, cs.steps = r, fresh
	a.Log.Info("campaign switched to another run", "campaign", c.Name(), "from", was, "to", r.Current)
	return nil
}

// CompleteStep completes a step of a run whose tile results are all stored
// but whose run result is not (its last tile's announcement was lost in a
// crash). It reports whether the step is complete afterwards; a step with
// tiles still missing is left alone.
func (a *Aggregator) CompleteStep(ctx context.Context, campaignName, stepName, hash string) (bool, error) {
	step, err := layout.NewStep(campaignName, stepName)
	if err != nil {
		return false, err
	}
	if b, err := a.Store.Get(ctx, campaign.RunResultKey(step, hash)); err == nil && len(b) > 0 {
		return true, nil
	}
	var plan campaign.Plan
	if err := campaign.GetJSON(ctx, a.Store, campaign.PlanKey(step, hash), &plan); err != nil {
		return false, err
	}
	prefix, err := step.Tiles(hash)
	if err != nil {
		return false, err
	}
	keys, err := a.Store.List(ctx, prefix)
	if err != nil {
		return false, err
	}
	if len(keys) < plan.Tiles {
		return false, nil
	}
	return true, a.complete(ctx, step, hash, keys, nil)
}

// applyRig sets the experiment-log columns of rows from the campaign's
// stored rig log (campaign.ApplyRigLog). A log that cannot be read leaves
// them null and is logged, once per distinct error: the step's
// measurement does not depend on it.
func (a *Aggregator) applyRig(ctx context.Context, c layout.Campaign, cfg *riglog.Config, rows []series.Row) {
	err := campaign.ApplyRigLog(ctx, a.Store, c, cfg, rows)
	a.mu.Lock()
	defer a.mu.Unlock()
	if err == nil {
		delete(a.rigErr, c.Name())
		return
	}
	if a.rigErr == nil {
		a.rigErr = map[string]string{}
	}
	if a.rigErr[c.Name()] != err.Error() {
		a.rigErr[c.Name()] = err.Error()
		a.Log.Warn("rig log not applied to the series", "campaign", c.Name(), "error", err.Error())
	}
}

// upsertCurrent writes the row into the campaign's series (the contract
// paths), with the experiment-log columns of every row set again from the
// rig log.
func (a *Aggregator) upsertCurrent(ctx context.Context, c layout.Campaign, row series.Row, rig *riglog.Config) ([]series.Row, error) {
	if err := row.Validate(); err != nil {
		return nil, err
	}
	rows, err := series.Load(ctx, a.Store, c.Name())
	if err != nil {
		return nil, err
	}
	rows = series.Merge(rows, row)
	a.applyRig(ctx, c, rig, rows)
	if err := series.Save(ctx, a.Store, c.Name(), rows); err != nil {
		return nil, err
	}
	return rows, nil
}

// upsertRun writes the row into the run-scoped series, with the
// experiment-log columns of every row set again from the rig log.
func (a *Aggregator) upsertRun(ctx context.Context, c layout.Campaign, hash string, row series.Row, rig *riglog.Config) ([]series.Row, error) {
	jk, ck := campaign.RunSeriesKeys(c, hash)
	var rows []series.Row
	if b, err := a.Store.Get(ctx, jk); err == nil {
		if rows, err = series.Decode(b); err != nil {
			return nil, err
		}
	} else if !errors.Is(err, fs.ErrNotExist) {
		return nil, err
	}
	rows = series.Merge(rows, row)
	a.applyRig(ctx, c, rig, rows)
	jb, err := series.EncodeJSON(rows)
	if err != nil {
		return nil, err
	}
	cb, err := series.EncodeCSV(rows)
	if err != nil {
		return nil, err
	}
	if err := a.Store.Put(ctx, jk, jb); err != nil {
		return nil, err
	}
	return rows, a.Store.Put(ctx, ck, cb)
}

// detectEvents runs event detection over the whole series (a pure function
// of it), publishes the events not in known (those already announced) and
// records the detected events in events.json. On a publish error the events
// published so far are recorded with the known ones and the error is
// returned; the next attempt publishes the rest.
func (a *Aggregator) detectEvents(ctx context.Context, c layout.Campaign, rows []series.Row, known []events.Event) error {
	opt := a.eventOptions(c.Name())
	evs, err := events.Detect(rows, opt)
	if err != nil {
		return err
	}
	seen := map[string]bool{}
	for _, e := range known {
		seen[e.ID()] = true
	}
	bt, steady := 0.0, 0.0
	for _, e := range evs {
		if e.Kind == events.Breakthrough {
			bt = 1
		}
	}
	if len(rows) > 0 {
		if w := events.Steady(rows, len(rows)-1, opt); w.Steady {
			steady = 1
		}
	}
	if a.Metrics != nil {
		a.Metrics.Breakthrough.WithLabelValues(c.Name()).Set(bt)
		a.Metrics.SteadyState.WithLabelValues(c.Name()).Set(steady)
	}
	var pubErr error
	for _, e := range evs {
		if seen[e.ID()] {
			continue
		}
		kind := sluicepb.StepEvent_KIND_STEADY_STATE
		switch e.Kind {
		case events.Breakthrough:
			kind = sluicepb.StepEvent_KIND_BREAKTHROUGH
		case events.GreyDrift:
			kind = sluicepb.StepEvent_KIND_GREY_DRIFT
		case events.RegistrationShift:
			kind = sluicepb.StepEvent_KIND_REGISTRATION_SHIFT
		}
		if a.Publisher != nil {
			err := a.Publisher.PublishEvent(ctx, EventID(c, e), &sluicepb.StepEvent{Campaign: c.Name(), Step: e.Step, Kind: kind, TimeS: e.Time, Detail: e.Detail})
			if err != nil {
				pubErr = fmt.Errorf("aggregator: campaign %s: %s event of step %s: %w", c.Name(), e.Kind, e.Step, err)
				break
			}
		}
		seen[e.ID()] = true
		a.Log.Info("experiment event", "campaign", c.Name(), "kind", e.Kind, "step", e.Step, "detail", e.Detail)
		if a.Metrics != nil {
			a.Metrics.Events.WithLabelValues(c.Name(), string(e.Kind)).Inc()
		}
		a.publish("event", map[string]any{"campaign": c.Name(), "kind": e.Kind, "step": e.Step, "time_s": e.Time, "detail": e.Detail})
	}
	// Record the detected events that are now announced (all of them
	// unless a publish failed), in detection order.
	record := make([]events.Event, 0, len(evs))
	for _, e := range evs {
		if seen[e.ID()] {
			record = append(record, e)
		}
	}
	b, err := json.MarshalIndent(record, "", "  ")
	if err != nil {
		return err
	}
	if err := a.Store.Put(ctx, campaign.EventsKey(c), b); err != nil {
		if pubErr != nil {
			return fmt.Errorf("%w; recording the events before it: %w", pubErr, err)
		}
		return err
	}
	return pubErr
}

// eventOptions returns the campaign's configured event tolerances, or the
// aggregator's when the campaign has none.
func (a *Aggregator) eventOptions(name string) events.Options {
	a.mu.Lock()
	defer a.mu.Unlock()
	if cs, ok := a.campaigns[name]; ok {
		if o := cs.record.Config.EventOptions(); o.Validate() == nil {
			return o
		}
	}
	return a.EventOptions
}

// Failure is the record of a failed step (campaign.FailureKey): the tile
// whose task was dead-lettered and why.
type Failure struct {
	Tile       int32     `json:"tile"`
	Reason     string    `json:"reason"`
	Deliveries uint64    `json:"deliveries"`
	Worker     string    `json:"worker,omitempty"`
	At         time.Time `json:"at"`
}

func (f Failure) reason() string { return fmt.Sprintf("tile %d: %s", f.Tile, f.Reason) }

// StepFailed records a step failed under the dead letter's parameter hash (a
// tile exhausted its retries) in the store, then marks it failed when that
// hash is the campaign's current run and the step is not done. The record
// is what a restarted aggregator reads (Start), so a dead letter handled
// once is not needed again; an error leaves the dead letter to be retried.
// A record that names no task (undecodable) is ignored.
func (a *Aggregator) StepFailed(ctx context.Context, dl *sluicepb.DeadLetter) error {
	t := dl.GetTask()
	if t == nil {
		return nil
	}
	step, err := layout.NewStep(t.Campaign, t.Step)
	if err != nil || !layout.ValidParamHash(t.ParamHash) {
		a.dropInvalid(fmt.Errorf("aggregator: dead letter of task %s/%s hash %q: %v", t.Campaign, t.Step, t.ParamHash, err))
		return nil
	}
	// The reason is shown to people (live page, status, report): one line
	// without sluice's package prefixes, the step and campaign as given.
	f := Failure{Tile: t.Tile, Reason: usermsg.Clean(dl.Reason, "", t.Campaign, t.Step), Deliveries: dl.Deliveries, Worker: dl.WorkerId, At: dl.At.AsTime()}
	if err := campaign.PutJSON(ctx, a.Store, campaign.FailureKey(step, t.ParamHash), f); err != nil {
		return fmt.Errorf("aggregator: recording the failure of %s: %w", step.Dir(), err)
	}
	cs := a.campaign(ctx, t.Campaign)
	a.mu.Lock()
	if cs != nil && cs.record.Current == t.ParamHash {
		st := cs.step(t.Step)
		if st.Status != "failed" && st.Status != "done" {
			st.Status = "failed"
			st.Reason = f.reason()
			if a.Metrics != nil {
				a.Metrics.StepsFailed.WithLabelValues(t.Campaign).Inc()
			}
		}
	}
	a.mu.Unlock()
	a.publish("progress", map[string]any{"campaign": t.Campaign, "step": t.Step, "failed": true})
	// A step waiting for this one's labels completes now, without events.
	a.writing.Lock()
	defer a.writing.Unlock()
	return a.completeWaiting(ctx, step, t.ParamHash)
}

func (a *Aggregator) updateGauges(c string, rows []series.Row) {
	if a.Metrics == nil || len(rows) == 0 {
		return
	}
	r := rows[len(rows)-1]
	m := a.Metrics
	set := func(g interface{ Set(float64) }, p *float64) {
		if p != nil {
			g.Set(*p)
		}
	}
	set(m.SaturationNonwetting.WithLabelValues(c), r.SatNonwetting)
	set(m.SaturationWetting.WithLabelValues(c), r.SatWetting)
	set(m.CapillaryPressure.WithLabelValues(c), r.Pc)
	set(m.Curvature.WithLabelValues(c), r.CurvMean)
	set(m.ContactAngleMean.WithLabelValues(c), r.AngleMean)
	set(m.SpecificAreaWN.WithLabelValues(c), r.SpecificWN)
	if r.GangliaCount != nil {
		m.GangliaCount.WithLabelValues(c).Set(float64(*r.GangliaCount))
	}
	set(m.LargestFraction.WithLabelValues(c), r.LargestFraction)
	m.LatestStepTime.WithLabelValues(c).Set(r.Time)
}

func (a *Aggregator) publish(kind string, v any) {
	if a.Hub != nil {
		a.Hub.Publish(kind, v)
	}
}

func sortedSteps(cs *campaignState) []web.StepStatus {
	out := make([]web.StepStatus, 0, len(cs.steps))
	for _, st := range cs.steps {
		out = append(out, st.StepStatus)
	}
	sort.Slice(out, func(i, j int) bool {
		if out[i].TimeS != out[j].TimeS {
			return out[i].TimeS < out[j].TimeS
		}
		return out[i].Step < out[j].Step
	})
	return out
}
