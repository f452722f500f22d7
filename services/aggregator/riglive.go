package aggregator

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"sort"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/series"
)

// The rig log grows while a run goes on, and the experiment-log columns of
// a step can only be filled once the log covers the step's time; the rig
// usually writes its line for a moment a little after the scan of that
// moment is stored. Step completions re-apply the log to every row, but
// after the last step nothing would, so the last rows would keep their
// empty rig columns. WatchRigLogs closes that gap: it re-applies a
// campaign's stored rig log to its series whenever the stored log changed.

// WatchRigLogs calls RefreshRigLogs every interval until ctx ends.
func (a *Aggregator) WatchRigLogs(ctx context.Context, every time.Duration) {
	if every <= 0 {
		every = 5 * time.Second
	}
	t := time.NewTicker(every)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
		a.RefreshRigLogs(ctx)
	}
}

// RefreshRigLogs runs RefreshRig for every known campaign whose current
// configuration maps a rig log; an error is logged once per distinct text
// (the same bookkeeping as a log that cannot be applied at a step).
func (a *Aggregator) RefreshRigLogs(ctx context.Context) {
	a.mu.Lock()
	var names []string
	for name, cs := range a.campaigns {
		if cs.record.Config.RigLog != nil {
			names = append(names, name)
		}
	}
	a.mu.Unlock()
	sort.Strings(names)
	for _, name := range names {
		if ctx.Err() != nil {
			return
		}
		if _, err := a.RefreshRig(ctx, name); err != nil {
			a.noteRigErr(name, err)
		}
	}
}

// RefreshRig re-applies campaign name's stored rig log to the series of its
// current run (the contract paths and the run-scoped copy) when the stored
// log changed since the aggregator last looked: its source record (time
// stored, bytes, records) differs. It rewrites a series only when a cell
// changed, and then tells the live page (a "step" event, as a completion
// does). It reports whether the contract series was rewritten. The series
// writes are serialised with step completions.
func (a *Aggregator) RefreshRig(ctx context.Context, name string) (bool, error) {
	c, err := layout.NewCampaign(name)
	if err != nil {
		return false, err
	}
	var src campaign.RigLogSource
	if err := campaign.GetJSON(ctx, a.Store, campaign.RigLogSourceKey(c), &src); err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return false, nil // no rig log stored yet
		}
		return false, err
	}
	stamp := fmt.Sprintf("%s|%d|%d|%s", src.StoredAt, src.Bytes, src.Records, src.File)

	a.writing.Lock()
	defer a.writing.Unlock()
	cs := a.campaign(ctx, name)
	if cs == nil {
		return false, fmt.Errorf("aggregator: rig log of unknown campaign %s", name)
	}
	if err := a.syncRecord(ctx, cs, c); err != nil {
		return false, err
	}
	a.mu.Lock()
	rec := cs.record
	seen := a.rigSeen[name] == stamp+"|"+rec.Current
	a.mu.Unlock()
	if seen || rec.Config.RigLog == nil {
		return false, nil
	}

	rows, err := series.Load(ctx, a.Store, name)
	if err != nil {
		return false, err
	}
	changed := false
	if len(rows) > 0 {
		before, err := series.EncodeJSON(rows)
		if err != nil {
			return false, err
		}
		a.applyRig(ctx, c, rec.Config.RigLog, rows)
		after, err := series.EncodeJSON(rows)
		if err != nil {
			return false, err
		}
		if !bytes.Equal(before, after) {
			if err := series.Save(ctx, a.Store, name, rows); err != nil {
				return false, err
			}
			changed = true
		}
	}
	if err := a.refreshRunRig(ctx, c, rec); err != nil {
		return changed, err
	}
	a.mu.Lock()
	if a.rigSeen == nil {
		a.rigSeen = map[string]string{}
	}
	a.rigSeen[name] = stamp + "|" + rec.Current
	a.mu.Unlock()
	if changed {
		if a.Metrics != nil {
			a.updateGauges(name, rows)
		}
		a.Log.Info("rig log re-applied to the series", "campaign", name, "file", src.File, "records", src.Records)
		a.publish("step", map[string]any{"campaign": name, "rig_log": true})
	}
	return changed, nil
}

// refreshRunRig re-applies the rig log to the run-scoped series of the
// current run, when it exists and a cell changed.
func (a *Aggregator) refreshRunRig(ctx context.Context, c layout.Campaign, rec campaign.Record) error {
	jk, ck := campaign.RunSeriesKeys(c, rec.Current)
	b, err := a.Store.Get(ctx, jk)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return err
	}
	rows, err := series.Decode(b)
	if err != nil || len(rows) == 0 {
		return err
	}
	before, err := series.EncodeJSON(rows)
	if err != nil {
		return err
	}
	a.applyRig(ctx, c, rec.Config.RigLog, rows)
	jb, err := series.EncodeJSON(rows)
	if err != nil || bytes.Equal(before, jb) {
		return err
	}
	cb, err := series.EncodeCSV(rows)
	if err != nil {
		return err
	}
	if err := a.Store.Put(ctx, jk, jb); err != nil {
		return err
	}
	return a.Store.Put(ctx, ck, cb)
}

// noteRigErr logs err once per distinct text for the campaign.
func (a *Aggregator) noteRigErr(name string, err error) {
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.rigErr == nil {
		a.rigErr = map[string]string{}
	}
	if a.rigErr[name] != err.Error() {
		a.rigErr[name] = err.Error()
		a.Log.Warn("rig log not re-applied to the series", "campaign", name, "error", err.Error())
	}
}
