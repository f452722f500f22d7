package main

import (
	"context"
	"flag"
	"fmt"
	"path/filepath"
	"strconv"
	"strings"

	"sluice/pkg/campaign"
	"sluice/pkg/phase"
	"sluice/pkg/scan"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// segFlags configure segmentation from flags, over an optional campaign
// config file.
type segFlags struct {
	config, filter, threshold, fixed, order, sample, reference string
	fluids, scope                                              string
	minIsland                                                  optionalInt
	band                                                       optionalFloat
	noise                                                      float64
	noDetect                                                   bool
}

func (s *segFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&s.config, "config", "", "campaign config file (YAML); flags below override it")
	fs.StringVar(&s.filter, "filter", "", "denoiser before thresholds: none, median (default), gaussian or nlm")
	fs.StringVar(&s.threshold, "threshold", "", "otsu (3-class multi-level Otsu on the filtered histogram, default) or fixed")
	fs.StringVar(&s.fixed, "fixed", "", "fixed grey thresholds `T1,T2` (darkest|middle, middle|brightest); implies --threshold fixed")
	fs.StringVar(&s.scope, "threshold-scope", "", "step (thresholds from each scan's own histogram, default) or campaign (fixed once from the first scan holding every phase, or --fixed, then followed for grey-level drift)")
	fs.StringVar(&s.order, "order", "", "phases from darkest to brightest: nws (gas/oil darkest, default) or nsw (doped brine)")
	fs.StringVar(&s.fluids, "fluids", "", "fluids the scan holds: auto (decided from the histogram, default), both, wetting or nonwetting")
	fs.Float64Var(&s.noise, "noise-sigma", 0, "noise standard deviation in grey units, for --filter nlm (measure it in a uniform region)")
	d := campaign.Default().Segment
	fs.Var(&s.minIsland, "min-island", fmt.Sprintf("nonwetting clusters smaller than this many `voxels` become wetting; 0 = off (default: the config's segment.min_island, else %d)", d.MinIsland))
	fs.Var(&s.band, "hysteresis-band", fmt.Sprintf("half-width in `grey` units of the uncertain band grown from nonwetting seeds; 0 = off (default: the config's segment.hysteresis.band, else %g)", d.Hysteresis.Band))
	fs.StringVar(&s.sample, "sample", "", "sample cylinder `Y,X,R` in voxels (default: detected from the image)")
	fs.BoolVar(&s.noDetect, "no-sample", false, "do not detect a sample cylinder: every voxel is sample")
	fs.StringVar(&s.reference, "reference", "", "reference-scan solid mask (labels: solid code = solid, 255 = outside); fluids only are separated")
}

// segOnlyFlags are the segFlags that act on grey input only (all but
// --config, which also holds label codes and measurement options).
var segOnlyFlags = []string{"filter", "threshold", "threshold-scope", "fixed", "order", "fluids", "noise-sigma", "min-island", "hysteresis-band", "sample", "no-sample", "reference"}

func (s *segFlags) campaignConfig() (campaign.Config, error) {
	c := campaign.Default()
	if s.config != "" {
		var err error
		if c, err = campaign.Load(s.config); err != nil {
			return c, err
		}
	}
	p := &c.Segment
	if s.filter != "" {
		p.Filter.Method = s.filter
	}
	if s.threshold != "" {
		p.Threshold = s.threshold
	}
	if s.noise > 0 {
		p.Filter.NLM.Sigma = s.noise
	}
	if s.fixed != "" {
		p.Threshold = "fixed"
		p.Fixed = nil
		for _, f := range strings.Split(s.fixed, ",") {
			v, err := strconv.ParseFloat(strings.TrimSpace(f), 64)
			if err != nil {
				return c, fmt.Errorf("bad --fixed %q", s.fixed)
			}
			p.Fixed = append(p.Fixed, v)
		}
	}
	if s.scope != "" {
		p.ThresholdScope = s.scope
	}
	if s.order != "" {
		p.Order = s.order
	}
	if s.fluids != "" {
		p.Fluids = s.fluids
	}
	if s.minIsland.set {
		p.MinIsland = s.minIsland.v
	}
	if s.band.set {
		p.Hysteresis.Band = s.band.v
	}
	if s.sample != "" {
		parts := strings.Split(s.sample, ",")
		if len(parts) != 3 {
			return c, fmt.Errorf("bad --sample %q (want Y,X,R)", s.sample)
		}
		var v [3]float64
		for i, q := range parts {
			f, err := strconv.ParseFloat(strings.TrimSpace(q), 64)
			if err != nil || (i == 2 && f <= 0) {
				return c, fmt.Errorf("bad --sample %q (want Y,X,R with R > 0)", s.sample)
			}
			v[i] = f
		}
		p.Sample.Y, p.Sample.X, p.Sample.Radius = v[0], v[1], v[2]
	}
	if s.noDetect {
		c.DetectSample = false
	}
	if s.reference != "" {
		p.Reference = true
	}
	return c, c.Validate()
}

// loadReference reads the reference-scan mask, if any; a code in it that is
// none of codes nor outside is refused with hint.
func (s *segFlags) loadReference(opt volio.Options, shape volume.Box, codes phase.Codes, hint string) (*volume.Labels, error) {
	if s.reference == "" {
		return nil, nil
	}
	v, err := volio.Open(s.reference, opt)
	if err != nil {
		return nil, err
	}
	l, ok := v.(*volume.Labels)
	if !ok {
		return nil, fmt.Errorf("segment: %s: reference mask must be uint8 labels, not %s", s.reference, v.DType())
	}
	if l.Box != shape {
		return nil, fmt.Errorf("segment: %s: reference mask covers %v, scan %v", s.reference, l.Box, shape)
	}
	if err := checkLabelCodes(s.reference, l, codes, hint); err != nil {
		return nil, err
	}
	return l, nil
}

func runSegment(args []string) int {
	fs := flag.NewFlagSet("segment", flag.ContinueOnError)
	var in inputFlags
	var sf segFlags
	in.register(fs)
	sf.register(fs)
	tile := fs.Int("tile", 0, "tile edge (default from config, 128); results do not depend on it")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if len(pos) != 2 {
		return fail(exitBadInput, "segment: want FILE and OUT, got %d arguments", len(pos))
	}
	path, out := pos[0], pos[1]
	cfg, err := sf.campaignConfig()
	if err != nil {
		return fail(exitBadInput, "segment: %v", err)
	}
	if *tile > 0 {
		cfg.Tile = *tile
	}
	if err := cfg.Validate(); err != nil {
		return fail(exitBadInput, "segment: %v", err)
	}
	lab, prep, code := segmentFile(path, in, givenFlags(fs), sf, cfg, true)
	if code != exitOK {
		return code
	}
	fmt.Fprintf(stdout, "thresholds (%s): %s\n", prep.Thresholds.Method, fmtFloats(prep.Thresholds.T))
	if s := prep.Thresholds.Sample; s.Radius > 0 {
		fmt.Fprintf(stdout, "sample cylinder: centre (y, x) = (%.1f, %.1f), radius %.1f voxels\n", s.Y, s.X, s.Radius)
	}
	cs := cfg.Segment.Codes
	if err := writeCodedLabels(out, lab, cs); err != nil {
		return fail(exitFailure, "segment: %s: %v", out, err)
	}
	fmt.Fprintf(stdout, "labels written to %s (%d solid, %d wetting, %d nonwetting, %d outside the sample)\n", out, cs.Solid, cs.Wetting, cs.Nonwetting, phase.Outside)
	if lab.VoxelSize == 0 {
		fmt.Fprintf(stdout, "voxel size unknown (no --voxel-size, config voxel_size or file metadata): none written to %s\n", out)
	}
	return exitOK
}

// segmentFile reads a grey volume and segments it; with measureToo=false
// the measurement is skipped.
func segmentFile(path string, in inputFlags, set map[string]bool, sf segFlags, cfg campaign.Config, labelsOnly bool) (*volume.Labels, scan.Prepared, int) {
	ropt, err := in.options()
	if err != nil {
		return nil, scan.Prepared{}, fail(exitBadInput, "segment: %s: %v", path, err)
	}
	ropt = withDataset(ropt, cfg)
	v, err := volio.Open(path, ropt)
	if err == nil {
		err = volio.CheckFinite(path, v)
	}
	if err != nil {
		return nil, scan.Prepared{}, fail(exitBadInput, "%v", err)
	}
	// Segmentation works in voxels; the voxel size only travels to the
	// label file's metadata, so an unknown one stays unknown there.
	if _, err := resolveVoxelSize(path, v, in, set, cfg); err != nil {
		return nil, scan.Prepared{}, fail(exitBadInput, "segment: %v", err)
	}
	solid, err := sf.loadReference(ropt, v.Bounds(), cfg.Segment.Codes, codesConfigHint)
	if err != nil {
		return nil, scan.Prepared{}, fail(exitBadInput, "%v", err)
	}
	if labelsOnly {
		cfg.Measure.SkipContact, cfg.Measure.SkipCurvature = true, true
	}
	lab, _, prep, err := scan.Whole(v, cfg, solid, 0)
	if err != nil {
		return nil, prep, fail(exitBadInput, "segment: %s: %v", path, err)
	}
	return lab, prep, exitOK
}

func writeLabels(out string, lab *volume.Labels) error {
	return writeCodedLabels(out, lab, phase.Default())
}

// writeCodedLabels writes labels made with codes; a Zarr array records
// them in its "phases" attribute.
func writeCodedLabels(out string, lab *volume.Labels, codes phase.Codes) error {
	if strings.HasSuffix(strings.TrimSuffix(out, "/"), ".zarr") {
		dir, name := filepath.Split(strings.TrimSuffix(out, "/"))
		if dir == "" {
			dir = "."
		}
		ctx := context.Background()
		s := lab.Shape()
		ch := [3]int{min(s[0], 128), min(s[1], 128), min(s[2], 128)}
		z, err := volio.CreateZarr(ctx, volio.Dir(dir), name, volio.ZarrMeta{Shape: s, Chunks: ch, DType: volume.Uint8, Compressor: "zstd", VoxelSize: lab.VoxelSize,
			Attrs: map[string]any{"phases": map[string]int{"solid": int(codes.Solid), "wetting": int(codes.Wetting), "nonwetting": int(codes.Nonwetting), "outside": int(phase.Outside)}}})
		if err != nil {
			return err
		}
		return z.WriteBox(ctx, lab)
	}
	return volio.WriteRaw(out, lab, volio.WriteOptions{})
}

func fmtFloats(v []float64) string {
	s := make([]string, len(v))
	for i, f := range v {
		s[i] = strconv.FormatFloat(f, 'g', 6, 64)
	}
	return strings.Join(s, ", ")
}
