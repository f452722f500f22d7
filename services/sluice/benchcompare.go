package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"runtime/pprof"
	"slices"
	"strings"
	"syscall"
	"text/tabwriter"
	"time"

	"sluice/pkg/cluster"
	"sluice/pkg/curvature"
	"sluice/pkg/filter"
	"sluice/pkg/forward"
	"sluice/pkg/levelset"
	"sluice/pkg/mesh"
	"sluice/pkg/morph"
	"sluice/pkg/phase"
	"sluice/pkg/scenario"
	"sluice/pkg/segment"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// referenceScript is the reference chain, relative to the repository root.
const referenceScript = "testdata/reference/pipeline.py"

// Tolerances of the agreement checks of `sluice bench compare`.
const (
	// compareThresholdTol: both sides run 3-class Otsu on the same 1024-bin
	// histogram, so thresholds are the same bin centre; ±1 grey level.
	compareThresholdTol = 1.0
	// compareAreaTol: relative mesh-area difference. Both mesh the same
	// Gaussian-smoothed phase indicators at level 0.5, so the vertices agree
	// to float32 rounding; the triangulations of non-planar loops differ
	// (scikit-image: fixed diagonals of its case table; pkg/mesh: centroid
	// fans), a second-order effect on a smooth field (measured 0.16–0.36 %
	// at 48³). On the raw 0/1 indicators every loop vertex is an edge
	// midpoint and the same difference is first order (measured 1.8–8 %),
	// so those areas are shown for information only.
	compareAreaTol = 0.01
	// compareGaussianTol: relative difference of the smoothed field's sum
	// and absolute difference at the probes (float32 storage on both sides).
	compareGaussianTol = 1e-5
)

// comparePhases are the phases in the reference script's class order,
// darkest grey first (segment order "nws").
var comparePhases = [3]string{"nonwetting", "wetting", "solid"}

// compareStages are the timed stages, in chain order.
var compareStages = []struct{ key, name string }{
	{"median", "median 3×3×3"},
	{"otsu", "histogram + 3-class Otsu + classify"},
	{"label", "cluster labelling, 3 phases (26-conn.)"},
	{"euler", "Euler number, 3 phases (26-conn.)"},
	{"gaussian", "Gaussian σ=1.5, 3 phase indicators"},
	{"mesh", "marching cubes + area, 3 smoothed phases"},
}

// stageFigure is one timed stage: wall-clock seconds and CPU seconds of
// the process (user + system), medians over the repeats. On a shared
// machine the CPU figure is the steadier one.
type stageFigure struct {
	Seconds     float64 `json:"seconds"`
	MVoxPerS    float64 `json:"mvox_per_s"`
	CPUSeconds  float64 `json:"cpu_seconds"`
	MVoxPerCPUS float64 `json:"mvox_per_cpu_s"`
}

// gaussianProbe is the smoothed value at one voxel.
type gaussianProbe struct {
	Z     int     `json:"z"`
	Y     int     `json:"y"`
	X     int     `json:"x"`
	Value float64 `json:"value"`
}

// chainResults are what each side computed, keyed by phase name.
type chainResults struct {
	Thresholds []float64          `json:"thresholds"`
	Voxels     map[string]int64   `json:"voxels"`
	Clusters   map[string]int     `json:"clusters"`
	MeshArea   map[string]float64 `json:"mesh_area"`
	// MeshAreaBinary are the areas of the 0/1 indicators (untimed, for
	// information: see compareAreaTol).
	MeshAreaBinary map[string]float64 `json:"mesh_area_binary"`
	Euler26        map[string]int64   `json:"euler26"`
	Gaussian       struct {
		Sigma    float64         `json:"sigma"`
		Truncate float64         `json:"truncate"`
		Sum      float64         `json:"sum"`
		Probes   []gaussianProbe `json:"probes"`
	} `json:"gaussian"`
}

// referenceRun is the JSON printed by testdata/reference/pipeline.py.
type referenceRun struct {
	Shape    []int                  `json:"shape"`
	Voxels   int64                  `json:"voxels"`
	Repeat   int                    `json:"repeat"`
	Versions map[string]string      `json:"versions"`
	Stages   map[string]stageFigure `json:"stages"`
	Chain    stageFigure            `json:"chain"`
	Results  chainResults           `json:"results"`
}

// compareRow is one line of the comparison table.
type compareRow struct {
	Stage     string      `json:"stage"`
	Sluice    stageFigure `json:"sluice"`
	Reference stageFigure `json:"reference"`
	// Ratio is the sluice throughput over the reference throughput (wall
	// clock); CPURatio the same in CPU seconds.
	Ratio    float64 `json:"ratio"`
	CPURatio float64 `json:"cpu_ratio"`
}

// compareCheck is one agreement check between the two chains.
type compareCheck struct {
	Name      string  `json:"name"`
	Sluice    float64 `json:"sluice"`
	Reference float64 `json:"reference"`
	Tolerance string  `json:"tolerance"`
	OK        bool    `json:"ok"`
}

// compareReport is the outcome of `sluice bench compare` (--json prints it).
type compareReport struct {
	Shape            [3]int            `json:"shape"`
	Voxels           int64             `json:"voxels"`
	Repeat           int               `json:"repeat"`
	Versions         map[string]string `json:"reference_versions"`
	Stages           []compareRow      `json:"stages"`
	Chain            compareRow        `json:"chain"`
	Checks           []compareCheck    `json:"checks"`
	Agree            bool              `json:"agree"`
	SluiceResults    chainResults      `json:"sluice_results"`
	ReferenceResults chainResults      `json:"reference_results"`
	ReferenceCommand []string          `json:"reference_command"`
	SluiceGoroutines int               `json:"sluice_goroutines"`
	ReferenceThreads int               `json:"reference_threads"`
}

// runBenchCompare is `sluice bench compare`: the same processing chain in
// sluice and in a scipy / scikit-image reference script, side by side, each
// on one core, on one synthetic drainage scan; then checks that both
// computed the same thresholds, cluster counts, Euler numbers, mesh areas
// and smoothed field. Exit status 1 when they disagree.
func runBenchCompare(args []string) int {
	fs := flag.NewFlagSet("bench compare", flag.ContinueOnError)
	size := fs.Int("size", 192, "edge of the cubic scan in voxels")
	repeat := fs.Int("repeat", 3, "repeats per stage (the median is reported)")
	python := fs.String("python", refInterpreter, "interpreter with SciPy 1.10 and scikit-image 0.19")
	script := fs.String("script", "", "reference script (default: "+referenceScript+" found from the working directory or the executable)")
	asJSON := fs.Bool("json", false, "print the report as JSON")
	cpuProfile := fs.String("cpuprofile", "", "write a CPU profile of the sluice chain to this file (go tool pprof)")
	if _, code, ok := parseOrUsage(fs, args); !ok {
		return code
	}
	if *size < 16 || *size > 1024 {
		return fail(exitBadInput, "bench compare: --size %d must be from 16 to 1024", *size)
	}
	if *repeat < 1 {
		return fail(exitBadInput, "bench compare: --repeat %d must be at least 1", *repeat)
	}
	if *script == "" {
		p, err := findReferenceScript()
		if err != nil {
			return fail(exitFailure, "bench compare: %v", err)
		}
		*script = p
	}
	if !*asJSON {
		fmt.Fprintf(stdout, "preparing a %d³ drainage scan …\n", *size)
	}
	grey, err := compareScan(*size)
	if err != nil {
		return fail(exitFailure, "bench compare: %v", err)
	}
	dir, err := os.MkdirTemp("", "sluice-bench-compare-")
	if err != nil {
		return fail(exitFailure, "bench compare: %v", err)
	}
	defer os.RemoveAll(dir)
	raw := filepath.Join(dir, "grey.raw")
	if err := volio.WriteRaw(raw, grey, volio.WriteOptions{}); err != nil {
		return fail(exitFailure, "bench compare: %v", err)
	}
	if !*asJSON {
		fmt.Fprintf(stdout, "sluice chain, one goroutine, median of %d …\n", *repeat)
	}
	var prof *os.File
	if *cpuProfile != "" {
		if prof, err = os.Create(*cpuProfile); err != nil {
			return fail(exitFailure, "bench compare: %v", err)
		}
		if err := pprof.StartCPUProfile(prof); err != nil {
			prof.Close()
			return fail(exitFailure, "bench compare: %s: %v", *cpuProfile, err)
		}
	}
	own, ownRes, sm, err := sluiceChain(grey, *repeat)
	if prof != nil {
		pprof.StopCPUProfile()
		if cerr := prof.Close(); cerr != nil && err == nil {
			err = fmt.Errorf("%s: %w", *cpuProfile, cerr)
		}
	}
	if err != nil {
		return fail(exitFailure, "bench compare: %v", err)
	}
	if !*asJSON {
		fmt.Fprintf(stdout, "reference chain (%s %s), one thread, median of %d …\n", *python, *script, *repeat)
	}
	s := grey.Box.Size()
	cmdArgs := []string{*script, raw, fmt.Sprintf("%d,%d,%d", s[0], s[1], s[2]), "--repeat", fmt.Sprint(*repeat)}
	ref, err := runReferenceChain(*python, cmdArgs)
	if err != nil {
		return fail(exitFailure, "bench compare: %v", err)
	}
	rep := buildCompareReport(grey, *repeat, own, ownRes, sm, ref)
	rep.ReferenceCommand = append([]string{*python}, cmdArgs...)
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(rep); err != nil {
			return fail(exitFailure, "bench compare: %v", err)
		}
	} else {
		printCompareReport(rep)
	}
	if !rep.Agree {
		return fail(exitFailure, "bench compare: sluice and the reference chain disagree (see the checks)")
	}
	return exitOK
}

// refInterpreter is Debian's python3 with scipy and scikit-image (the
// python3 first on PATH may lack them).
const refInterpreter = "/usr/bin/python3"

// findReferenceScript looks for testdata/reference/pipeline.py in the
// working directory and its parents, then beside the executable's parent
// directory (bin/sluice in a checkout).
func findReferenceScript() (string, error) {
	var starts []string
	if wd, err := os.Getwd(); err == nil {
		starts = append(starts, wd)
	}
	if exe, err := os.Executable(); err == nil {
		starts = append(starts, filepath.Dir(exe))
	}
	for _, d := range starts {
		for {
			p := filepath.Join(d, filepath.FromSlash(referenceScript))
			if st, err := os.Stat(p); err == nil && st.Mode().IsRegular() {
				return p, nil
			}
			up := filepath.Dir(d)
			if up == d {
				break
			}
			d = up
		}
	}
	return "", fmt.Errorf("%s not found from the working directory or the executable; pass --script", referenceScript)
}

// compareScan renders step 6 of a synthetic drainage campaign filling the
// whole box with rock (no cylinder, so both chains see the same phases
// everywhere), with the default scanner model, as uint16.
func compareScan(size int) (*volume.Volume[uint16], error) {
	sc := &scenario.Campaign{Shape: [3]int{size, size, size}, Steps: 10, Seed: 1, NoCore: true}
	if err := sc.Prepare(); err != nil {
		return nil, err
	}
	lab, _, _ := sc.Step(6)
	g, err := forward.Render(lab, forward.Default())
	if err != nil {
		return nil, err
	}
	grey := forward.Uint16(g)
	grey.VoxelSize = sc.VoxelSize
	return grey, nil
}

// sluiceChain runs the chain of the reference script with sluice's own
// functions, on one goroutine (GOMAXPROCS 1 while it runs), each stage
// repeat times; it returns the median seconds per stage, the results of the
// last run and its smoothed nonwetting indicator (for the probe checks).
func sluiceChain(grey *volume.Volume[uint16], repeat int) (map[string]stageFigure, chainResults, *volume.Volume[float32], error) {
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(1))
	box := grey.Box
	codes := phase.Default()
	code := map[string]uint8{"nonwetting": codes.Nonwetting, "wetting": codes.Wetting, "solid": codes.Solid}
	times := map[string]stageFigure{}
	res := chainResults{Voxels: map[string]int64{}, Clusters: map[string]int{}, MeshArea: map[string]float64{}, MeshAreaBinary: map[string]float64{}, Euler26: map[string]int64{}}
	timed := func(key string, fn func() error) error {
		ts, cs := make([]float64, 0, repeat), make([]float64, 0, repeat)
		for range repeat {
			c0, t0 := processCPU(), time.Now()
			if err := fn(); err != nil {
				return err
			}
			ts = append(ts, time.Since(t0).Seconds())
			cs = append(cs, processCPU()-c0)
		}
		times[key] = stageFigure{Seconds: median(ts), CPUSeconds: median(cs)}
		return nil
	}

	// Median: the exact integer 3×3×3 median on uint16, as segment filters
	// integer grey.
	var med *volume.Volume[uint16]
	if err := timed("median", func() (err error) {
		med, err = filter.Median3Integer(grey, box)
		return err
	}); err != nil {
		return nil, res, nil, err
	}

	// Histogram of the filtered grey in the uint16 binning (1024 bins of
	// 64 grey values from 0), 3-class Otsu, classification. No sample mask,
	// no hysteresis, no island removal, no partial-volume correction.
	sp := segment.Defaults()
	sp.Filter.Method = "none"
	sp.Bins = 1024
	// The reference is np.digitize: compare the threshold classification,
	// not the default watershed assignment that follows it.
	sp.Assign = segment.AssignThreshold
	var lab *volume.Labels
	if err := timed("otsu", func() error {
		h, err := segment.Histogram(med, box, sp, nil)
		if err != nil {
			return err
		}
		th, err := segment.ComputeThresholds(h, sp)
		if err != nil {
			return err
		}
		res.Thresholds = th.T
		lab, err = segment.Segment(med, box, th, sp, nil)
		return err
	}); err != nil {
		return nil, res, nil, err
	}
	for _, v := range lab.Pix {
		for _, name := range comparePhases {
			if v == code[name] {
				res.Voxels[name]++
			}
		}
	}

	copt := cluster.Options{Connectivity: 26}
	if err := timed("label", func() error {
		for _, name := range comparePhases {
			t := cluster.Label(lab, phase.Of(code[name]), box, box, copt)
			s, err := cluster.Merge([]*cluster.Tile{t}, box, copt)
			if err != nil {
				return err
			}
			res.Clusters[name] = s.Count
		}
		return nil
	}); err != nil {
		return nil, res, nil, err
	}

	padded, _ := morph.TileOrigins(box, box)
	if err := timed("euler", func() error {
		for _, name := range comparePhases {
			h := morph.Cells(lab, phase.Of(code[name]), padded)
			_, e26, err := morph.Euler(&h)
			if err != nil {
				return err
			}
			res.Euler26[name] = e26
		}
		return nil
	}); err != nil {
		return nil, res, nil, err
	}

	// The smoothing of the curvature stage: σ = curvature.DefaultSigma,
	// kernel radius from levelset.Truncate (ceil(3·1.5) = int(3·1.5 + 0.5)
	// = 5, the radius scipy uses for truncate 3), of each phase indicator.
	sigma, trunc := curvature.DefaultSigma, levelset.Truncate
	var smooth [3]*volume.Volume[float32]
	if err := timed("gaussian", func() (err error) {
		var ind *volume.Volume[float32] // one buffer for the three indicators
		for k, name := range comparePhases {
			ind = mesh.IndicatorInto(ind, lab, phase.Of(code[name]), box)
			if smooth[k], err = filter.Gaussian(ind, box, sigma, trunc); err != nil {
				return err
			}
		}
		return nil
	}); err != nil {
		return nil, res, nil, err
	}
	sm := smooth[0] // nonwetting
	res.Gaussian.Sigma, res.Gaussian.Truncate = sigma, trunc
	var sum float64
	for _, v := range sm.Pix {
		sum += float64(v)
	}
	res.Gaussian.Sum = sum

	if err := timed("mesh", func() error {
		for k, name := range comparePhases {
			res.MeshArea[name] = mesh.Area(smooth[k], 0.5, box)
		}
		return nil
	}); err != nil {
		return nil, res, nil, err
	}
	// Untimed: areas of the 0/1 indicators, for information.
	var ind *volume.Volume[float32]
	for _, name := range comparePhases {
		ind = mesh.IndicatorInto(ind, lab, phase.Of(code[name]), box)
		res.MeshAreaBinary[name] = mesh.Area(ind, 0.5, box)
	}
	return times, res, sm, nil
}

// processCPU returns the user + system CPU seconds of this process.
func processCPU() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return math.NaN()
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano()).Seconds()
}

func median(v []float64) float64 {
	ts := slices.Clone(v)
	slices.Sort(ts)
	n := len(ts)
	if n%2 == 1 {
		return ts[n/2]
	}
	return (ts[n/2-1] + ts[n/2]) / 2
}

// runReferenceChain runs the reference script and decodes its JSON.
func runReferenceChain(python string, args []string) (referenceRun, error) {
	var out, errb bytes.Buffer
	cmd := exec.Command(python, args...)
	cmd.Stdout, cmd.Stderr = &out, &errb
	var ref referenceRun
	if err := cmd.Run(); err != nil {
		msg := strings.TrimSpace(errb.String())
		if i := strings.LastIndexByte(msg, '\n'); i >= 0 {
			msg = msg[i+1:]
		}
		var ee *exec.ExitError
		if !errors.As(err, &ee) {
			return ref, fmt.Errorf("reference interpreter %s: %w", python, err)
		}
		if msg == "" {
			return ref, fmt.Errorf("reference script %s: %w", args[0], err)
		}
		return ref, fmt.Errorf("reference script %s: %w: %s", args[0], err, msg)
	}
	if err := json.Unmarshal(out.Bytes(), &ref); err != nil {
		return ref, fmt.Errorf("reference script %s: bad JSON output: %w", args[0], err)
	}
	for _, st := range compareStages {
		if f, ok := ref.Stages[st.key]; !ok || !(f.Seconds > 0) {
			return ref, fmt.Errorf("reference script %s: no timing for stage %q", args[0], st.key)
		}
	}
	return ref, nil
}

// buildCompareReport puts both runs side by side and runs the checks.
func buildCompareReport(grey *volume.Volume[uint16], repeat int, own map[string]stageFigure, ownRes chainResults, sm *volume.Volume[float32], ref referenceRun) compareReport {
	n := int64(grey.Box.Voxels())
	mvox := float64(n) / 1e6
	fig := func(f stageFigure) stageFigure {
		f.MVoxPerS, f.MVoxPerCPUS = mvox/f.Seconds, mvox/f.CPUSeconds
		return f
	}
	rep := compareReport{Shape: grey.Box.Size(), Voxels: n, Repeat: repeat, Versions: ref.Versions,
		SluiceResults: ownRes, ReferenceResults: ref.Results, SluiceGoroutines: 1, ReferenceThreads: 1}
	var tOwn, tRef stageFigure
	row := func(name string, o, r stageFigure) compareRow {
		o, r = fig(o), fig(r)
		return compareRow{Stage: name, Sluice: o, Reference: r, Ratio: r.Seconds / o.Seconds, CPURatio: r.CPUSeconds / o.CPUSeconds}
	}
	for _, st := range compareStages {
		o, r := own[st.key], ref.Stages[st.key]
		tOwn.Seconds += o.Seconds
		tOwn.CPUSeconds += o.CPUSeconds
		tRef.Seconds += r.Seconds
		tRef.CPUSeconds += r.CPUSeconds
		rep.Stages = append(rep.Stages, row(st.name, o, r))
	}
	rep.Chain = row("whole chain", tOwn, tRef)
	rep.Checks = compareChecks(ownRes, ref.Results, sm)
	rep.Agree = true
	for _, c := range rep.Checks {
		rep.Agree = rep.Agree && c.OK
	}
	return rep
}

// compareChecks lists the agreement checks. Missing reference values count
// as NaN and fail.
func compareChecks(own, ref chainResults, sm *volume.Volume[float32]) []compareCheck {
	var cs []compareCheck
	add := func(name string, a, b float64, tol string, ok bool) {
		cs = append(cs, compareCheck{Name: name, Sluice: a, Reference: b, Tolerance: tol, OK: ok})
	}
	for i := range 2 {
		a, b := math.NaN(), math.NaN()
		if i < len(own.Thresholds) {
			a = own.Thresholds[i]
		}
		if i < len(ref.Thresholds) {
			b = ref.Thresholds[i]
		}
		// Source: scikit-image 0.19 skimage.filters.threshold_multiotsu
		// (classes=3) on the same 1024-bin histogram, run live.
		add(fmt.Sprintf("threshold %d (grey)", i+1), a, b, "±1 grey level", math.Abs(a-b) <= compareThresholdTol)
	}
	get := func(m map[string]int64, k string) float64 {
		if v, ok := m[k]; ok {
			return float64(v)
		}
		return math.NaN()
	}
	for _, p := range comparePhases {
		// Source: numpy count of np.digitize classes (right=True: a value
		// equal to a threshold stays in the darker class, as in sluice).
		a, b := get(own.Voxels, p), get(ref.Voxels, p)
		add(p+" voxels", a, b, "exact", a == b)
	}
	for _, p := range comparePhases {
		// Source: scipy 1.10 ndimage.label, structure 3×3×3 ones (26-conn.).
		a, b := math.NaN(), math.NaN()
		if v, ok := own.Clusters[p]; ok {
			a = float64(v)
		}
		if v, ok := ref.Clusters[p]; ok {
			b = float64(v)
		}
		add(p+" clusters (26-conn.)", a, b, "exact", a == b)
	}
	for _, p := range comparePhases {
		// Source: scikit-image 0.19 measure.euler_number, connectivity=3.
		a, b := get(own.Euler26, p), get(ref.Euler26, p)
		add(p+" Euler number (26-conn.)", a, b, "exact", a == b)
	}
	for _, p := range comparePhases {
		// Source: scikit-image 0.19 measure.marching_cubes (Lewiner) +
		// mesh_surface_area of the smoothed phase indicator at level 0.5.
		a, b := math.NaN(), math.NaN()
		if v, ok := own.MeshArea[p]; ok {
			a = v
		}
		if v, ok := ref.MeshArea[p]; ok {
			b = v
		}
		add(p+" mesh area, smoothed (voxel²)", a, b, "1 % relative", math.Abs(a-b) <= compareAreaTol*math.Abs(b))
	}
	// Source: scipy 1.10 ndimage.gaussian_filter, sigma 1.5, truncate 3,
	// mode 'nearest', of the float32 nonwetting indicator.
	g, rg := own.Gaussian, ref.Gaussian
	add("Gaussian: sum of the smoothed indicator", g.Sum, rg.Sum, "1e-5 relative",
		math.Abs(g.Sum-rg.Sum) <= compareGaussianTol*math.Max(1, math.Abs(rg.Sum)))
	add("Gaussian: σ (voxels)", g.Sigma, rg.Sigma, "same", g.Sigma == rg.Sigma)
	add("Gaussian: truncate (σ)", g.Truncate, rg.Truncate, "same", g.Truncate == rg.Truncate)
	if len(rg.Probes) == 0 {
		add("Gaussian: probe voxels", 0, 0, "at least one", false)
	}
	for _, p := range rg.Probes {
		a := math.NaN()
		if sm.Box.Contains(p.Z, p.Y, p.X) {
			a = float64(sm.At(p.Z, p.Y, p.X))
		}
		add(fmt.Sprintf("Gaussian at (%d,%d,%d)", p.Z, p.Y, p.X), a, p.Value, "1e-5 absolute", math.Abs(a-p.Value) <= compareGaussianTol)
	}
	return cs
}

func printCompareReport(rep compareReport) {
	s := rep.Shape
	fmt.Fprintf(stdout, "\n%d×%d×%d uint16 (%.2f MVox), median of %d; sluice on 1 goroutine, reference on 1 thread (%s)\n\n",
		s[0], s[1], s[2], float64(rep.Voxels)/1e6, rep.Repeat, versionLine(rep.Versions))
	tw := tabwriter.NewWriter(stdout, 0, 2, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintf(tw, "stage\tsluice s\tsluice MVox/s\treference s\treference MVox/s\tratio\tCPU ratio\t\n")
	row := func(r compareRow) {
		fmt.Fprintf(tw, "%s\t%.3f\t%.2f\t%.3f\t%.2f\t%.1f×\t%.1f×\t\n", r.Stage, r.Sluice.Seconds, r.Sluice.MVoxPerS,
			r.Reference.Seconds, r.Reference.MVoxPerS, r.Ratio, r.CPURatio)
	}
	for _, r := range rep.Stages {
		row(r)
	}
	row(rep.Chain)
	tw.Flush()
	fmt.Fprintf(stdout, "(MVox/s by wall clock; ratio = sluice throughput / reference throughput; CPU ratio = reference CPU s / sluice CPU s)\n")
	fmt.Fprintf(stdout, "\nagreement checks:\n")
	tw = tabwriter.NewWriter(stdout, 0, 2, 2, ' ', 0)
	fmt.Fprintf(tw, "check\tsluice\treference\ttolerance\t\n")
	for _, c := range rep.Checks {
		v := "ok"
		if !c.OK {
			v = "DISAGREE"
		}
		fmt.Fprintf(tw, "%s\t%.10g\t%.10g\t%s\t%s\n", c.Name, c.Sluice, c.Reference, c.Tolerance, v)
	}
	tw.Flush()
	fmt.Fprintf(stdout, "\nfor information, mesh areas of the raw 0/1 indicators (voxel²; triangulations differ, see docs/performance.md):\n")
	tw = tabwriter.NewWriter(stdout, 0, 2, 2, ' ', 0)
	for _, p := range comparePhases {
		a, b := rep.SluiceResults.MeshAreaBinary[p], rep.ReferenceResults.MeshAreaBinary[p]
		fmt.Fprintf(tw, "%s\t%.10g\t%.10g\t%+.2f %%\t\n", p, a, b, 100*(a-b)/b)
	}
	tw.Flush()
	if rep.Agree {
		fmt.Fprintln(stdout, "\nall checks agree")
	}
}

func versionLine(v map[string]string) string {
	if len(v) == 0 {
		return "versions unknown"
	}
	return fmt.Sprintf("Python %s, NumPy %s, SciPy %s, scikit-image %s", v["python"], v["numpy"], v["scipy"], v["skimage"])
}
