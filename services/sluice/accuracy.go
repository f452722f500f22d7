package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"runtime"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"sluice/pkg/accuracy"
	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/layout"
	"sluice/pkg/phase"
	"sluice/pkg/scan"
	"sluice/pkg/segment"
	"sluice/pkg/series"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// Region edges of `sluice accuracy`.
const (
	accuracyDefaultRegion = 96
	accuracyMaxRegion     = 160
	accuracyMinRegion     = 16
)

// runAccuracy is `sluice accuracy`: the bias and spread of S_w, a_wn, Pc
// and θ that the campaign's processing gives in its own rock at its
// resolution (package accuracy).
func runAccuracy(args []string) int {
	fs := flag.NewFlagSet("accuracy", flag.ContinueOnError)
	var cf campaignFlags
	var in inputFlags
	cf.register(fs)
	in.register(fs)
	stepName := fs.String("step", "", "step whose scan gives the grey levels, noise and blur (default: the campaign's last step)")
	region := fs.String("region", "", fmt.Sprintf("region `Z0,Y0,X0,SIZE` of the scan (a cube of edge %d…%d voxels; default: the centred %d³, or the scan's smallest edge)", accuracyMinRegion, accuracyMaxRegion, accuracyDefaultRegion))
	theta := fs.Float64("theta", accuracy.DefaultTheta, "prescribed contact angle through the wetting phase, degrees (0 ≤ θ < 90)")
	states := fs.Int("states", accuracy.DefaultStates, "number of equilibrium states (capillary pressures)")
	minRadius := fs.Float64("min-radius", accuracy.DefaultMinRadius, "smallest radius of curvature σ/Pc of the states, voxels")
	seed := fs.Uint64("seed", 1, "seed of the rendered noise")
	workers := fs.Int("workers", runtime.GOMAXPROCS(0), "goroutines")
	jsonOut := fs.String("json", "", "also write the report as JSON to `FILE`")
	mask := fs.String("mask", "", "solid mask `FILE` (uint8 labels; the config's solid code is solid, every other code pore) instead of a campaign")
	config := fs.String("config", "", "campaign config for --mask (segmentation and measurement; default: the defaults)")
	levels := fs.String("levels", "", "grey levels `N,W,S` of nonwetting, wetting and solid for --mask (default: the forward model's 14000,24000,40000)")
	noise := fs.Float64("noise", -1, "noise σ in grey units for --mask (default: (W − N)/5)")
	blur := fs.Float64("blur", 0.7, "blur σ in voxels for --mask")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	set := givenFlags(fs)
	opt := accuracy.Options{Theta: *theta, States: *states, MinRadius: *minRadius, Seed: *seed, Workers: *workers}
	if err := opt.Defaults(); err != nil {
		return fail(exitBadInput, "accuracy: %v", err)
	}
	ctx, stop := signalContext()
	defer stop()
	var (
		inp  accuracy.Input
		save func(*accuracy.Report) (string, error)
	)
	if *mask != "" {
		if len(pos) != 0 {
			return fail(exitBadInput, "accuracy: --mask FILE takes no CAMPAIGN (got %q)", pos[0])
		}
		for _, n := range []string{"data", "store", "step"} {
			if set[n] {
				return fail(exitBadInput, "accuracy: --%s reads a campaign; with --mask %s there is none (leave --%s out)", n, *mask, n)
			}
		}
		var err error
		inp, err = maskInput(*mask, in, set, *config, *levels, *noise, *blur, *region)
		if err != nil {
			return fail(exitBadInput, "accuracy: %v", err)
		}
	} else {
		if len(pos) != 1 {
			return fail(exitBadInput, "accuracy: want one CAMPAIGN (or --mask FILE)")
		}
		for _, n := range []string{"config", "levels", "noise", "blur", "shape", "dtype", "byte-order", "voxel-size", "dataset", "max-voxels"} {
			if set[n] {
				return fail(exitBadInput, "accuracy: --%s is for --mask; campaign %s gives it from its own config and scans (leave --%s out)", n, pos[0], n)
			}
		}
		st, err := cf.open(ctx)
		if err != nil {
			return fail(exitBadInput, "accuracy: %v", err)
		}
		c, err := layout.NewCampaign(pos[0])
		if err != nil {
			return fail(exitBadInput, "accuracy: %v", err)
		}
		var rec campaign.Record
		var step string
		inp, rec, step, err = campaignInput(ctx, st, c, *stepName, *region)
		if err != nil {
			return fail(exitBadInput, "accuracy: %v", err)
		}
		save = func(r *accuracy.Report) (string, error) {
			r.Campaign, r.Step, r.ParamHash = c.Name(), step, rec.Current
			key := campaign.AccuracyKey(c, rec.Current)
			return key, campaign.PutJSON(ctx, st, key, r)
		}
		fmt.Fprintf(os.Stderr, "campaign %s, step %s, run %s\n", c.Name(), step, rec.Current)
	}
	e := inp.Scan
	fmt.Fprintf(stdout, "region %v of %s voxels, voxel %s; grey levels n %.0f, w %.0f, s %.0f; noise σ %.1f (CNR %.1f); blur σ %.2f voxels\n",
		inp.Solid.Box.Min, sizeString(inp.Solid.Box.Size()), volume.FormatLength(inp.Solid.VoxelSize), e.Nonwetting, e.Wetting, e.Solid, e.Noise,
		math.Abs(e.Wetting-e.Nonwetting)/math.Max(e.Noise, 1e-12), e.Blur)
	bar := newProgressBar(os.Stderr, "accuracy")
	rep, err := accuracy.Run(inp, opt, func(d, t int64, what string) {
		bar.label = "accuracy: " + what
		bar.update(d, t)
	})
	bar.done()
	if err != nil {
		if ctx.Err() != nil {
			return fail(exitFailure, "accuracy: interrupted")
		}
		return fail(exitBadInput, "accuracy: %v", err)
	}
	rep.Version = Version
	rep.CreatedAt = time.Now().UTC().Format(time.RFC3339)
	writeAccuracyTable(stdout, rep)
	if save != nil {
		key, err := save(rep)
		if err != nil {
			return fail(exitFailure, "accuracy: %v", err)
		}
		fmt.Fprintf(stdout, "stored at %s (the report and the live page show it)\n", key)
	}
	if *jsonOut != "" {
		b, err := json.MarshalIndent(rep, "", "  ")
		if err == nil {
			err = os.WriteFile(*jsonOut, append(b, '\n'), 0o644)
		}
		if err != nil {
			return fail(exitFailure, "accuracy: %v", err)
		}
	}
	return exitOK
}

func sizeString(s [3]int) string { return fmt.Sprintf("%d×%d×%d", s[0], s[1], s[2]) }

// parseRegion reads "Z0,Y0,X0,SIZE" and checks it against the scan's
// shape. Empty gives the default: the centred cube of edge 96, or smaller
// to fit the scan and, with a sample cylinder (radius > 0), the square
// inscribed in its cross-section, centred on its axis.
func parseRegion(s string, shape [3]int, sample segment.Sample) (volume.Box, error) {
	if s == "" {
		e := min(accuracyDefaultRegion, shape[0], shape[1], shape[2])
		cy, cx := float64(shape[1]-1)/2, float64(shape[2]-1)/2
		if sample.Radius > 0 {
			e = min(e, int(math.Sqrt2*sample.Radius)-1)
			cy, cx = sample.Y, sample.X
		}
		if e < accuracyMinRegion {
			return volume.Box{}, fmt.Errorf("scan %s (sample radius %g) is smaller than the smallest region (%d³)", sizeString(shape), sample.Radius, accuracyMinRegion)
		}
		var b volume.Box
		b.Min[0] = (shape[0] - e) / 2
		b.Min[1] = max(0, min(shape[1]-e, int(math.Round(cy-float64(e-1)/2))))
		b.Min[2] = max(0, min(shape[2]-e, int(math.Round(cx-float64(e-1)/2))))
		for a := 0; a < 3; a++ {
			b.Max[a] = b.Min[a] + e
		}
		return b, nil
	}
	parts := strings.Split(s, ",")
	if len(parts) != 4 {
		return volume.Box{}, fmt.Errorf("--region %q: want Z0,Y0,X0,SIZE", s)
	}
	var v [4]int
	for i, p := range parts {
		n, err := strconv.Atoi(strings.TrimSpace(p))
		if err != nil || n < 0 {
			return volume.Box{}, fmt.Errorf("--region %q: want four non-negative integers Z0,Y0,X0,SIZE", s)
		}
		v[i] = n
	}
	if v[3] < accuracyMinRegion || v[3] > accuracyMaxRegion {
		return volume.Box{}, fmt.Errorf("--region %q: size %d outside %d…%d voxels", s, v[3], accuracyMinRegion, accuracyMaxRegion)
	}
	b := volume.Box{Min: [3]int{v[0], v[1], v[2]}, Max: [3]int{v[0] + v[3], v[1] + v[3], v[2] + v[3]}}
	for a := 0; a < 3; a++ {
		if b.Max[a] > shape[a] {
			return volume.Box{}, fmt.Errorf("--region %q reaches %v, beyond the scan's shape %s", s, b.Max, sizeString(shape))
		}
	}
	return b, nil
}

// campaignInput reads what a Run needs from a stored campaign: the current
// run's plan of the step (effective configuration, registration), the
// step's grey values and labels in the region (the grey registered onto
// the reference grid as the workers read it), the solid mask (the
// reference mask in reference-scan mode, else the step's solid labels) and
// the campaign thresholds in threshold scope "campaign".
func campaignInput(ctx context.Context, st store.Store, c layout.Campaign, stepName, region string) (accuracy.Input, campaign.Record, string, error) {
	var inp accuracy.Input
	rec, err := campaign.LoadRecord(ctx, st, c)
	if err != nil {
		return inp, rec, "", err
	}
	if stepName == "" {
		rows, err := series.Load(ctx, st, c.Name())
		if err != nil {
			return inp, rec, "", err
		}
		if len(rows) == 0 {
			return inp, rec, "", fmt.Errorf("campaign %s has no measured step yet (its series is empty)", c.Name())
		}
		stepName = rows[len(rows)-1].Step
	}
	step, err := c.Step(stepName)
	if err != nil {
		return inp, rec, "", err
	}
	var man campaign.Manifest
	if err := campaign.GetJSON(ctx, st, step.Manifest(), &man); err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return inp, rec, "", fmt.Errorf("campaign %s has no step %s (%s missing)", c.Name(), stepName, step.Manifest())
		}
		return inp, rec, "", err
	}
	var plan campaign.Plan
	if err := campaign.GetJSON(ctx, st, campaign.PlanKey(step, rec.Current), &plan); err != nil {
		return inp, rec, "", fmt.Errorf("step %s has no plan under the current run %s: %w", stepName, rec.Current, err)
	}
	box, err := parseRegion(region, man.Shape, plan.Thresholds.Sample)
	if err != nil {
		return inp, rec, "", err
	}
	lz, err := volio.OpenZarr(ctx, st, strings.TrimSuffix(step.Labels(), "/"))
	if err != nil {
		return inp, rec, "", fmt.Errorf("step %s has no labels (not measured yet?): %w", stepName, err)
	}
	la, err := lz.ReadBox(ctx, box)
	if err != nil {
		return inp, rec, "", err
	}
	lab, ok := la.(*volume.Labels)
	if !ok {
		return inp, rec, "", fmt.Errorf("%s: labels are %s, want uint8", step.Labels(), la.DType())
	}
	gz, err := volio.OpenZarr(ctx, st, strings.TrimSuffix(step.Volume(), "/"))
	if err != nil {
		return inp, rec, "", err
	}
	src := scan.Source(func(b volume.Box) (volume.Any, error) { return gz.ReadBox(ctx, b) })
	if r := plan.Registration; r != nil {
		src = scan.Registered(src, man.Whole(), r.Applied)
	}
	grey, err := src(box)
	if err != nil {
		return inp, rec, "", err
	}
	cfg := plan.Config
	codes := cfg.Segment.Codes
	est, err := accuracy.Estimate(grey, lab, codes)
	if err != nil {
		return inp, rec, "", fmt.Errorf("step %s, region %v: %w", stepName, box, err)
	}
	if math.IsNaN(est.Nonwetting) || math.IsNaN(est.Wetting) {
		return inp, rec, "", fmt.Errorf("step %s holds no interior of both fluids in region %v (levels n %g, w %g): choose a step with both (--step) or another --region", stepName, box, est.Nonwetting, est.Wetting)
	}
	solid := lab
	if cfg.Segment.Reference {
		mz, err := volio.OpenZarr(ctx, st, strings.TrimSuffix(c.SolidMask(), "/"))
		if err != nil {
			return inp, rec, "", fmt.Errorf("reference-scan mode without a stored solid mask: %w", err)
		}
		m, err := mz.ReadBox(ctx, box)
		if err != nil {
			return inp, rec, "", err
		}
		if solid, ok = m.(*volume.Labels); !ok {
			return inp, rec, "", fmt.Errorf("%s: mask is %s, want uint8", c.SolidMask(), m.DType())
		}
	}
	solid.VoxelSize = man.VoxelSize
	var stored *segment.CampaignThresholds
	if cfg.Segment.ThresholdScope == segment.ScopeCampaign {
		key, err := c.Thresholds(rec.Current)
		if err != nil {
			return inp, rec, "", err
		}
		var ct segment.CampaignThresholds
		if err := campaign.GetJSON(ctx, st, key, &ct); err != nil {
			return inp, rec, "", fmt.Errorf("threshold scope campaign: %w", err)
		}
		stored = &ct
	}
	dt, err := volume.ParseDType(man.DType)
	if err != nil {
		return inp, rec, "", fmt.Errorf("%s: %w", step.Manifest(), err)
	}
	return accuracy.Input{Solid: solid, Config: cfg, Stored: stored, Scan: est, DType: dt}, rec, stepName, nil
}

// maskInput reads a plain solid-mask file for `accuracy --mask`.
func maskInput(path string, in inputFlags, set map[string]bool, config, levels string, noise, blur float64, region string) (accuracy.Input, error) {
	var inp accuracy.Input
	cfg, err := loadConfig(config)
	if err != nil {
		return inp, err
	}
	ropt, err := in.options()
	if err != nil {
		return inp, fmt.Errorf("%s: %w", path, err)
	}
	v, err := volio.Open(path, withDataset(ropt, cfg))
	if err != nil {
		return inp, err
	}
	lab, ok := v.(*volume.Labels)
	if !ok {
		return inp, fmt.Errorf("%s: a solid mask must be uint8 labels, not %s", path, v.DType())
	}
	vs, err := resolveVoxelSize(path, lab, in, set, cfg)
	if err != nil {
		return inp, err
	}
	if vs == 0 {
		return inp, fmt.Errorf("%s: no voxel size in the file, the config or --voxel-size", path)
	}
	lab.VoxelSize = vs
	box, err := parseRegion(region, lab.Box.Size(), segment.Sample{})
	if err != nil {
		return inp, fmt.Errorf("%s: %w", path, err)
	}
	sol := lab.Crop(box, 0)
	for i, c := range sol.Pix {
		if c != cfg.Segment.Codes.Solid && c != phase.Outside {
			sol.Pix[i] = cfg.Segment.Codes.Wetting
		}
	}
	lv := forward.Default()
	e := accuracy.ScanEstimate{Nonwetting: lv.Nonwetting, Wetting: lv.Wetting, Solid: lv.Solid, Blur: blur}
	if levels != "" {
		parts := strings.Split(levels, ",")
		var x [3]float64
		if len(parts) != 3 {
			return inp, fmt.Errorf("--levels %q: want N,W,S", levels)
		}
		for i, p := range parts {
			if x[i], err = strconv.ParseFloat(strings.TrimSpace(p), 64); err != nil || math.IsNaN(x[i]) || math.IsInf(x[i], 0) {
				return inp, fmt.Errorf("--levels %q: want three numbers N,W,S", levels)
			}
		}
		e.Nonwetting, e.Wetting, e.Solid = x[0], x[1], x[2]
	}
	e.Noise = noise
	if noise < 0 {
		e.Noise = math.Abs(e.Wetting-e.Nonwetting) / 5
	}
	if !(blur >= 0 && blur <= 5) {
		return inp, fmt.Errorf("--blur %g: want 0 to 5 voxels", blur)
	}
	dt := volume.Uint16
	if e.Solid < 0 || e.Wetting < 0 || e.Nonwetting < 0 || e.Solid > 65535 || e.Wetting > 65535 || e.Nonwetting > 65535 {
		dt = volume.Float32
	}
	return accuracy.Input{Solid: sol, Config: cfg, Scan: e, DType: dt}, nil
}

// writeAccuracyTable prints the states and the bias ± spread of each path.
func writeAccuracyTable(w io.Writer, r *accuracy.Report) {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	f := func(p *float64, scale float64, format string) string {
		if p == nil {
			return "—"
		}
		return fmt.Sprintf(format, *p*scale)
	}
	pcUnit, pcScale := "κ 1/mm", 1e-3
	pick := func(s accuracy.State) accuracy.Quantity { return s.Curvature }
	if r.IFT > 0 {
		pcUnit, pcScale = "Pc kPa", 1e-3
		pick = func(s accuracy.State) accuracy.Quantity { return s.Pc }
	}
	fmt.Fprintf(tw, "state\t%s set\tσ/Pc vox\tS_n true\tS_w true\tS_w grey\ta_wn true 1/mm\ta_wn grey\t%s labels\t%s grey\tθ set\tθ labels\tθ grey\t\n", pcUnit, pcUnit, pcUnit)
	for i, s := range r.States {
		if s.Skipped != "" {
			fmt.Fprintf(tw, "%d\t%s\t%.1f\t%.3f\t(%s)\t\t\t\t\t\t\t\t\t\n", i+1, f(pick(s).Truth, pcScale, "%.3f"), s.CornerRadius, s.SatNonwet, s.Skipped)
			continue
		}
		fmt.Fprintf(tw, "%d\t%s\t%.1f\t%.3f\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", i+1, f(pick(s).Truth, pcScale, "%.3f"), s.CornerRadius, s.SatNonwet,
			f(s.SatWetting.Truth, 1, "%.3f"), f(s.SatWetting.Grey, 1, "%.3f"),
			f(s.SpecificWN.Truth, 1e-3, "%.2f"), f(s.SpecificWN.Grey, 1e-3, "%.2f"),
			f(pick(s).Labels, pcScale, "%.3f"), f(pick(s).Grey, pcScale, "%.3f"),
			f(s.AngleMean.Truth, 1, "%.0f"), f(s.AngleMean.Labels, 1, "%.1f"), f(s.AngleMean.Grey, 1, "%.1f"))
	}
	tw.Flush()
	fmt.Fprintln(w)
	tw = tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	bs := func(s accuracy.Stat, scale float64, format string) string {
		if s.Bias == nil {
			return "—"
		}
		out := fmt.Sprintf(format, *s.Bias*scale)
		if s.Spread != nil {
			out += " ± " + fmt.Sprintf(format, *s.Spread*scale)
		}
		return out
	}
	fmt.Fprintf(tw, "error (bias ± spread over states)\tS_w (abs.)\ta_wn (%%)\tPc (%%)\tθ (°)\t\n")
	for _, p := range []struct {
		name string
		s    accuracy.Summary
	}{{"measurement alone (true labels)", r.LabelsPath}, {"segmentation + measurement (rendered scans)", r.GreyPath}} {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t\n", p.name, bs(p.s.SatWetting, 1, "%+.4f"), bs(p.s.SpecificWN, 100, "%+.1f"), bs(p.s.Pc, 100, "%+.1f"), bs(p.s.Angle, 1, "%+.1f"))
	}
	tw.Flush()
	for _, n := range r.Notes {
		fmt.Fprintln(w, "note:", n)
	}
}
