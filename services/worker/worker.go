// Package worker is the stateless tile worker: it takes a tile task, reads
// the tile core plus halo from the step's grey Zarr array (neighbouring
// chunks included), segments and measures it (package scan) under the step's
// plan, writes the tile's label chunk and its partial result to the object
// store, and only then reports the tile done. Any worker may die at any
// moment: the task is redelivered and the rewrite of the same keys is
// harmless.
package worker

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"strings"
	"sync"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/queue"
	"sluice/pkg/register"
	"sluice/pkg/scan"
	"sluice/pkg/store"
	"sluice/pkg/telemetry"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
	"sluice/proto/sluicepb"
	"sluice/services/ingest"
)

// Store is the object storage a worker reads and writes.
type Store interface {
	Get(ctx context.Context, key string) ([]byte, error)
	Put(ctx context.Context, key string, data []byte) error
}

// Worker processes tile tasks.
type Worker struct {
	Store   Store
	ID      string
	Metrics *telemetry.Worker
	Log     *slog.Logger

	mu    sync.Mutex
	plans map[string]planned // by plan key
	// inputs caches the opened input arrays (the step's grey, the
	// campaign's solid mask) by plan key and prefix: ingest stores them
	// before it publishes a step's tasks and never changes them, so their
	// metadata is read once per step instead of once per tile.
	inputs map[string]*volio.Zarr
}

type planned struct {
	man  campaign.Manifest
	plan campaign.Plan
}

// countingStore counts bytes through a Store.
type countingStore struct {
	Store
	read, written int64
	mu            sync.Mutex
}

func (c *countingStore) Get(ctx context.Context, key string) ([]byte, error) {
	b, err := c.Store.Get(ctx, key)
	c.mu.Lock()
	c.read += int64(len(b))
	c.mu.Unlock()
	return b, err
}

func (c *countingStore) Put(ctx context.Context, key string, data []byte) error {
	c.mu.Lock()
	c.written += int64(len(data))
	c.mu.Unlock()
	return c.Store.Put(ctx, key, data)
}

func (w *Worker) load(ctx context.Context, st Store, step layout.Step, hash string) (planned, error) {
	key := campaign.PlanKey(step, hash)
	w.mu.Lock()
	p, ok := w.plans[key]
	w.mu.Unlock()
	if ok {
		return p, nil
	}
	var man campaign.Manifest
	if err := campaign.GetJSON(ctx, st, step.Manifest(), &man); err != nil {
		return p, err
	}
	var plan campaign.Plan
	if err := campaign.GetJSON(ctx, st, key, &plan); err != nil {
		return p, err
	}
	p = planned{man: man, plan: plan}
	w.mu.Lock()
	if w.plans == nil || len(w.plans) > 256 {
		w.plans = map[string]planned{}
		w.inputs = map[string]*volio.Zarr{}
	}
	w.plans[key] = p
	w.mu.Unlock()
	return p, nil
}

// Process runs one task. The returned TileDone is to be published; the
// caller acknowledges the task after publishing it.
//
// A permanent store error about this tile's objects (store.IsPermanent:
// above all a missing input — manifest, plan, grey or mask chunk — which
// ingest and reprocess store before they publish a task, so no redelivery
// will find it) is marked queue.Permanent and the tile dead-lettered at
// once. A store that refuses the worker (store.IsRefused: wrong keys, a full
// or read-only disk) is not the tile's fault: that error is returned
// unmarked, and the caller should stop taking tiles.
func (w *Worker) Process(ctx context.Context, t *sluicepb.TileTask) (*sluicepb.TileDone, error) {
	done, err := w.process(ctx, t)
	if err != nil && ctx.Err() == nil && !errors.Is(err, context.Canceled) &&
		store.IsPermanent(err) && !store.IsRefused(err) && !queue.IsPermanent(err) {
		err = queue.Permanent(err)
	}
	return done, err
}

func (w *Worker) process(ctx context.Context, t *sluicepb.TileTask) (*sluicepb.TileDone, error) {
	if w.Metrics != nil {
		w.Metrics.Busy.Inc()
		defer w.Metrics.Busy.Dec()
	}
	fault(t)
	cs := &countingStore{Store: w.Store}
	var stages []*sluicepb.StageTiming
	stage := func(name string, t0 time.Time) {
		d := time.Since(t0)
		stages = append(stages, &sluicepb.StageTiming{Stage: name, Duration: durationpb.New(d)})
		if w.Metrics != nil {
			w.Metrics.StageSeconds.WithLabelValues(name).Observe(d.Seconds())
		}
	}
	t0 := time.Now()
	if t.PublishedAt != nil {
		// Queue wait: publication of the task to the start of this attempt
		// (clocks of one node, or NTP-synchronised nodes).
		if pub := t.PublishedAt.AsTime(); !pub.IsZero() && t0.After(pub) {
			stage("queue_wait", pub)
		}
	}
	step, err := layout.NewStep(t.Campaign, t.Step)
	if err != nil {
		return nil, err
	}
	if err := checkKeys(step, t); err != nil {
		return nil, queue.Permanent(err)
	}
	p, err := w.load(ctx, cs, step, t.ParamHash)
	if err != nil {
		return nil, fmt.Errorf("worker: %s tile %d: %w", step.Dir(), t.Tile, err)
	}
	whole := p.man.Whole()
	core := ingest.BoxFromProto(t.Core)
	if core.Empty() || !whole.ContainsBox(core) {
		// No retry can mend a box outside the scan: dead-letter at once.
		return nil, queue.Permanent(fmt.Errorf("worker: %s tile %d: core %v outside scan %v", step.Dir(), t.Tile, core, whole))
	}
	box := core.Grow(p.plan.Halo).Intersect(whole)
	// A registered step is read on the reference grid: its box moved by
	// the step's shift (widened by the interpolation kernel along a fractional axis),
	// resampled, the voxels the shifted scan did not see left out of the
	// mask (package register; the same for every tiling).
	var shift register.Shift
	if r := p.plan.Registration; r != nil {
		shift = r.Applied
	}
	planKey := campaign.PlanKey(step, t.ParamHash)
	grey, err := scan.Registered(func(b volume.Box) (volume.Any, error) { return w.readInput(ctx, cs, planKey, t.InputKey, b) }, whole, shift)(box)
	if err != nil {
		return nil, err
	}
	var solid *volume.Labels
	if p.plan.Config.Segment.Reference {
		m, err := scan.RegisteredMask(func(b volume.Box) (volume.Any, error) {
			return w.readInput(ctx, cs, planKey, step.Campaign().SolidMask(), b)
		}, whole, shift)(box)
		if err != nil {
			return nil, err
		}
		var ok bool
		if solid, ok = m.(*volume.Labels); !ok {
			return nil, fmt.Errorf("worker: solid mask of %s is %s, want uint8", step.Campaign().Name(), m.DType())
		}
	}
	volume.SetVoxelSize(grey, p.man.VoxelSize)
	stage("read", t0)

	t0 = time.Now()
	lab, part, err := scan.Tile(grey, core, whole, p.plan.Thresholds, p.plan.Config, solid)
	if err != nil {
		return nil, fmt.Errorf("worker: %s tile %d: %w", step.Dir(), t.Tile, err)
	}
	stage("segment_measure", t0)

	t0 = time.Now()
	if err := writeLabels(ctx, cs, t.LabelKey, p, lab); err != nil {
		return nil, err
	}
	b, err := json.Marshal(part)
	if err != nil {
		return nil, err
	}
	if err := cs.Put(ctx, t.ResultKey, b); err != nil {
		return nil, err
	}
	stage("write", t0)
	if w.Metrics != nil {
		w.Metrics.BytesRead.Add(float64(cs.read))
		w.Metrics.BytesWritten.Add(float64(cs.written))
	}
	return &sluicepb.TileDone{Campaign: t.Campaign, Step: t.Step, Tile: t.Tile, TileCount: t.TileCount, ParamHash: t.ParamHash,
		ResultKey: t.ResultKey, LabelKey: t.LabelKey, WorkerId: w.ID, Attempt: t.Attempt, Stages: stages,
		BytesRead: cs.read, BytesWritten: cs.written, TimeS: t.TimeS, FinishedAt: timestamppb.Now(), PublishedAt: t.PublishedAt}, nil
}

// checkKeys refuses a task whose object keys are not the ones the layout
// gives its step, tile and parameter hash: the keys travel in the message,
// and a forged or corrupted task must not make a worker read or overwrite
// another step's objects.
func checkKeys(step layout.Step, t *sluicepb.TileTask) error {
	rk, err := step.TileResult(int(t.Tile), t.ParamHash)
	if err != nil {
		return fmt.Errorf("worker: %s tile %d: %w", step.Dir(), t.Tile, err)
	}
	switch {
	case t.InputKey != step.Volume():
		return fmt.Errorf("worker: %s tile %d: input key %q is not the step's volume %q", step.Dir(), t.Tile, t.InputKey, step.Volume())
	case t.ResultKey != rk:
		return fmt.Errorf("worker: %s tile %d: result key %q is not %q", step.Dir(), t.Tile, t.ResultKey, rk)
	case t.LabelKey != step.Labels() && t.LabelKey != campaign.RunLabelsKey(step, t.ParamHash):
		return fmt.Errorf("worker: %s tile %d: label key %q belongs to no run of this step", step.Dir(), t.Tile, t.LabelKey)
	}
	return nil
}

// writeLabels writes the tile's label chunk, creating the label array on
// first use (every worker writes the same metadata, so the race is benign).
// Only a missing .zarray is created: any other error (an unreadable or
// corrupt .zarray, a store failure) fails the tile, so metadata another
// writer left behind is never silently replaced.
func writeLabels(ctx context.Context, st Store, key string, p planned, lab *volume.Labels) error {
	prefix := strings.TrimSuffix(key, "/")
	z, err := volio.OpenZarr(ctx, st, prefix)
	if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("worker: tile labels: %w", err)
	}
	if err != nil {
		s := p.man.Shape
		z, err = volio.CreateZarr(ctx, st, prefix, volio.ZarrMeta{Shape: s,
			Chunks: [3]int{min(p.plan.Tile, s[0]), min(p.plan.Tile, s[1]), min(p.plan.Tile, s[2])}, DType: volume.Uint8,
			Compressor: "zstd", VoxelSize: p.man.VoxelSize, TimeS: p.man.TimeS, HasTime: true,
			Attrs: map[string]any{"phases": map[string]int{"solid": int(p.plan.Config.Segment.Codes.Solid),
				"wetting": int(p.plan.Config.Segment.Codes.Wetting), "nonwetting": int(p.plan.Config.Segment.Codes.Nonwetting), "outside": 255},
				"param_hash": p.plan.ParamHash}})
		if err != nil {
			return err
		}
	}
	return z.WriteBox(ctx, lab)
}

// readInput reads box of the input array under prefix through st, its
// metadata read once per plan (w.inputs).
func (w *Worker) readInput(ctx context.Context, st Store, planKey, prefix string, box volume.Box) (volume.Any, error) {
	prefix = strings.TrimSuffix(prefix, "/")
	key := planKey + "\x00" + prefix
	w.mu.Lock()
	z, ok := w.inputs[key]
	w.mu.Unlock()
	if ok {
		z = z.Reopen(st)
	} else {
		var err error
		if z, err = volio.OpenZarr(ctx, st, prefix); err != nil {
			return nil, err
		}
		w.mu.Lock()
		if w.inputs == nil {
			w.inputs = map[string]*volio.Zarr{}
		}
		w.inputs[key] = z
		w.mu.Unlock()
	}
	return z.ReadBox(ctx, box)
}
