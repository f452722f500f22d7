package main

import (
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"runtime"
	"text/tabwriter"

	"sluice/pkg/campaign"
	"sluice/pkg/measure"
	"sluice/pkg/scan"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// inputFlags are the flags shared by every command that reads a volume.
type inputFlags struct {
	shape, dtype, byteOrder, voxelSize string
	dataset                            string
	maxVoxels                          int64
}

func (f *inputFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&f.shape, "shape", "", "shape `Z,Y,X` of a raw file without header")
	fs.StringVar(&f.dtype, "dtype", "", "voxel type of a raw file: uint8, uint16 or float32")
	fs.StringVar(&f.byteOrder, "byte-order", "little", "byte order of a raw file: little or big")
	fs.StringVar(&f.voxelSize, "voxel-size", "", "voxel edge with its unit (m, mm, um or µm, nm), e.g. 2.5um; a bare number is refused (default: the config's voxel_size, else the file's metadata)")
	fs.StringVar(&f.dataset, "dataset", "", "`path` of the 3-D dataset in an HDF5 file, e.g. /entry/data/data (default: the NeXus default/signal attributes, else /exchange/data)")
	fs.Int64Var(&f.maxVoxels, "max-voxels", 4_000_000_000, "refuse volumes with more voxels than this")
}

// options turns the flags into reader options.
func (f *inputFlags) options() (volio.Options, error) {
	// A scan handed to sluice is complete: a missing Zarr chunk is an
	// unfinished transfer, not voxels at the fill value.
	opt := volio.Options{MaxVoxels: f.maxVoxels, ByteOrder: f.byteOrder, RequireChunks: true, Dataset: f.dataset}
	if f.shape != "" {
		s, err := parseShape(f.shape)
		if err != nil {
			return opt, err
		}
		opt.Shape = s
	}
	if f.dtype != "" {
		d, err := volume.ParseDType(f.dtype)
		if err != nil {
			return opt, err
		}
		opt.DType = d
	}
	if f.voxelSize != "" {
		v, err := campaign.ParseVoxelSize(f.voxelSize)
		if err != nil {
			return opt, fmt.Errorf("--voxel-size: %w", err)
		}
		opt.VoxelSize = v
	}
	return opt, nil
}

// withDataset gives HDF5 reads the config's hdf5_dataset unless --dataset
// named one.
func withDataset(opt volio.Options, cfg campaign.Config) volio.Options {
	if opt.Dataset == "" {
		opt.Dataset = cfg.HDF5Dataset
	}
	return opt
}

// resolveVoxelSize sets the voxel edge of v, read from path: --voxel-size
// when given on the command line, else the config's voxel_size, else the
// file's metadata (checked for plausibility like the others). It returns
// 0 when none of them knows it; the caller decides whether to refuse or to
// assume and say so.
func resolveVoxelSize(path string, v volume.Any, in inputFlags, set map[string]bool, cfg campaign.Config) (float64, error) {
	var vs float64
	from := ""
	switch {
	case set["voxel-size"]:
		from = "--voxel-size"
		var err error
		if vs, err = campaign.ParseVoxelSize(in.voxelSize); err != nil {
			return 0, fmt.Errorf("--voxel-size: %w", err)
		}
	case cfg.VoxelSize != "":
		vs, from = cfg.VoxelSizeM(), "the config's voxel_size"
	}
	file := v.EdgeLength()
	if vs == 0 {
		if file > 0 {
			if err := campaign.CheckVoxelSize(file); err != nil {
				return 0, fmt.Errorf("%s: voxel size in the file's metadata: %w", path, err)
			}
		}
		return file, nil
	}
	if file > 0 && math.Abs(file-vs) > 1e-9*vs {
		fmt.Fprintf(os.Stderr, "sluice: note: %s: %s %s replaces the voxel size %s of the file's metadata\n",
			path, from, volume.FormatLength(vs), volume.FormatLength(file))
	}
	volume.SetVoxelSize(v, vs)
	return vs, nil
}

// measureFlags configure the measurement.
type measureFlags struct {
	solid, wetting, nonwetting uint
	ift                        float64
	connectivity               int
	flowAxis                   string
	exclude                    optionalFloat
	sigma                      float64
	tile, workers              int
}

func (m *measureFlags) register(fs *flag.FlagSet) {
	d := measure.Defaults()
	fs.UintVar(&m.solid, "solid", uint(d.Codes.Solid), "label code of the solid phase")
	fs.UintVar(&m.wetting, "wetting", uint(d.Codes.Wetting), "label code of the wetting phase")
	fs.UintVar(&m.nonwetting, "nonwetting", uint(d.Codes.Nonwetting), "label code of the nonwetting phase")
	fs.Float64Var(&m.ift, "ift", 0, "interfacial tension σ in N/m, within 0.001…0.5 (water–air 0.072 at 25 °C; 35 mN/m is 0.035); default: the config's ift_n_per_m, else none and no capillary pressure")
	fs.IntVar(&m.connectivity, "connectivity", 26, "connectivity of nonwetting clusters and Euler characteristics: 26 or 6")
	fs.StringVar(&m.flowAxis, "flow-axis", "z", "axis from inlet to outlet: z, y or x")
	fs.Var(&m.exclude, "exclude", fmt.Sprintf("ignore w–n interface within this many `voxels` of the solid for curvature; 0 = none (default: the config's measure.curvature_exclude, else %g)", d.Curvature.Exclude))
	fs.Float64Var(&m.sigma, "curvature-sigma", d.Curvature.Sigma, "Gaussian smoothing (voxels) of the level-set curvature")
	fs.IntVar(&m.tile, "tile", 128, "tile edge in voxels for parallel measurement (results do not depend on it)")
	fs.IntVar(&m.workers, "workers", runtime.GOMAXPROCS(0), "parallel tiles")
}

// apply copies the measurement flags given on the command line (set)
// into a campaign config; flags left out keep the config's values.
func (m *measureFlags) apply(c *campaign.Config, set map[string]bool) error {
	if set["ift"] {
		if err := campaign.CheckIFT(m.ift); err != nil {
			return fmt.Errorf("--ift: %w", err)
		}
		c.IFT = m.ift
	}
	if set["connectivity"] {
		c.Measure.Connectivity = m.connectivity
	}
	if set["flow-axis"] {
		c.Measure.FlowAxis = m.flowAxis
	}
	if set["exclude"] {
		c.Measure.CurvatureExclude = m.exclude.v
	}
	if set["curvature-sigma"] {
		c.Measure.CurvatureSigma = m.sigma
	}
	if set["tile"] {
		c.Tile = m.tile
	}
	for _, f := range []struct {
		name string
		v    uint
		dst  *uint8
	}{{"solid", m.solid, &c.Segment.Codes.Solid}, {"wetting", m.wetting, &c.Segment.Codes.Wetting}, {"nonwetting", m.nonwetting, &c.Segment.Codes.Nonwetting}} {
		if !set[f.name] {
			continue
		}
		if f.v > 254 {
			return fmt.Errorf("--%s %d: label codes must be 0…254 (255 marks voxels outside the sample)", f.name, f.v)
		}
		*f.dst = uint8(f.v)
	}
	return nil
}

func runMeasure(args []string) int {
	fs := flag.NewFlagSet("measure", flag.ContinueOnError)
	var in inputFlags
	var mf measureFlags
	in.register(fs)
	mf.register(fs)
	var sf segFlags
	sf.register(fs)
	labels := fs.Bool("labels", false, "FILE holds phase codes (a segmented volume); without it FILE is grey and is segmented first")
	asJSON := fs.Bool("json", false, "print one JSON object instead of a table")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if len(pos) != 1 {
		return fail(exitBadInput, "measure: want exactly one FILE, got %d", len(pos))
	}
	path := pos[0]
	set := givenFlags(fs)
	if *labels {
		// FILE is already segmented: a segmentation flag would be
		// ignored, and the user would believe it applied.
		for _, name := range segOnlyFlags {
			if set[name] {
				return fail(exitBadInput, "measure: --%s segments grey input; with --labels %s is already segmented (leave --%s out)", name, path, name)
			}
		}
	}
	ropt, err := in.options()
	if err != nil {
		return fail(exitBadInput, "measure: %s: %v", path, err)
	}
	// The config (when --config is given) is read in every mode; flags
	// given on the command line override it.
	cfg, err := sf.campaignConfig()
	if err != nil {
		return fail(exitBadInput, "measure: %v", err)
	}
	if err := mf.apply(&cfg, set); err != nil {
		return fail(exitBadInput, "measure: %v", err)
	}
	if err := cfg.Validate(); err != nil {
		return fail(exitBadInput, "measure: %v", err)
	}
	mopt, err := cfg.MeasureOptions()
	if err != nil {
		return fail(exitBadInput, "measure: %v", err)
	}
	ropt = withDataset(ropt, cfg)
	v, err := volio.Open(path, ropt)
	if err == nil && !*labels {
		err = volio.CheckFinite(path, v)
	}
	if err != nil {
		return fail(exitBadInput, "%v", err)
	}
	vs, err := resolveVoxelSize(path, v, in, set, cfg)
	if err != nil {
		return fail(exitBadInput, "measure: %v", err)
	}
	// Without a voxel size, porosity, saturations, Euler characteristics
	// and contact angles are still right; lengths, areas and curvatures
	// are in voxel units, shown as if the voxel were 1 µm and flagged on
	// every output. Pc in pascals cannot be given that way: refuse.
	assumed := vs == 0
	if assumed {
		if cfg.IFT > 0 {
			return fail(exitBadInput, "measure: %s: capillary pressure needs the voxel size, and neither --voxel-size, the config nor the file gives it; add e.g. --voxel-size 2.5um", path)
		}
		volume.SetVoxelSize(v, 1e-6)
	}
	var res *measure.Result
	if *labels {
		lab, ok := v.(*volume.Labels)
		if !ok {
			return fail(exitBadInput, "measure: %s: --labels wants uint8 phase codes, file holds %s", path, v.DType())
		}
		if err := checkLabelCodes(path, lab, mopt.Codes, codesFlagsHint); err != nil {
			return fail(exitBadInput, "%v", err)
		}
		if res, err = measure.Volume(lab, mopt, cfg.Tile, mf.workers); err != nil {
			return fail(exitFailure, "measure: %s: %v", path, err)
		}
	} else {
		solid, err := sf.loadReference(ropt, v.Bounds(), cfg.Segment.Codes, codesFlagsHint)
		if err != nil {
			return fail(exitBadInput, "%v", err)
		}
		var prep scan.Prepared
		_, res, prep, err = scan.Whole(v, cfg, solid, mf.workers)
		if err != nil {
			return fail(exitBadInput, "measure: %s: %v", path, err)
		}
		if res.AngleNote == "" && res.AngleSamples > 0 && cfg.Measure.ContactWallGap == 0 {
			res.AngleNote = greyAngleNote
		}
		if !*asJSON {
			fmt.Fprintf(stdout, "segmented first: thresholds (%s) %s\n", prep.Thresholds.Method, fmtFloats(prep.Thresholds.T))
			fmt.Fprintf(stdout, "phases: %d of 3 (%s)\n", prep.Thresholds.Phases.InScan(), prep.Thresholds.Phases.Describe())
		}
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(measureOutput{res, assumed}); err != nil {
			return fail(exitFailure, "measure: %v", err)
		}
		return exitOK
	}
	printTable(stdout, path, res, assumed)
	return exitOK
}

// greyAngleNote goes with contact angles measured on labels segmented from
// grey without a wall gap: in `measure`'s table and JSON and as a caution
// of the campaign report (pkg/contact doc, "Grey scans").
const greyAngleNote = "contact angles were fitted down to the rock surface (measure.contact_wall_gap 0): on segmented grey scans the voxel layers on the rock, where the scanner blur mixes all three phases, pull them low (10–29° on forward-model caps of 60–120°); contact_wall_gap: 3 brings those within 3.5°"

// measureOutput is the JSON of `sluice measure`: the result keys and
// whether the voxel size was assumed (1 µm, known from neither flag,
// config nor file: lengths, areas and curvatures are then in voxel units).
type measureOutput struct {
	*measure.Result
	VoxelSizeAssumed bool `json:"voxel_size_assumed"`
}

func printTable(w io.Writer, path string, r *measure.Result, voxelAssumed bool) {
	tw := tabwriter.NewWriter(w, 0, 2, 2, ' ', 0)
	f := func(p *float64, scale float64, format string) string {
		if p == nil {
			return "—"
		}
		return fmt.Sprintf(format, *p*scale)
	}
	fmt.Fprintf(tw, "file\t%s\t\n", path)
	fmt.Fprintf(tw, "shape (z,y,x)\t%d × %d × %d\tvoxels\n", r.Shape[0], r.Shape[1], r.Shape[2])
	if voxelAssumed {
		fmt.Fprintf(tw, "voxel size\t%.4g\tµm, assumed: none from --voxel-size, config or file (lengths, areas, curvatures are per voxel edge)\n", r.VoxelSize*1e6)
	} else {
		fmt.Fprintf(tw, "voxel size\t%.4g\tµm\n", r.VoxelSize*1e6)
	}
	fmt.Fprintf(tw, "porosity\t%s\t\n", f(r.Porosity, 1, "%.4f"))
	fmt.Fprintf(tw, "saturation wetting / nonwetting\t%s / %s\t\n", f(r.SatWetting, 1, "%.4f"), f(r.SatNonwetting, 1, "%.4f"))
	fmt.Fprintf(tw, "interfacial area w–n / w–s / n–s\t%.4g / %.4g / %.4g\tmm²\n", r.AreaWN*1e6, r.AreaWS*1e6, r.AreaNS*1e6)
	fmt.Fprintf(tw, "specific area w–n\t%s\t1/mm\n", f(r.SpecificWN, 1e-3, "%.4g"))
	fmt.Fprintf(tw, "curvature κ w–n mean / median\t%s / %s\t1/mm\n", f(r.CurvMean, 1e-3, "%.4g"), f(r.CurvMedian, 1e-3, "%.4g"))
	fmt.Fprintf(tw, "capillary pressure σκ mean / median\t%s / %s\tkPa\n", f(r.Pc, 1e-3, "%.4g"), f(r.PcMedian, 1e-3, "%.4g"))
	// pm writes a mean ± its standard error (the SE left out when null).
	pm := func(p, se *float64, scale float64, format string) string {
		if p == nil || se == nil {
			return f(p, scale, format)
		}
		return f(p, scale, format) + " ± " + f(se, scale, format)
	}
	fmt.Fprintf(tw, "capillary pressure mean ± SE\t%s\tkPa (SE: spread between blocks of %.4g µm)\n", pm(r.Pc, r.PcSE, 1e-3, "%.4g"), r.BlockEdge*1e6)
	fmt.Fprintf(tw, "capillary pressure connected / trapped ganglia\t%s / %s\tkPa (connected: touching the inlet or outlet face)\n",
		pm(r.PcConnected, r.PcConnectedSE, 1e-3, "%.4g"), pm(r.PcTrapped, r.PcTrappedSE, 1e-3, "%.4g"))
	if g := r.TrappedGanglia; g != nil {
		fmt.Fprintf(tw, "trapped ganglia, own Pc p10 / median / p90\t%s / %s / %s\tkPa (%d ganglia with ≥ %.4g µm² of interface, %d smaller left out)\n",
			f(g.PcP10, 1e-3, "%.4g"), f(g.PcMedian, 1e-3, "%.4g"), f(g.PcP90, 1e-3, "%.4g"), g.Count, g.MinArea*1e12, g.Below)
	}
	fmt.Fprintf(tw, "contact angle (through wetting) mean / median / sd\t%s / %s / %s\t° (%d samples)\n",
		f(r.AngleMean, 1, "%.1f"), f(r.AngleMedian, 1, "%.1f"), f(r.AngleStd, 1, "%.1f"), r.AngleSamples)
	fmt.Fprintf(tw, "contact angle mean ± SE\t%s\t°\n", pm(r.AngleMean, r.AngleMeanSE, 1, "%.1f"))
	fmt.Fprintf(tw, "Euler characteristic n / w / s\t%d / %d / %d\t%d-connected\n", r.EulerNonwetting, r.EulerWetting, r.EulerSolid, r.Connectivity)
	fmt.Fprintf(tw, "mean curvature integral J_wn = ∫H dA (w–n)\t%s\tmm (%s mm/mm³ of bulk volume; a ball of radius r: 4πr)\n",
		f(r.MeanCurvIntegralWN, 1e3, "%.4g"), f(r.SpecificMeanCurvWN, 1e-6, "%.4g"))
	fmt.Fprintf(tw, "ganglia\t%d\tclusters\n", r.GangliaCount)
	fmt.Fprintf(tw, "largest ganglion\t%s\tof nonwetting volume\n", f(r.LargestFraction, 1, "%.4f"))
	fmt.Fprintf(tw, "nonwetting percolates (%s)\t%v\t\n", r.FlowAxis, r.Percolates)
	if p := r.SatProfile; p != nil {
		fmt.Fprintf(tw, "front from the inlet (%s)\t%s\tmm (far edge of the farthest of %d bins of %.4g µm with S_n > %g)\n",
			p.Axis, f(r.FrontPosition, 1e3, "%.4g"), len(p.Position), p.BinWidth*1e6, p.FrontThreshold)
	}
	tw.Flush()
	if r.AngleNote != "" {
		fmt.Fprintf(w, "note: contact angle: %s\n", r.AngleNote)
	}
	fmt.Fprintln(w, "Image-derived capillary pressure and contact angles are estimates; their error grows as radii of curvature approach a few voxels.")
}
