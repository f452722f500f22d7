package aggregator

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"sort"
	"strings"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/preview"
	"sluice/pkg/series"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
	"sluice/pkg/web"
)

// The Aggregator is the web view's data source.
var _ web.Source = (*Aggregator)(nil)

func badName(err error) error { return fmt.Errorf("%w: %w", web.ErrBadRequest, err) }

// Campaigns lists the campaigns the aggregator knows, each with the
// current parameter hash as its campaign.json says now: the record is read
// again on every request (see syncRecord), so a `sluice switch` made by
// another process shows at once.
func (a *Aggregator) Campaigns(ctx context.Context) ([]web.CampaignInfo, error) {
	if err := a.syncAll(ctx); err != nil {
		return nil, err
	}
	a.mu.Lock()
	out := []web.CampaignInfo{}
	for name, cs := range a.campaigns {
		ci := web.CampaignInfo{Name: name, ParamHash: cs.record.Current}
		for _, st := range sortedSteps(cs) {
			ci.Steps++
			switch st.Status {
			case "done":
				ci.Done++
				ci.LatestStep, ci.LatestTime = st.Step, st.TimeS
			case "failed":
				ci.Failed++
			}
		}
		out = append(out, ci)
	}
	a.mu.Unlock()
	// The rejection records are read without a.mu (see campaign): a slow
	// store must not freeze the page.
	for i := range out {
		if c, err := layout.NewCampaign(out[i].Name); err == nil {
			rs, err := campaign.Rejections(ctx, a.Store, c)
			if err != nil {
				return nil, err
			}
			out[i].Rejected = len(rs)
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Name < out[j].Name })
	return out, nil
}

// syncAll re-reads the campaign.json of every known campaign.
func (a *Aggregator) syncAll(ctx context.Context) error {
	a.mu.Lock()
	known := make(map[string]*campaignState, len(a.campaigns))
	for name, cs := range a.campaigns {
		known[name] = cs
	}
	a.mu.Unlock()
	for name, cs := range known {
		c, err := layout.NewCampaign(name)
		if err != nil {
			continue
		}
		if err := a.syncRecord(ctx, cs, c); err != nil {
			return err
		}
	}
	return nil
}

// Rejected lists the campaign's scans given up by the watcher, read from
// their records in the store (campaigns/<c>/rejected/).
func (a *Aggregator) Rejected(ctx context.Context, c string) ([]web.RejectedScan, error) {
	cc, err := layout.NewCampaign(c)
	if err != nil {
		return nil, badName(err)
	}
	if a.campaign(ctx, c) == nil {
		return nil, fmt.Errorf("campaign %s: %w", c, fs.ErrNotExist)
	}
	rs, err := campaign.Rejections(ctx, a.Store, cc)
	if err != nil {
		return nil, err
	}
	out := []web.RejectedScan{}
	for _, r := range rs {
		out = append(out, web.RejectedScan{Step: r.Step, File: r.File, Reason: r.Reason, Attempts: r.Attempts, At: r.At})
	}
	return out, nil
}

// Steps lists a campaign's steps with their status under the campaign's
// current run (re-read from campaign.json, see syncRecord).
func (a *Aggregator) Steps(ctx context.Context, c string) ([]web.StepStatus, error) {
	cl, err := layout.NewCampaign(c)
	if err != nil {
		return nil, badName(err)
	}
	if cs, ok := a.known(c); ok {
		if err := a.syncRecord(ctx, cs, cl); err != nil {
			return nil, err
		}
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	cs, ok := a.campaigns[c]
	if !ok {
		return nil, fmt.Errorf("campaign %s: %w", c, fs.ErrNotExist)
	}
	return sortedSteps(cs), nil
}

// SeriesJSON returns series.json of the campaign's current run.
func (a *Aggregator) SeriesJSON(ctx context.Context, c string) ([]byte, error) {
	jk, _, err := series.Keys(c)
	if err != nil {
		return nil, badName(err)
	}
	b, err := a.Store.Get(ctx, jk)
	if errors.Is(err, fs.ErrNotExist) {
		if _, known := a.known(c); known {
			return []byte("[]"), nil
		}
	}
	return b, err
}

// SeriesCSV returns series.csv of the campaign's current run.
func (a *Aggregator) SeriesCSV(ctx context.Context, c string) ([]byte, error) {
	_, ck, err := series.Keys(c)
	if err != nil {
		return nil, badName(err)
	}
	b, err := a.Store.Get(ctx, ck)
	if errors.Is(err, fs.ErrNotExist) {
		if _, known := a.known(c); known {
			return series.EncodeCSV(nil)
		}
	}
	return b, err
}

// Events returns the detected events of a campaign (a JSON array).
func (a *Aggregator) Events(ctx context.Context, c string) ([]byte, error) {
	cl, err := layout.NewCampaign(c)
	if err != nil {
		return nil, badName(err)
	}
	b, err := a.Store.Get(ctx, campaign.EventsKey(cl))
	if errors.Is(err, fs.ErrNotExist) {
		return []byte("[]"), nil
	}
	return b, err
}

// Accuracy returns the accuracy estimate of the campaign's current run
// (campaign.AccuracyKey), or null when none was made.
func (a *Aggregator) Accuracy(ctx context.Context, c string) ([]byte, error) {
	cl, err := layout.NewCampaign(c)
	if err != nil {
		return nil, badName(err)
	}
	var rec campaign.Record
	if err := campaign.GetJSON(ctx, a.Store, cl.Config(), &rec); err != nil {
		if _, known := a.known(c); known && errors.Is(err, fs.ErrNotExist) {
			return []byte("null"), nil
		}
		return nil, err
	}
	b, err := a.Store.Get(ctx, campaign.AccuracyKey(cl, rec.Current))
	if errors.Is(err, fs.ErrNotExist) {
		return []byte("null"), nil
	}
	return b, err
}

// Result returns a step's result.json.
func (a *Aggregator) Result(ctx context.Context, c, s string) ([]byte, error) {
	st, err := layout.NewStep(c, s)
	if err != nil {
		return nil, badName(err)
	}
	return a.Store.Get(ctx, st.Result())
}

func (a *Aggregator) known(c string) (*campaignState, bool) {
	a.mu.Lock()
	defer a.mu.Unlock()
	cs, ok := a.campaigns[c]
	return cs, ok
}

// Preview renders three orthogonal slices of a step through point with the
// phase overlay. Only the three planes are read from the store.
func (a *Aggregator) Preview(ctx context.Context, c, s string, point [3]int) ([]byte, error) {
	st, err := layout.NewStep(c, s)
	if err != nil {
		return nil, badName(err)
	}
	grey, err := volio.OpenZarr(ctx, a.Store, strings.TrimSuffix(st.Volume(), "/"))
	if err != nil {
		return nil, err
	}
	m := grey.Meta()
	whole := volume.BoxOf(m.Shape[0], m.Shape[1], m.Shape[2])
	for i := range point {
		if point[i] < 0 {
			point[i] = m.Shape[i] / 2
		}
		if point[i] >= m.Shape[i] {
			return nil, fmt.Errorf("%w: point %v outside the scan %v", web.ErrBadRequest, point, m.Shape)
		}
	}
	labels, _ := volio.OpenZarr(ctx, a.Store, strings.TrimSuffix(st.Labels(), "/"))
	planes := [3]volume.Any{}
	var lplanes [3]*volume.Labels
	for axis := 0; axis < 3; axis++ {
		box := whole
		box.Min[axis], box.Max[axis] = point[axis], point[axis]+1
		if planes[axis], err = grey.ReadBox(ctx, box); err != nil {
			return nil, err
		}
		if labels != nil {
			if l, err := labels.ReadBox(ctx, box); err == nil {
				lplanes[axis], _ = l.(*volume.Labels)
			}
		}
	}
	o := preview.Defaults()
	o.Point = &point
	// Small scans are enlarged so the slices stay legible on the page.
	o.Scale = min(4, max(1, 384/max(m.Shape[0], m.Shape[1], m.Shape[2])))
	// Campaign scans always carry their voxel size (ingest refuses a scan
	// without one); 0 would draw "no scale bar" rather than a wrong one.
	o.VoxelSize = m.VoxelSize
	if b, err := a.Store.Get(ctx, st.Result()); err == nil {
		o.Marks = FillingMarks(b, m.VoxelSize, PreviewMarks)
	}
	img, err := preview.RenderPlanes(whole, planes, lplanes, o)
	if err != nil {
		return nil, err
	}
	var buf bytes.Buffer
	if err := preview.EncodePNG(&buf, img); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// Health reports pipeline health for the page.
func (a *Aggregator) Health(ctx context.Context) web.Health {
	h := web.Health{Version: a.Version}
	if a.Lag != nil {
		if l, b, err := a.Lag(ctx); err == nil {
			h.QueueLive, h.QueueBatch = l, b
		}
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	h.Uptime = time.Since(a.started).Seconds()
	h.StepLatencyS = a.lastLat
	cut := time.Now().Add(-60 * time.Second)
	n := 0
	for _, t := range a.tileTimes {
		if t.After(cut) {
			n++
		}
	}
	h.TilesPerS = float64(n) / 60
	h.WorkerList = a.presentWorkers(time.Now())
	h.Workers = len(h.WorkerList)
	for _, w := range h.WorkerList {
		h.WorkerSlots += w.Concurrency
	}
	return h
}
