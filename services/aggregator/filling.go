package aggregator

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"strings"

	"sluice/pkg/campaign"
	"sluice/pkg/cluster"
	"sluice/pkg/filling"
	"sluice/pkg/layout"
	"sluice/pkg/preview"
	"sluice/pkg/tracking"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// Pore-filling events (package filling) and ganglion tracking (package
// tracking) compare a step with the step before it, so they are computed here, when a step completes, and not by the
// workers: a worker of step k would need the labels of step k−1 for its
// box, which another worker may still be writing, and a worker cannot wait
// for that without spending deliveries (a slow or dead-lettered tile of
// k−1 would then fail step k too). The aggregator knows when a step's
// labels are complete: its run result, the commit marker, exists.
//
// The previous step of step k under a parameter hash is the step with a
// plan under that hash that comes last before k in the order of the series
// (time, then name). Plans are written in that order — live by ingest, one
// scan after the other; by reprocess, which plans the steps sorted by time
// — so the pairing is the same in every run and after every fault. A scan
// ingested after a later step was completed is not put between them after
// the fact (that step keeps the previous step it was compared with, which
// its result names); a reprocess pairs it.
//
// When step k's tiles are all in:
//   - no previous step: k is the run's first step; its events are null
//     with a note;
//   - the previous step is done: its labels and k's are read tile by tile
//     (the plan's tiling; one tile pair in memory at a time), the changed
//     voxels labelled per tile and joined across tiles by the cluster
//     union-find merge;
//   - the previous step failed (a tile dead-lettered): k completes with
//     null events and a note naming it;
//   - otherwise the previous step is still in progress: k waits. Its
//     completion is put off, and a note (campaign.WaitingKey) on the
//     previous step names k; when the previous step completes or fails,
//     the aggregator completes k. The note lives in the store, so the wait
//     survives a restart (a redelivered result of the previous step finds
//     it again).
//
// Completions run under a.writing, so a step deciding to wait and its
// previous step completing cannot miss each other.

// previousStep returns the step planned under hash that comes last before
// (t, step) in series order, with its manifest; ok is false when there is
// none. Manifests and plans found are cached (both are written once).
func (a *Aggregator) previousStep(ctx context.Context, step layout.Step, hash string, t float64) (prev layout.Step, pman campaign.Manifest, ok bool, err error) {
	c := step.Campaign()
	names, err := a.Store.Dirs(ctx, c.Steps())
	if err != nil {
		return prev, pman, false, fmt.Errorf("aggregator: listing the steps of campaign %s: %w", c.Name(), err)
	}
	for _, name := range names {
		s, err := c.Step(name)
		if err != nil || name == step.Name() {
			continue
		}
		planned, err := a.cachedPlan(ctx, s, hash)
		if err != nil {
			return prev, pman, false, err
		}
		if !planned {
			continue
		}
		man, err := a.cachedManifest(ctx, s)
		if err != nil {
			return prev, pman, false, err
		}
		before := man.TimeS < t || man.TimeS == t && name < step.Name()
		later := !ok || man.TimeS > pman.TimeS || man.TimeS == pman.TimeS && name > prev.Name()
		if before && later {
			prev, pman, ok = s, man, true
		}
	}
	return prev, pman, ok, nil
}

// cachedPlan reports whether step s has a plan under hash.
func (a *Aggregator) cachedPlan(ctx context.Context, s layout.Step, hash string) (bool, error) {
	key := campaign.PlanKey(s, hash)
	if a.plannedSeen[key] {
		return true, nil
	}
	_, err := a.Store.Get(ctx, key)
	if errors.Is(err, fs.ErrNotExist) {
		return false, nil
	}
	if err != nil {
		return false, err
	}
	if a.plannedSeen == nil || len(a.plannedSeen) > 1<<16 {
		a.plannedSeen = map[string]bool{}
	}
	a.plannedSeen[key] = true
	return true, nil
}

// cachedManifest reads step s's manifest.
func (a *Aggregator) cachedManifest(ctx context.Context, s layout.Step) (campaign.Manifest, error) {
	if m, ok := a.manifests[s.Dir()]; ok {
		return m, nil
	}
	var m campaign.Manifest
	if err := campaign.GetJSON(ctx, a.Store, s.Manifest(), &m); err != nil {
		return m, err
	}
	if a.manifests == nil || len(a.manifests) > 1<<16 {
		a.manifests = map[string]campaign.Manifest{}
	}
	a.manifests[s.Dir()] = m
	return m, nil
}

// stepPair returns the pore-filling events and the ganglion tracking of
// step against its previous step (tracking nil for the first step), or the
// name of the previous step it must wait for (with the waiting note
// written). Both come from one pass over the two steps' labels. Callers
// hold a.writing.
func (a *Aggregator) stepPair(ctx context.Context, step layout.Step, hash string, man campaign.Manifest, plan campaign.Plan) (*filling.Result, *tracking.Result, string, error) {
	prev, pman, ok, err := a.previousStep(ctx, step, hash, man.TimeS)
	if err != nil || !ok {
		return filling.First(), nil, "", err
	}
	exists := func(key string) (bool, error) {
		_, err := a.Store.Get(ctx, key)
		if errors.Is(err, fs.ErrNotExist) {
			return false, nil
		}
		return err == nil, err
	}
	done, err := exists(campaign.RunResultKey(prev, hash))
	if err != nil {
		return nil, nil, "", err
	}
	if !done {
		failed, err := exists(campaign.FailureKey(prev, hash))
		if err != nil {
			return nil, nil, "", err
		}
		if failed {
			why := fmt.Sprintf("previous step %s failed: no events computed", prev.Name())
			return filling.Without(prev.Name(), why), tracking.Without(prev.Name(), why), "", nil
		}
		if err := campaign.PutJSON(ctx, a.Store, campaign.WaitingKey(prev, hash), waiting{Step: step.Name()}); err != nil {
			return nil, nil, "", err
		}
		return nil, nil, prev.Name(), nil
	}
	if pman.Shape != man.Shape {
		why := fmt.Sprintf("previous step %s has shape %v, this step %v: no events computed", prev.Name(), pman.Shape, man.Shape)
		return filling.Without(prev.Name(), why), tracking.Without(prev.Name(), why), "", nil
	}
	pz, err := a.labelsOf(ctx, prev, hash)
	if errors.Is(err, fs.ErrNotExist) {
		why := fmt.Sprintf("the labels of step %s are not stored: no events computed", prev.Name())
		return filling.Without(prev.Name(), why), tracking.Without(prev.Name(), why), "", nil
	}
	if err != nil {
		return nil, nil, "", err
	}
	cz, err := a.labelsOf(ctx, step, hash)
	if errors.Is(err, fs.ErrNotExist) {
		why := fmt.Sprintf("the labels of step %s are not stored: no events computed", step.Name())
		return filling.Without(prev.Name(), why), tracking.Without(prev.Name(), why), "", nil
	}
	if err != nil {
		return nil, nil, "", err
	}
	whole := man.Whole()
	codes := plan.Config.Segment.Codes
	mo, err := plan.Config.MeasureOptions()
	if err != nil {
		return nil, nil, "", err
	}
	copt := cluster.Options{Connectivity: mo.Connectivity, FlowAxis: mo.FlowAxis}
	var tiles []*filling.Tile
	var links []*tracking.Tile
	for _, core := range plan.Tiling(man).Cores() {
		p, err := readLabels(ctx, pz, core)
		if err != nil {
			return nil, nil, "", fmt.Errorf("aggregator: labels of step %s: %w", prev.Name(), err)
		}
		c, err := readLabels(ctx, cz, core)
		if err != nil {
			return nil, nil, "", fmt.Errorf("aggregator: labels of step %s: %w", step.Name(), err)
		}
		t, err := filling.TileOf(p, c, core, whole, codes)
		if err != nil {
			return nil, nil, "", err
		}
		tiles = append(tiles, t)
		lt, err := tracking.TileOf(p, c, core, whole, codes, copt)
		if err != nil {
			return nil, nil, "", err
		}
		links = append(links, lt)
	}
	d, im, err := filling.Join(tiles, whole)
	if err != nil {
		return nil, nil, "", err
	}
	l, err := tracking.Join(links, whole, copt)
	if err != nil {
		return nil, nil, "", err
	}
	// The previous step's trapped ganglia as its result recorded them, for
	// their births (none recorded: born at the previous step).
	var before struct {
		T *tracking.Result `json:"ganglion_tracking"`
	}
	if err := campaign.GetJSON(ctx, a.Store, campaign.RunResultKey(prev, hash), &before); err != nil {
		return nil, nil, "", err
	}
	var rec []tracking.Trapped
	if before.T != nil {
		rec = before.T.Trapped
	}
	return filling.Between(prev.Name(), d, im, man.VoxelSize, man.TimeS-pman.TimeS),
		tracking.Track(l, prev.Name(), pman.TimeS, step.Name(), man.TimeS, rec), "", nil
}

// waiting is the content of campaign.WaitingKey.
type waiting struct {
	Step string `json:"step"`
}

// labelsOf opens the label array of step s under hash: the run's own
// (runs/<hash>/labels.zarr, written when hash was not the campaign's
// current run) when it exists, else the step's labels.zarr.
func (a *Aggregator) labelsOf(ctx context.Context, s layout.Step, hash string) (*volio.Zarr, error) {
	z, err := volio.OpenZarr(ctx, a.Store, strings.TrimSuffix(campaign.RunLabelsKey(s, hash), "/"))
	if err == nil || !errors.Is(err, fs.ErrNotExist) {
		return z, err
	}
	return volio.OpenZarr(ctx, a.Store, strings.TrimSuffix(s.Labels(), "/"))
}

func readLabels(ctx context.Context, z *volio.Zarr, box volume.Box) (*volume.Labels, error) {
	v, err := z.ReadBox(ctx, box)
	if err != nil {
		return nil, err
	}
	l, ok := v.(*volume.Labels)
	if !ok {
		return nil, fmt.Errorf("label array holds %s, want uint8", v.DType())
	}
	return l, nil
}

// completeWaiting completes the step waiting for step (see stepPair),
// if any. Callers hold a.writing.
func (a *Aggregator) completeWaiting(ctx context.Context, step layout.Step, hash string) error {
	var w waiting
	err := campaign.GetJSON(ctx, a.Store, campaign.WaitingKey(step, hash), &w)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("aggregator: %w", err)
	}
	next, err := step.Campaign().Step(w.Step)
	if err != nil {
		return fmt.Errorf("aggregator: %s: %w", campaign.WaitingKey(step, hash), err)
	}
	prefix, err := next.Tiles(hash)
	if err != nil {
		return err
	}
	keys, err := a.Store.List(ctx, prefix)
	if err != nil {
		return err
	}
	return a.completeLocked(ctx, next, hash, keys)
}

// PreviewMarks is how many of the largest events of each kind a step's
// preview highlights.
const PreviewMarks = 3

// FillingMarks returns preview marks at the centroids of the n largest
// drainage and imbibition events of a step result (its pore_filling
// object), as voxel indices for voxel edge h: centroid/h − ½, rounded.
// None when the result has no events or h is not positive.
func FillingMarks(result []byte, h float64, n int) []preview.Mark {
	var r struct {
		PoreFilling *filling.Result `json:"pore_filling"`
	}
	if json.Unmarshal(result, &r) != nil || r.PoreFilling == nil || !(h > 0) {
		return nil
	}
	var marks []preview.Mark
	for _, k := range []struct {
		kind *filling.Kind
		imb  bool
	}{{r.PoreFilling.Drainage, false}, {r.PoreFilling.Imbibition, true}} {
		if k.kind == nil {
			continue
		}
		for i, e := range k.kind.Largest {
			if i == n {
				break
			}
			var at [3]int
			for a := range 3 {
				at[a] = int(math.Round(e.CentroidM[a]/h - 0.5))
			}
			marks = append(marks, preview.Mark{At: at, Imbibition: k.imb})
		}
	}
	return marks
}
