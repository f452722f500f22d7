package main

import (
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net"
	"os"
	"path/filepath"
	"runtime"
	"text/tabwriter"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/events"
	"sluice/pkg/forward"
	"sluice/pkg/layout"
	"sluice/pkg/scenario"
	"sluice/pkg/segment"
	"sluice/pkg/series"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
	"sluice/services/ingest"
)

// demoScenario is the demo's story, printed and recorded with the campaign.
const demoScenario = `Synthetic drainage (our own scenario, for demonstration only): gas invades a
brine-filled sandstone-like grain pack in a cylindrical sleeve, from the inlet at z = 0. A long-exposure
reference scan of the brine-saturated core gives the rock; each fast scan is a full-morphology drainage
state (Hilpert & Miller 2001) at a falling capillary radius r_c, rendered as a noisy, blurred 16-bit
reconstruction (gas darkest, brine, rock brightest; CNR 5). Then r_c is held nearly constant (steady
state), and in the last steps it rises again: brine re-invades the throats from the outlet (imbibition),
cutting the gas into trapped ganglia that stay, shrink and split.`

// demoImbibitionSteps is the number of imbibition steps at the end of a
// demo of n steps: 4, fewer when the steps leave no drainage ramp of 2
// before the 5 steady ones.
func demoImbibitionSteps(n int) int { return min(4, max(0, n-7)) }

// runDemo is `sluice demo`.
func runDemo(args []string) int {
	fs := flag.NewFlagSet("demo", flag.ContinueOnError)
	size := fs.Int("size", 256, "edge of the cubic scans in voxels")
	steps := fs.Int("steps", 20, "number of scans")
	data := fs.String("data", "sluice-demo", "data directory (store, NATS, incoming scans, plots, report); reset at start")
	httpAddr := fs.String("http", "127.0.0.1:8470", "address of the live page and /metrics")
	workers := fs.Int("workers", runtime.GOMAXPROCS(0), "tile workers")
	tile := fs.Int("tile", 128, "tile edge in voxels")
	seed := fs.Uint64("seed", 1, "rock seed")
	serve := fs.Bool("serve", false, "keep serving the live page after the campaign ends (Ctrl-C to stop)")
	verbose := fs.Bool("v", false, "log every ingested and completed step")
	if _, code, ok := parseOrUsage(fs, args); !ok {
		return code
	}
	if *size < 64 || *steps < 7 {
		return fail(exitBadInput, "demo: --size must be ≥ 64 and --steps ≥ 7 (a drainage ramp of at least 2 steps, then 5 steady ones)")
	}
	ctx, stop := signalContext()
	defer stop()
	level := slog.LevelWarn
	if *verbose {
		level = slog.LevelInfo
	}
	log := slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: level}))
	if err := resetDemoDir(*data); err != nil {
		return fail(exitBadInput, "demo: %v", err)
	}
	incoming := filepath.Join(*data, "incoming")
	sc := &scenario.Campaign{Shape: [3]int{*size, *size, *size}, Steps: *steps, Seed: *seed, ImbibitionSteps: demoImbibitionSteps(*steps)}
	start := time.Now()
	fmt.Fprintln(stdout, demoScenario)
	fmt.Fprintf(stdout, "\npreparing the rock (%d³ voxels, %d steps) …\n", *size, *steps)
	if err := sc.Prepare(); err != nil {
		return fail(exitFailure, "demo: %v", err)
	}
	cfg := demoConfig(sc, *tile)
	cfgPath := filepath.Join(*data, "campaign.yaml")
	if err := writeDemoConfig(cfgPath, cfg); err != nil {
		return fail(exitFailure, "demo: %v", err)
	}
	nf := nodeFlags{data: *data, http: *httpAddr, ackWait: 30 * time.Second, maxDeliver: 5}
	rigPath := filepath.Join(*data, "rig", "rig-log.csv")
	rig, err := newDemoRig(rigPath, sc)
	if err != nil {
		return fail(exitFailure, "demo: %v", err)
	}
	f := ingestFlags{campaign: "demo-drainage", config: cfgPath, watch: incoming, rigLog: rigPath}
	{
		st, err := nf.openStore(ctx)
		if err != nil {
			return fail(exitFailure, "demo: %v", err)
		}
		fmt.Fprintln(stdout, "segmenting the reference scan (brine-saturated, long exposure) into the solid mask …")
		if err := prepareDemoCampaign(ctx, st, f.campaign, sc, cfg); err != nil {
			return fail(exitFailure, "demo: %v", err)
		}
	}
	nctx, nstop := context.WithCancel(ctx)
	// The default port may be taken (another sluice on this node): the demo
	// then serves on any free port rather than failing.
	if ln, err := net.Listen("tcp", nf.http); err == nil {
		ln.Close()
	} else if nf.http != "" {
		fmt.Fprintf(stdout, "%s is busy; serving the live page on a free port instead\n", nf.http)
		nf.http = "127.0.0.1:0"
	}
	node, err := startAll(nctx, nf, inputFlags{}, f, *workers, log)
	if err != nil {
		nstop()
		return fail(exitFailure, "demo: %v", err)
	}
	fmt.Fprintf(stdout, "live page: http://%s/   metrics: http://%s/metrics\n\n", node.url, node.url)

	st, err := nf.openStore(ctx)
	if err != nil {
		nstop()
		return fail(exitFailure, "demo: %v", err)
	}
	rowsDone := func() []series.Row {
		rows, _ := series.Load(ctx, st, f.campaign)
		return rows
	}
	// The beamline: write each scan into the watched directory, then its
	// marker. Back-pressure keeps at most two scans ahead of the pipeline,
	// as a beamline's scan interval matched to the processing rate would.
	cyl := demoCylinder(sc)
	printed := 0
	// The generator reports its end on genc (nil when every scan was
	// written); the loop below is the only reader, so nothing is shared.
	genc := make(chan error, 1)
	go func() {
		written := 0
		for i := 0; i < *steps && ctx.Err() == nil; i++ {
			for ctx.Err() == nil && written-len(rowsDone()) >= 2 {
				time.Sleep(200 * time.Millisecond)
			}
			// The rig logs on past the scan's time, so the step's
			// values are interpolated between records.
			if err := rig.writeUntil(sc.Truth(i).TimeS + 2*demoRigEvery); err != nil {
				genc <- err
				return
			}
			if err := writeScan(incoming, sc, i, cyl); err != nil {
				genc <- err
				return
			}
			written++
		}
		genc <- rig.writeUntil(sc.Truth(*steps-1).TimeS + sc.Interval)
	}()
	var genErr error
	tick := time.NewTicker(500 * time.Millisecond)
	defer tick.Stop()
	for ctx.Err() == nil {
		rows := rowsDone()
		for ; printed < len(rows); printed++ {
			r := rows[printed]
			fmt.Fprintf(stdout, "step %-10s t = %5.0f s  S_w = %.3f  Pc = %s  θ = %s  ganglia %s  (%s)\n", r.Step, r.Time,
				series.F(r.SatWetting), fmtPtr(r.Pc, 1e-3, "%.2f kPa"), fmtPtr(r.AngleMean, 1, "%.1f°"), fmtInt(r.GangliaCount),
				time.Since(start).Round(time.Second))
		}
		if len(rows) >= *steps || genErr != nil {
			break
		}
		select {
		case err := <-genc:
			genErr = err
		case <-tick.C:
		case <-ctx.Done():
		case <-node.stopping:
		}
		if ctx.Err() == nil && isDone(node.stopping) { // a part of the node failed
			nstop()
			node.wg.Wait()
			return fail(exitFailure, "demo: %v", node.err)
		}
	}
	if genErr != nil {
		nstop()
		return fail(exitFailure, "demo: writing scans: %v", genErr)
	}
	wall := time.Since(start)
	if err := settleDemoRig(ctx, st, f.campaign, rigPath); err != nil {
		nstop()
		return fail(exitFailure, "demo: rig log: %v", err)
	}
	rows := rowsDone()
	code := summarizeDemo(ctx, stdout, *data, f.campaign, sc, rows, wall, node.url)
	if *serve && ctx.Err() == nil {
		fmt.Fprintf(stdout, "\nserving http://%s/ until Ctrl-C\n", node.url)
		<-ctx.Done()
	}
	nstop()
	node.wg.Wait()
	return code
}

func fmtPtr(p *float64, scale float64, format string) string {
	if p == nil {
		return "—"
	}
	return fmt.Sprintf(format, *p*scale)
}

func fmtInt(p *int64) string {
	if p == nil {
		return "—"
	}
	return fmt.Sprint(*p)
}

// demoConfig is the campaign configuration of the demo scenario.
func demoConfig(sc *scenario.Campaign, tile int) campaign.Config {
	cfg := campaign.Default()
	cfg.Tile = tile
	cfg.VoxelSize = volume.FormatLength(sc.VoxelSize)
	cfg.IFT = sc.IFT
	// Reference-scan mode, as practitioners get clean fluid maps from fast
	// scans: the rock comes from one long-exposure scan of the
	// brine-saturated core (prepareDemoCampaign), each step only separates
	// gas from brine inside that pore space, with one fluid threshold for
	// the whole series, midway between the calibrated gas and brine greys
	// (per-step Otsu would split the brine peak while little gas has
	// entered), and the scanner blur corrected at the rock walls.
	lv := forward.Default()
	cfg.Segment.Reference = true
	cfg.Segment.Threshold = "fixed"
	cfg.Segment.Fixed = []float64{(lv.Nonwetting + lv.Wetting) / 2}
	cfg.Segment.PartialVolume.Blur = lv.Blur
	cfg.Segment.PartialVolume.SolidGrey = lv.Solid
	// With the blur corrected the threshold assignment is the more accurate
	// one in reference mode (pkg/segment doc: ΔA_wn −5.1 % against −10.4 %
	// with the watershed on top, pack at CNR 5), and it keeps the halo
	// within the demo's 32-voxel tiles.
	cfg.Segment.Assign = segment.AssignThreshold
	// Gas specks of fewer than 10 voxels (a ball of radius ~1.3 voxels) are
	// below what CNR 5 resolves and are counted as brine (common practice).
	cfg.Segment.MinIsland = 10
	cfg.DetectSample = false
	cfg.Segment.Sample.Y, cfg.Segment.Sample.X, cfg.Segment.Sample.Radius = float64(sc.Shape[1]-1)/2, float64(sc.Shape[2]-1)/2, sc.Rock.CoreRadius
	e := demoEvents()
	cfg.Events = campaign.Events{SteadySteps: e.K, MaxDeltaSw: e.MaxDeltaSw, MaxRelDeltaPc: e.MaxRelDeltaPc}
	cfg.RigLog = demoRigConfig()
	return cfg
}

// singleScanConfig is demoConfig without a reference scan: 3-class
// segmentation of each scan with thresholds fixed midway between the
// calibrated grey levels of the phases.
func singleScanConfig(sc *scenario.Campaign, tile int) campaign.Config {
	cfg := demoConfig(sc, tile)
	lv := forward.Default()
	cfg.Segment.Reference = false
	cfg.Segment.Fixed = []float64{(lv.Nonwetting + lv.Wetting) / 2, (lv.Wetting + lv.Solid) / 2}
	cfg.Segment.PartialVolume = campaign.Default().Segment.PartialVolume
	cfg.Segment.Assign = campaign.Default().Segment.Assign // no blur correction: the watershed is the better one
	cfg.RigLog = nil                                       // no rig log: these configurations measure scans only
	return cfg
}

// demoEvents are the demo's steady-state tolerances: image-derived Pc of
// these small samples fluctuates by a few per cent from scan to scan
// (measured ±3 % at 96³ with the same r_c), so Pc counts as steady within
// 5 %; saturation within 0.005.
func demoEvents() events.Options {
	o := events.Defaults()
	o.MaxRelDeltaPc = 0.05
	return o
}

// prepareDemoCampaign creates the demo campaign with its configuration and
// stores the solid mask segmented from a rendered reference scan: the rock
// with brine in every pore, long exposure (CNR 20).
func prepareDemoCampaign(ctx context.Context, st store.Store, name string, sc *scenario.Campaign, cfg campaign.Config) error {
	if _, err := ingest.EnsureCampaign(ctx, st, name, cfg, Version, demoScenario); err != nil {
		return err
	}
	rock, _ := sc.RockLabels()
	p := forward.Default()
	p.CNR, p.Seed, p.Sample = 20, 1<<20, demoCylinder(sc)
	g, err := forward.Render(rock, p)
	if err != nil {
		return err
	}
	ref := forward.Uint16(g)
	ref.VoxelSize = sc.VoxelSize
	var sf segFlags
	s := cfg.Segment.Sample
	sf.sample = fmt.Sprintf("%g,%g,%g", s.Y, s.X, s.Radius)
	mask, _, err := solidMask(ref, "none", "isodata", false, cfg.Segment.Codes, sf)
	if err != nil {
		return err
	}
	c, err := layout.NewCampaign(name)
	if err != nil {
		return err
	}
	_, err = storeReference(ctx, st, c, ref, mask, cfg.Tile)
	return err
}

// demoCylinder is the sample cell of the demo's forward model.
func demoCylinder(sc *scenario.Campaign) *forward.Cylinder {
	return &forward.Cylinder{Y: float64(sc.Shape[1]-1) / 2, X: float64(sc.Shape[2]-1) / 2, Radius: sc.Rock.CoreRadius, Wall: 2}
}

// resetDemoDir empties a previous demo's data directory; it refuses to
// touch a non-empty directory that is not a demo directory.
func resetDemoDir(dir string) error {
	mark := filepath.Join(dir, ".sluice-demo")
	if ents, err := os.ReadDir(dir); err == nil && len(ents) > 0 {
		if _, err := os.Stat(mark); err != nil {
			return fmt.Errorf("%s exists and is not a sluice demo directory; choose another --data", dir)
		}
		if err := os.RemoveAll(dir); err != nil {
			return err
		}
	}
	if err := os.MkdirAll(filepath.Join(dir, "incoming"), 0o755); err != nil {
		return err
	}
	return os.WriteFile(mark, []byte("sluice demo data; removed by the next `sluice demo`\n"), 0o644)
}

func writeDemoConfig(path string, c campaign.Config) error {
	b, err := json.MarshalIndent(c, "", "  ")
	if err != nil {
		return err
	}
	return os.WriteFile(path, b, 0o644)
}

// writeScan renders step i and hands it over as a beamline would: data
// first, then the marker.
func writeScan(dir string, sc *scenario.Campaign, i int, cyl *forward.Cylinder) error {
	lab, _, t := sc.Step(i)
	p := forward.Default()
	p.Sample = cyl
	p.Seed = uint64(i + 1)
	g, err := forward.Render(lab, p)
	if err != nil {
		return err
	}
	grey := forward.Uint16(g)
	grey.VoxelSize = sc.VoxelSize
	name := filepath.Join(dir, fmt.Sprintf("scan-%04d.raw", i))
	if err := volio.WriteRaw(name, grey, volio.WriteOptions{TimeS: t, HasTime: true}); err != nil {
		return err
	}
	return os.WriteFile(name+".done", []byte(fmt.Sprintf("{\"time_s\": %g}\n", t)), 0o644)
}

// summarizeDemo prints the series table, compares events with the truth,
// writes plots and the report, and says where everything is.
func summarizeDemo(ctx context.Context, w io.Writer, data, name string, sc *scenario.Campaign, rows []series.Row, wall time.Duration, url string) int {
	fmt.Fprintf(w, "\n%d steps measured in %s (%.1f s per step).\n\n", len(rows), wall.Round(time.Second), wall.Seconds()/float64(max(len(rows), 1)))
	tw := tabwriter.NewWriter(w, 0, 2, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "step\ttime s\tr_c vox\tφ\tS_w\tS_w truth\tPc kPa\t2σ/r_c kPa\ta_wn 1/mm\tθ mean °\tθ sd °\tganglia\tpercolates\t")
	for i, r := range rows {
		tr := sc.Truth(i)
		lab, _, _ := sc.Step(i)
		fmt.Fprintf(tw, "%s\t%.0f\t%.2f\t%.3f\t%.3f\t%.3f\t%s\t%.2f\t%s\t%s\t%s\t%s\t%v\t\n", r.Step, r.Time, sc.Rc(i), series.F(r.Porosity),
			series.F(r.SatWetting), 1-sc.Saturation(lab), fmtPtr(r.Pc, 1e-3, "%.2f"), tr.Pc/1e3, fmtPtr(r.SpecificWN, 1e-3, "%.2f"),
			fmtPtr(r.AngleMean, 1, "%.1f"), fmtPtr(r.AngleStd, 1, "%.1f"), fmtInt(r.GangliaCount), boolPtr(r.Percolates))
	}
	tw.Flush()
	fmt.Fprintln(w, "\nPc is σ times the area-weighted mean curvature of all w–n interface. In full-morphology drainage states")
	fmt.Fprintln(w, "only the terminal menisci are spheres of radius r_c (Pc = 2σ/r_c); interfaces wrapping brine in corners")
	fmt.Fprintln(w, "and around grain contacts are closer to tubes (κ ≈ 1/r_c), so the image average sits below 2σ/r_c.")
	if n := len(rows); n > 0 {
		r := rows[n-1]
		fmt.Fprintf(w, "\nrig log (demo pump and transducer): step %s at %s pore volumes injected, Ca %s, transducer %s, image Pc of the connected gas %s\n",
			r.Step, fmtPtr(r.PoreVolumesInjected, 1, "%.3f"), fmtPtr(r.CapillaryNumber, 1, "%.2e"), fmtPtr(r.RigDiffPressure, 1e-3, "%.2f kPa"),
			fmtPtr(r.PcConnected, 1e-3, "%.2f kPa"))
	}
	evs, _ := events.Detect(rows, demoEvents())
	fmt.Fprintln(w)
	bt := sc.Breakthrough()
	for _, e := range evs {
		fmt.Fprintf(w, "event: %s at step %s (t = %.0f s): %s\n", e.Kind, e.Step, e.Time, e.Detail)
	}
	if bt >= 0 && bt < len(rows) {
		first := sc.Steps - sc.ImbibitionSteps - sc.SteadySteps
		fmt.Fprintf(w, "ground truth: breakthrough at step %s; steps %d–%d are near steady state\n", rows[bt].Step, first, first+sc.SteadySteps-1)
	}
	apart := false // a step whose image trapped saturation is off the truth by more than 0.005
	for i := sc.Steps - sc.ImbibitionSteps; i < sc.Steps && i < len(rows); i++ {
		lab, _, _ := sc.Step(i)
		truth, img := sc.TrappedSaturation(lab), rows[i].Tracking().TrappedSaturation
		fmt.Fprintf(w, "ground truth: imbibition step %s, r_c %.2f voxels, trapped gas saturation %.4f (image: %s)\n", rows[i].Step, sc.Rc(i),
			truth, fmtPtr(img, 1, "%.4f"))
		apart = apart || (img != nil && math.Abs(*img-truth) > 0.005)
	}
	if apart {
		fmt.Fprintln(w, "  (trapped or connected is decided by single voxels: a trapped ganglion one brine voxel away from the connected\n"+
			"  gas joins it where noise and blur make that voxel read as gas, and its volume then counts as connected)")
	}
	st, err := storeAt(filepath.Join(data, "store"))
	if err != nil {
		return fail(exitFailure, "demo: %v", err)
	}
	plotDir := filepath.Join(data, "plots")
	files, err := writePlots(plotDir, plotRun(ctx, st, name), rows, evs)
	if err != nil {
		return fail(exitFailure, "demo: plots: %v", err)
	}
	report := filepath.Join(data, "report.html")
	if err := writeReport(ctx, st, report, name, demoScenario); err != nil {
		return fail(exitFailure, "demo: report: %v", err)
	}
	store := filepath.Join(data, "store", "campaigns", name)
	fmt.Fprintf(w, "\nseries:   %s\n          %s\n", filepath.Join(store, "series.csv"), filepath.Join(store, "series.json"))
	fmt.Fprintf(w, "results:  %s\n", filepath.Join(store, "steps", "<step>", "result.json"))
	fmt.Fprintf(w, "plots:    %s (%d files, PNG and SVG)\n", plotDir, len(files))
	fmt.Fprintf(w, "report:   %s\n", report)
	fmt.Fprintf(w, "metrics:  http://%s/metrics (while running; `sluice demo --serve` keeps it up)\n", url)
	fmt.Fprintf(w, "\nThe demo's data are in %s, not in the default --data %s: pass it to the other commands, e.g.\n", data, defaultData)
	fmt.Fprintf(w, "  sluice report --data %s %s\n  sluice status --data %s %s\n", data, name, data, name)
	fmt.Fprintln(w, "\nCaution: image-derived capillary pressure and contact angles are estimates; their error grows as radii")
	fmt.Fprintln(w, "of curvature approach a few voxels. Real flow experiments involve pressurised cells, CO2 and radiation:")
	fmt.Fprintln(w, "follow the facility's safety rules.")
	return exitOK
}

func boolPtr(p *bool) string {
	if p == nil {
		return "—"
	}
	return fmt.Sprint(*p)
}
