package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"strings"
	"testing"

	"sluice/pkg/volume"
)

// needReferenceChain skips (or, with CI set, fails) when Debian's python3
// lacks SciPy or scikit-image.
func needReferenceChain(t *testing.T) {
	t.Helper()
	if err := exec.Command(refInterpreter, "-c", "import scipy.ndimage, skimage.measure, skimage.filters").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("reference chain needs SciPy 1.10 and scikit-image 0.19 through %s under CI: %v", refInterpreter, err)
		}
		t.Skipf("SciPy / scikit-image not importable through %s (%v); install python3-scipy python3-skimage or set CI to make this a failure", refInterpreter, err)
	}
}

// TestBenchCompareAgrees runs `sluice bench compare` in-process on a small
// drainage scan and checks that sluice's chain and the SciPy /
// scikit-image chain computed the same things. It asserts correctness of the
// comparison only, never speed.
//
// Source: SciPy 1.10 ndimage.median_filter / label / gaussian_filter and
// scikit-image 0.19 filters.threshold_multiotsu / measure.marching_cubes /
// mesh_surface_area / euler_number, run live by
// testdata/reference/pipeline.py through /usr/bin/python3. Tolerances: the
// compare* constants in benchcompare.go.
func TestBenchCompareAgrees(t *testing.T) {
	needReferenceChain(t)
	code, out, errs := runCLI(t, "bench", "compare", "--size", "48", "--repeat", "1", "--json")
	if code != exitOK {
		t.Fatalf("exit %d\nstdout: %s\nstderr: %s", code, out, errs)
	}
	var rep compareReport
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatalf("bad JSON: %v\n%s", err, out)
	}
	if !rep.Agree {
		t.Errorf("report says the chains disagree")
	}
	if rep.Voxels != 48*48*48 || len(rep.Stages) != len(compareStages) {
		t.Fatalf("report covers %d voxels and %d stages, want %d and %d", rep.Voxels, len(rep.Stages), 48*48*48, len(compareStages))
	}
	// 2 thresholds + 3 phases × 4 quantities + σ, truncate, sum + probes.
	if len(rep.Checks) < 2+12+3+1 {
		t.Errorf("only %d checks", len(rep.Checks))
	}
	for _, c := range rep.Checks {
		if !c.OK {
			t.Errorf("%s: sluice %g, reference %g (tolerance %s)", c.Name, c.Sluice, c.Reference, c.Tolerance)
		}
	}
	// The scan must exercise every check: three phases present, two
	// distinct thresholds, nonwetting clusters and interface.
	r := rep.SluiceResults
	if len(r.Thresholds) != 2 || !(r.Thresholds[0] < r.Thresholds[1]) {
		t.Errorf("thresholds %v", r.Thresholds)
	}
	for _, p := range comparePhases {
		if r.Voxels[p] == 0 || r.Clusters[p] == 0 || !(r.MeshArea[p] > 0) {
			t.Errorf("%s: %d voxels, %d clusters, area %g: the scan does not exercise the checks", p, r.Voxels[p], r.Clusters[p], r.MeshArea[p])
		}
	}
	for _, s := range append(rep.Stages, rep.Chain) {
		if !(s.Sluice.Seconds > 0) || !(s.Reference.Seconds > 0) || math.IsInf(s.Ratio, 0) {
			t.Errorf("stage %q: timings %+v", s.Stage, s)
		}
	}
	// The human-readable form prints the table, the checks and the verdict.
	var table bytes.Buffer
	old := stdout
	stdout = &table
	printCompareReport(rep)
	stdout = old
	for _, want := range []string{"whole chain", "CPU ratio", "nonwetting Euler number (26-conn.)", "all checks agree"} {
		if !strings.Contains(table.String(), want) {
			t.Errorf("table lacks %q:\n%s", want, table.String())
		}
	}
}

// TestCompareChecksCatchDisagreement: each kind of difference the comparison
// is there to catch makes a check fail.
func TestCompareChecksCatchDisagreement(t *testing.T) {
	sm := volume.NewShape[float32](4, 4, 4, 1e-6)
	sm.Pix[sm.Index(1, 2, 3)] = 0.25
	base := func() chainResults {
		var r chainResults
		r.Thresholds = []float64{20032, 33344}
		r.Voxels = map[string]int64{"nonwetting": 10, "wetting": 20, "solid": 34}
		r.Clusters = map[string]int{"nonwetting": 3, "wetting": 1, "solid": 1}
		r.MeshArea = map[string]float64{"nonwetting": 100, "wetting": 200, "solid": 150}
		r.Euler26 = map[string]int64{"nonwetting": 3, "wetting": -2, "solid": 1}
		r.Gaussian.Sigma, r.Gaussian.Truncate, r.Gaussian.Sum = 1.5, 3, 10
		r.Gaussian.Probes = []gaussianProbe{{Z: 1, Y: 2, X: 3, Value: 0.25}}
		return r
	}
	allOK := func(cs []compareCheck) bool {
		for _, c := range cs {
			if !c.OK {
				return false
			}
		}
		return true
	}
	if cs := compareChecks(base(), base(), sm); !allOK(cs) {
		t.Fatalf("identical results disagree: %+v", cs)
	}
	for name, spoil := range map[string]func(r *chainResults){
		"threshold +2":        func(r *chainResults) { r.Thresholds[1] += 2 },
		"one threshold":       func(r *chainResults) { r.Thresholds = r.Thresholds[:1] },
		"voxel count":         func(r *chainResults) { r.Voxels["wetting"]++ },
		"cluster count":       func(r *chainResults) { r.Clusters["nonwetting"]++ },
		"missing phase":       func(r *chainResults) { delete(r.Clusters, "solid") },
		"Euler number":        func(r *chainResults) { r.Euler26["solid"]-- },
		"area +1.5 %":         func(r *chainResults) { r.MeshArea["wetting"] *= 1.015 },
		"Gaussian sum":        func(r *chainResults) { r.Gaussian.Sum += 0.01 },
		"Gaussian probe":      func(r *chainResults) { r.Gaussian.Probes[0].Value += 1e-4 },
		"Gaussian σ":          func(r *chainResults) { r.Gaussian.Sigma = 1 },
		"no probes":           func(r *chainResults) { r.Gaussian.Probes = nil },
		"probe outside field": func(r *chainResults) { r.Gaussian.Probes[0].Z = 9 },
	} {
		ref := base()
		spoil(&ref)
		if allOK(compareChecks(base(), ref, sm)) {
			t.Errorf("%s: not caught", name)
		}
	}
	// Within tolerance: threshold ±1, area +0.9 %.
	ref := base()
	ref.Thresholds[0]++
	ref.MeshArea["solid"] *= 1.009
	if cs := compareChecks(base(), ref, sm); !allOK(cs) {
		t.Errorf("differences within tolerance rejected: %+v", cs)
	}
}
