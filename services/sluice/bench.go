package main

import (
	"flag"
	"fmt"
	"runtime"
	"slices"
	"strings"
	"text/tabwriter"
	"time"

	"sluice/pkg/filter"
	"sluice/pkg/forward"
	"sluice/pkg/measure"
	"sluice/pkg/register"
	"sluice/pkg/scan"
	"sluice/pkg/scenario"
	"sluice/pkg/volume"
)

// runBench is `sluice bench [stages|compare|campaign]`: throughput figures
// measured on this machine. Without a mode it runs "stages".
func runBench(args []string) int {
	mode := "stages"
	if len(args) > 0 && !strings.HasPrefix(args[0], "-") {
		mode, args = args[0], args[1:]
	}
	switch mode {
	case "stages":
		return runBenchStages(args)
	case "compare":
		return runBenchCompare(args)
	case "campaign":
		return runBenchCampaign(args)
	}
	return fail(exitBadInput, "bench: unknown mode %q (stages, compare or campaign)", mode)
}

// runBenchStages times each processing stage on a synthetic drainage scan.
func runBenchStages(args []string) int {
	fs := flag.NewFlagSet("bench stages", flag.ContinueOnError)
	size := fs.Int("size", 256, "edge of the cubic scan in voxels")
	tile := fs.Int("tile", 128, "tile edge")
	workers := fs.Int("workers", runtime.GOMAXPROCS(0), "goroutines")
	nlm := fs.Bool("nlm", false, "also time the non-local-means filter (slow)")
	if _, code, ok := parseOrUsage(fs, args); !ok {
		return code
	}
	sc := &scenario.Campaign{Shape: [3]int{*size, *size, *size}, Steps: 10, Seed: 1}
	fmt.Fprintf(stdout, "preparing a %d³ drainage scan …\n", *size)
	if err := sc.Prepare(); err != nil {
		return fail(exitFailure, "bench: %v", err)
	}
	lab, _, _ := sc.Step(6)
	p := forward.Default()
	p.Sample = demoCylinder(sc)
	g, err := forward.Render(lab, p)
	if err != nil {
		return fail(exitFailure, "bench: %v", err)
	}
	grey := forward.Uint16(g)
	grey.VoxelSize = sc.VoxelSize
	cfg := singleScanConfig(sc, *tile)
	// 3-class Otsu on the merged histogram, as a single scan is segmented.
	cfg.Segment.Threshold = "otsu"
	cfg.Segment.Fixed = nil
	mvox := float64(grey.Box.Voxels()) / 1e6
	tw := tabwriter.NewWriter(stdout, 0, 2, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "stage\tseconds\tMVox/s\tMVox/s per core\t\n")
	row := func(name string, d time.Duration, cores int) {
		fmt.Fprintf(tw, "%s\t%.2f\t%.2f\t%.2f\t\n", name, d.Seconds(), mvox/d.Seconds(), mvox/d.Seconds()/float64(cores))
	}
	procs := runtime.GOMAXPROCS(0)
	t0 := time.Now()
	f32 := volume.Float(grey)
	if _, err := filter.Median3(f32, grey.Box); err != nil {
		return fail(exitFailure, "bench: %v", err)
	}
	row("median 3×3×3 float32", time.Since(t0), procs)
	// The exact uint16 median and the Gaussian on the path in use (vector
	// instructions when built with GOEXPERIMENT=simd on an AVX2 CPU) and,
	// when that is the vector path, on the scalar path too (same results):
	// three runs each, alternating, the median shown.
	path := filter.VectorPath()
	bothPaths := func(name string, fn func() error) error {
		vector := filter.UseVector(false)
		defer filter.UseVector(vector)
		var tv, ts []time.Duration
		for i := 0; i < 3; i++ {
			for _, on := range []bool{true, false} {
				if on && !vector {
					continue
				}
				filter.UseVector(on)
				t0 := time.Now()
				if err := fn(); err != nil {
					return err
				}
				if on {
					tv = append(tv, time.Since(t0))
				} else {
					ts = append(ts, time.Since(t0))
				}
			}
		}
		if vector {
			slices.Sort(tv)
			row(name+", "+strings.SplitN(path, " (", 2)[0], tv[1], procs)
		}
		slices.Sort(ts)
		row(name+", scalar", ts[1], procs)
		return nil
	}
	if err := bothPaths("median 3×3×3 uint16", func() error {
		_, err := filter.Median3Integer(grey, grey.Box)
		return err
	}); err != nil {
		return fail(exitFailure, "bench: %v", err)
	}
	if err := bothPaths("Gaussian σ=1", func() error {
		_, err := filter.Gaussian(f32, grey.Box, 1, filter.DefaultTruncate)
		return err
	}); err != nil {
		return fail(exitFailure, "bench: %v", err)
	}
	// Drift registration (reference-scan mode), per step: the estimate over
	// the central region, and the whole scan resampled by a sub-voxel shift
	// (the workers do it tile by tile).
	if region, err := register.Region(grey.Box, register.DefaultRegion); err == nil {
		t0 = time.Now()
		if _, err := register.Phase(grey, grey, region); err != nil {
			return fail(exitFailure, "bench: %v", err)
		}
		rs := region.Size()
		row(fmt.Sprintf("registration estimate (%d×%d×%d region)", rs[0], rs[1], rs[2]), time.Since(t0), procs)
		t0 = time.Now()
		if _, err := register.Resample(grey, grey.Box, grey.Box, register.Shift{0.3, -0.45, 0.8}); err != nil {
			return fail(exitFailure, "bench: %v", err)
		}
		row("registration resample, sub-voxel", time.Since(t0), 1)
	}
	if *nlm {
		t0 = time.Now()
		if _, err := (filter.NLM{PatchRadius: 1, SearchRadius: 2, Sigma: p.NoiseSigma()}).Apply(f32, grey.Box); err != nil {
			return fail(exitFailure, "bench: %v", err)
		}
		row("non-local means", time.Since(t0), procs)
	}
	t0 = time.Now()
	prep, eff, err := scan.Prepare(scan.MemorySource(grey), grey.Box, volume.Uint16, cfg, nil, *workers)
	if err != nil {
		return fail(exitFailure, "bench: %v", err)
	}
	row("pass 1: histogram + thresholds", time.Since(t0), *workers)
	halo, _ := scan.Halo(eff)
	t := volume.Tiling{Whole: grey.Box, Tile: [3]int{*tile, *tile, *tile}}
	t0 = time.Now()
	labels := volume.New[uint8](grey.Box, grey.VoxelSize)
	for i := 0; i < t.Len(); i++ {
		core := t.Core(i)
		l, _, err := scan.Tile(grey.Crop(core.Grow(halo).Intersect(grey.Box), 0), core, grey.Box, prep.Thresholds, eff, nil)
		if err != nil {
			return fail(exitFailure, "bench: %v", err)
		}
		labels.Paste(l)
	}
	row(fmt.Sprintf("pass 2: segment + measure, %d tiles, one after another", t.Len()), time.Since(t0), 1)
	mo, _ := eff.MeasureOptions()
	t0 = time.Now()
	if _, err := measure.Volume(labels, mo, *tile, *workers); err != nil {
		return fail(exitFailure, "bench: %v", err)
	}
	row("measure labels only (all measurements)", time.Since(t0), *workers)
	mo.SkipContact, mo.SkipCurvature = true, true
	t0 = time.Now()
	if _, err := measure.Volume(labels, mo, *tile, *workers); err != nil {
		return fail(exitFailure, "bench: %v", err)
	}
	row("measure labels: counts, Minkowski, clusters", time.Since(t0), *workers)
	tw.Flush()
	fmt.Fprintf(stdout, "(%d CPUs; per-core figures divide by the goroutines used; median and Gaussian: %s)\n", procs, path)
	return exitOK
}
