package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	iofs "io/fs"
	"os"
	"path/filepath"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/events"
	"sluice/pkg/layout"
	"sluice/pkg/plots"
	"sluice/pkg/report"
	"sluice/pkg/segment"
	"sluice/pkg/series"
	"sluice/pkg/store"
)

func storeAt(loc string) (store.Store, error) {
	return store.Open(context.Background(), loc, store.Credentials{})
}

// campaignFlags locate a campaign's store for the offline commands.
type campaignFlags struct{ data, store string }

func (c *campaignFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&c.data, "data", defaultData, "data directory whose store/ holds the campaign (as written by sluice run; the demo prints its own)")
	fs.StringVar(&c.store, "store", "", "object store location instead of DATA/store (directory, file:// or s3://)")
}

func (c *campaignFlags) open(ctx context.Context) (store.Store, error) {
	loc := c.store
	if loc == "" {
		loc = filepath.Join(c.data, "store")
		if _, err := os.Stat(loc); err != nil {
			return nil, fmt.Errorf("no store at %s (use --data or --store)", loc)
		}
	}
	return store.Open(ctx, loc, store.Credentials{})
}

func loadSeries(ctx context.Context, st store.Store, name string) ([]series.Row, []events.Event, error) {
	if err := layout.CheckName("campaign", name); err != nil {
		return nil, nil, err
	}
	rows, err := series.Load(ctx, st, name)
	if err != nil {
		return nil, nil, err
	}
	if len(rows) == 0 {
		return nil, nil, fmt.Errorf("campaign %s has no measured steps", name)
	}
	evs, err := events.Detect(rows, campaignEventOptions(ctx, st, name))
	return rows, evs, err
}

// campaignEventOptions returns the event tolerances of a campaign's
// configuration (the defaults when it has none).
func campaignEventOptions(ctx context.Context, st store.Store, name string) events.Options {
	c, err := layout.NewCampaign(name)
	if err != nil {
		return events.Defaults()
	}
	if rec, err := campaign.LoadRecord(ctx, st, c); err == nil {
		if o := rec.Config.EventOptions(); o.Validate() == nil {
			return o
		}
	}
	return events.Defaults()
}

// plotRun names a campaign's current run for figure titles.
func plotRun(ctx context.Context, st store.Store, name string) plots.Run {
	run := plots.Run{Campaign: name}
	if c, err := layout.NewCampaign(name); err == nil {
		if rec, err := campaign.LoadRecord(ctx, st, c); err == nil {
			run.Hash = rec.Current
		}
	}
	return run
}

func writePlots(dir string, run plots.Run, rows []series.Row, evs []events.Event) ([]string, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	return plots.WriteFiles(dir, rows, evs, run)
}

// runPlot is `sluice plot`.
func runPlot(args []string) int {
	fs := flag.NewFlagSet("plot", flag.ContinueOnError)
	var cf campaignFlags
	cf.register(fs)
	out := fs.String("out", "", "output directory (default DATA/plots/<campaign>)")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if len(pos) != 1 {
		return fail(exitBadInput, "plot: want one CAMPAIGN")
	}
	ctx := context.Background()
	st, err := cf.open(ctx)
	if err != nil {
		return fail(exitBadInput, "plot: %v", err)
	}
	rows, evs, err := loadSeries(ctx, st, pos[0])
	if err != nil {
		return fail(exitBadInput, "plot: %v", err)
	}
	dir := *out
	if dir == "" {
		dir = filepath.Join(cf.data, "plots", pos[0])
	}
	files, err := writePlots(dir, plotRun(ctx, st, pos[0]), rows, evs)
	if err != nil {
		return fail(exitFailure, "plot: %v", err)
	}
	for _, f := range files {
		fmt.Fprintln(stdout, f)
	}
	return exitOK
}

// runReport is `sluice report`.
func runReport(args []string) int {
	fs := flag.NewFlagSet("report", flag.ContinueOnError)
	var cf campaignFlags
	cf.register(fs)
	out := fs.String("out", "", "output HTML file (default DATA/<campaign>-report.html)")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if len(pos) != 1 {
		return fail(exitBadInput, "report: want one CAMPAIGN")
	}
	ctx := context.Background()
	st, err := cf.open(ctx)
	if err != nil {
		return fail(exitBadInput, "report: %v", err)
	}
	path := *out
	if path == "" {
		path = filepath.Join(cf.data, pos[0]+"-report.html")
	}
	if err := writeReport(ctx, st, path, pos[0], ""); err != nil {
		return fail(exitBadInput, "report: %v", err)
	}
	fmt.Fprintln(stdout, path)
	return exitOK
}

// writeReport writes the HTML report of a campaign's current run.
func writeReport(ctx context.Context, st store.Store, path, name, scenario string) error {
	rows, evs, err := loadSeries(ctx, st, name)
	if err != nil {
		return err
	}
	c, _ := layout.NewCampaign(name)
	rec, _ := campaign.LoadRecord(ctx, st, c) // a report without campaign.json shows no parameters
	if scenario == "" {
		scenario = rec.Scenario
	}
	p := report.Params{Campaign: name, Scenario: scenario, ParameterHash: rec.Current, SoftwareVersion: Version,
		SmoothingSigma: rec.Config.Measure.CurvatureSigma, FlowAxis: rec.Config.Measure.FlowAxis, Connectivity: rec.Config.Measure.Connectivity}
	if rec.Config.IFT > 0 {
		v := rec.Config.IFT
		p.IFT = &v
	}
	if r := rows[len(rows)-1]; r.VoxelSize != nil {
		p.VoxelSize = *r.VoxelSize
	}
	// Each step's plan gives its thresholds and sample cylinder; the
	// latest plan gives the settings shown once.
	var steps []report.StepSettings
	for i, r := range rows {
		s, err := c.Step(r.Step)
		if err != nil {
			continue
		}
		var plan campaign.Plan
		if b, err := st.Get(ctx, campaign.PlanKey(s, rec.Current)); err != nil || json.Unmarshal(b, &plan) != nil {
			continue
		}
		th := plan.Thresholds
		steps = append(steps, report.StepSettings{Step: r.Step, Thresholds: th.T, Method: th.Method, Fluids: th.Fluids(),
			Filter: plan.Config.Segment.Filter.Method, Sample: [3]float64{th.Sample.Y, th.Sample.X, th.Sample.Radius}, HasSample: th.Sample.Radius > 0})
		if i == len(rows)-1 {
			p.Thresholds = th.T
			p.Other = append(p.Other,
				report.Param{Name: "segmentation (latest step)", Value: fmt.Sprintf("%s filter, %s thresholds, order %s, min island %d, hysteresis band %g",
					plan.Config.Segment.Filter.Method, th.Method, plan.Config.Segment.Order, plan.Config.Segment.MinIsland, plan.Config.Segment.Hysteresis.Band)},
				report.Param{Name: "curvature exclusion near solid", Value: fmt.Sprintf("%g voxels", plan.Config.Measure.CurvatureExclude)},
				report.Param{Name: "tile / halo", Value: fmt.Sprintf("%d / %d voxels", plan.Tile, plan.Halo)})
		}
	}
	// Scans given up at ingest have no row; the report lists them.
	rs, err := campaign.Rejections(ctx, st, c)
	if err != nil {
		return err
	}
	var rejected []report.Rejected
	for _, r := range rs {
		rejected = append(rejected, report.Rejected{Step: r.Step, File: r.File, Reason: r.Reason, Attempts: r.Attempts, At: r.At})
	}
	var fixed *report.CampaignThresholds
	if rec.Config.Segment.ThresholdScope == segment.ScopeCampaign {
		key, err := c.Thresholds(rec.Current)
		if err != nil {
			return err
		}
		var ct segment.CampaignThresholds
		switch err := campaign.GetJSON(ctx, st, key, &ct); {
		case err == nil:
			fixed = &report.CampaignThresholds{Source: ct.Source, Step: ct.Step, Order: ct.Order, T: ct.T, Levels: ct.Levels,
				Lo: ct.Hist.Lo, Width: ct.Hist.Width, Counts: ct.Hist.Counts}
		case !errors.Is(err, iofs.ErrNotExist):
			return err // a record that cannot be read is named, not left out
		}
	}
	var cautions []string
	if rec.Config.Measure.ContactWallGap == 0 && anyAngles(rows) {
		cautions = append(cautions, "Contact angles: "+greyAngleNote+".")
	}
	rig := rigReport(ctx, st, c, rec.Config.RigLog, rows)
	// The accuracy estimate of the current run (`sluice accuracy`), when
	// one was made; an unreadable one is named, not left out.
	var acc *report.Accuracy
	switch b, err := st.Get(ctx, campaign.AccuracyKey(c, rec.Current)); {
	case err == nil:
		if acc, err = report.DecodeAccuracy(b); err != nil {
			return fmt.Errorf("%s: %w", campaign.AccuracyKey(c, rec.Current), err)
		}
		acc.Current = rec.Current
	case !errors.Is(err, iofs.ErrNotExist):
		return err
	}
	f, err := os.Create(path + ".tmp")
	if err != nil {
		return err
	}
	err = report.Write(f, report.Input{Params: p, Rows: rows, Steps: steps, Rejected: rejected, Events: evs, FixedThresholds: fixed, Checks: report.PhysicalChecks(rows, p.IFT), RigLog: rig, Accuracy: acc, Cautions: cautions, Generated: time.Now()})
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return err
	}
	return os.Rename(path+".tmp", path)
}

// anyAngles reports whether a step has contact-angle samples.
func anyAngles(rows []series.Row) bool {
	for _, r := range rows {
		if r.AngleSamples != nil && *r.AngleSamples > 0 {
			return true
		}
	}
	return false
}
