package main

import (
	"bytes"
	"context"
	"errors"
	"flag"
	"fmt"
	"io/fs"
	"log/slog"
	"os"
	"time"

	"sluice/internal/usermsg"
	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/report"
	"sluice/pkg/riglog"
	"sluice/pkg/series"
)

// rigConfig returns the rig_log section of a campaign's stored
// configuration, or an error saying that --rig-log needs one.
func rigConfig(ctx context.Context, st campaign.Getter, c layout.Campaign) (riglog.Config, error) {
	rec, err := campaign.LoadRecord(ctx, st, c)
	if err != nil {
		return riglog.Config{}, err
	}
	if rec.Config.RigLog == nil {
		return riglog.Config{}, fmt.Errorf("campaign %s has no rig_log section in its configuration: the columns of the rig log and their units must be mapped there first", c.Name())
	}
	return *rec.Config.RigLog, nil
}

// rigTail follows the flow rig's CSV log while a campaign runs: whenever
// the file changes, its complete lines are read with the campaign's
// rig_log mapping and, when they read right, stored (campaign.StoreRigLog)
// for the aggregator to apply at the next step. A log that is refused (a
// bad row) is not stored: the last good one stays, and the refusal is
// logged once, in one line naming the file and line.
type rigTail struct {
	path string
	st   campaign.Putter
	c    layout.Campaign
	cfg  riglog.Config
	log  *slog.Logger

	size    int64
	mtime   time.Time
	stored  []byte
	lastErr string
}

// poll reads the file once if it changed since the last poll. A missing
// file is waited for (the rig may start after the scanner).
func (r *rigTail) poll(ctx context.Context) error {
	fi, err := os.Stat(r.path)
	if errors.Is(err, fs.ErrNotExist) {
		r.note("rig log not there yet; waiting for it", nil)
		return nil
	}
	if err != nil {
		return fmt.Errorf("--rig-log %w", err)
	}
	if fi.Size() == r.size && fi.ModTime().Equal(r.mtime) {
		return nil
	}
	b, err := os.ReadFile(r.path)
	if err != nil {
		return fmt.Errorf("--rig-log %w", err)
	}
	r.size, r.mtime = fi.Size(), fi.ModTime()
	// Only the complete lines: the rig may be writing the last one.
	if i := bytes.LastIndexByte(b, '\n'); i < len(b)-1 {
		b = b[:i+1]
	}
	if bytes.Equal(b, r.stored) {
		return nil
	}
	l, err := campaign.StoreRigLog(ctx, r.st, r.c, r.path, b, r.cfg)
	var rerr *riglog.Error
	if errors.As(err, &rerr) {
		r.note("rig log refused; the last good one stays", err)
		return nil
	}
	if err != nil {
		return err
	}
	r.stored = b
	r.lastErr = ""
	if r.log != nil {
		r.log.Info("rig log stored", "campaign", r.c.Name(), "file", r.path, "records", l.Len())
	}
	return nil
}

// note logs msg once for each distinct error (nil: once).
func (r *rigTail) note(msg string, err error) {
	text := msg
	if err != nil {
		text = usermsg.Clean(err.Error(), "")
	}
	if text == r.lastErr || r.log == nil {
		r.lastErr = text
		return
	}
	r.lastErr = text
	if err != nil {
		r.log.Error(msg, "campaign", r.c.Name(), "error", text)
	} else {
		r.log.Info(msg, "campaign", r.c.Name(), "file", r.path)
	}
}

// tailRigLog polls the rig log every interval until ctx ends; only store
// errors end it early.
func tailRigLog(ctx context.Context, r *rigTail, interval time.Duration) error {
	if interval <= 0 {
		interval = time.Second
	}
	t := time.NewTicker(interval)
	defer t.Stop()
	for {
		if err := r.poll(ctx); err != nil {
			if ctx.Err() != nil {
				return nil
			}
			return err
		}
		select {
		case <-ctx.Done():
			return nil
		case <-t.C:
		}
	}
}

// runRigLog is `sluice rig-log`: read a rig log with the campaign's
// rig_log mapping, store it, and set the experiment-log columns of the
// campaign's series from it.
func runRigLog(args []string) int {
	fs := flag.NewFlagSet("rig-log", flag.ContinueOnError)
	var cf campaignFlags
	cf.register(fs)
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if len(pos) != 2 {
		return fail(exitBadInput, "rig-log: usage: sluice rig-log [--data DIR | --store LOC] CAMPAIGN FILE")
	}
	name, file := pos[0], pos[1]
	c, err := layout.NewCampaign(name)
	if err != nil {
		return fail(exitBadInput, "rig-log: %v", err)
	}
	ctx, stop := signalContext()
	defer stop()
	st, err := cf.open(ctx)
	if err != nil {
		return fail(exitBadInput, "rig-log: %v", err)
	}
	cfg, err := rigConfig(ctx, st, c)
	if err != nil {
		return fail(exitBadInput, "rig-log: %v", err)
	}
	b, err := os.ReadFile(file)
	if err != nil {
		return fail(exitBadInput, "rig-log: %v", err)
	}
	l, err := campaign.StoreRigLog(ctx, st, c, file, b, cfg)
	var rerr *riglog.Error
	if errors.As(err, &rerr) {
		return fail(exitBadInput, "rig-log: %s", usermsg.Clean(err.Error(), "", file))
	}
	if err != nil {
		return fail(exitFailure, "rig-log: %v", err)
	}
	rows, err := series.Load(ctx, st, name)
	if err != nil {
		return fail(exitFailure, "rig-log: %v", err)
	}
	riglog.Apply(rows, l, cfg)
	g := riglog.GeometryOf(rows, cfg)
	if err := series.Save(ctx, st, name, rows); err != nil {
		return fail(exitFailure, "rig-log: %v", err)
	}
	covered := 0
	for i := range rows {
		if rows[i].RigVolume != nil {
			covered++
		}
	}
	fmt.Fprintf(stdout, "campaign %s: rig log %s stored (%d records); %d of %d steps lie within its time span (%s interpolation)\n",
		name, file, l.Len(), covered, len(rows), cfg.InterpolationOrDefault())
	if g.PoreVolume > 0 {
		fmt.Fprintf(stdout, "pore volume %.4g m³ (%s)\n", g.PoreVolume, g.PoreVolumeFrom)
	}
	if g.Area > 0 {
		fmt.Fprintf(stdout, "cross-section %.4g m² (%s)\n", g.Area, g.AreaFrom)
	}
	return exitOK
}

// checkRigLog checks --rig-log before anything starts: it needs --watch
// and a rig_log section, and a file already there must read right.
func checkRigLog(f ingestFlags, cfg campaign.Config) error {
	if f.rigLog == "" {
		return nil
	}
	if f.watch == "" {
		return errors.New("--rig-log follows the rig log while a directory is watched (--watch); for a finished campaign use `sluice rig-log CAMPAIGN FILE`")
	}
	if cfg.RigLog == nil {
		return fmt.Errorf("--rig-log %s: the campaign %s has no rig_log section in its configuration: map the log's columns and their units there first", f.rigLog, f.campaign)
	}
	b, err := os.ReadFile(f.rigLog)
	if errors.Is(err, fs.ErrNotExist) {
		return nil // the rig may start after the scanner
	}
	if err != nil {
		return fmt.Errorf("--rig-log %w", err)
	}
	if _, err := riglog.ParseComplete(f.rigLog, b, *cfg.RigLog); err != nil {
		return err
	}
	return nil
}

// rigReport describes the campaign's rig log for the report: nil without a
// rig_log section; the file, records and settings otherwise, with a note
// when no log is stored or it cannot be read.
func rigReport(ctx context.Context, st campaign.Getter, c layout.Campaign, cfg *riglog.Config, rows []series.Row) *report.RigLog {
	if cfg == nil {
		return nil
	}
	g := riglog.GeometryOf(rows, *cfg)
	r := &report.RigLog{Interpolation: cfg.InterpolationOrDefault(), ClockOffsetS: cfg.ClockOffsetS, ViscosityPaS: cfg.ViscosityPaS,
		PoreVolumeFrom: g.PoreVolumeFrom, AreaFrom: g.AreaFrom}
	var src campaign.RigLogSource
	_ = campaign.GetJSON(ctx, st, campaign.RigLogSourceKey(c), &src) // absent: File stays empty
	r.File, r.Records = src.File, src.Records
	l, err := campaign.LoadRigLog(ctx, st, c, *cfg)
	switch {
	case err != nil:
		r.Note = "The stored log cannot be read: " + usermsg.Clean(err.Error(), "") + "."
	case l == nil:
		r.File, r.Note = "(none stored)", "No log has been stored for this campaign yet."
	}
	return r
}
