package segment

import (
	"fmt"
	"math"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/measure"
	"sluice/pkg/phase"
	"sluice/pkg/scenario"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// targetScene is a forward-model scan for the issue 15 targets: a rock at
// one saturation, rendered at CNR 5 with a Gaussian PSF of σ 1 voxel.
type targetScene struct {
	name  string
	grey  *volume.Volume[uint16]
	doped *volume.Volume[uint16] // the same labels with the brine brightest (order nsw)
	truth *volume.Labels
}

// targetBlur and targetCNR are issue 15's scan conditions.
const (
	targetBlur = 1.0
	targetCNR  = 5.0
)

func renderTarget(t testing.TB, name string, lab *volume.Labels) targetScene {
	t.Helper()
	fp := forward.Default()
	fp.Blur, fp.CNR = targetBlur, targetCNR
	img, err := forward.Render(lab, fp)
	if err != nil {
		t.Fatal(err)
	}
	// Doped brine: the same adjacent contrasts and noise σ 2000 with the
	// brine brightest (n 14000, s 24000, w 40000).
	dp := fp
	dp.Solid, dp.Wetting = 24000, 40000
	dp.CNR = (dp.Wetting - dp.Nonwetting) / fp.NoiseSigma()
	dimg, err := forward.Render(lab, dp)
	if err != nil {
		t.Fatal(err)
	}
	return targetScene{name: name, grey: forward.Uint16(img), doped: forward.Uint16(dimg), truth: forward.Truth(lab, fp)}
}

// packTargets are the demo's rock (cemented grain pack, scenario.Campaign
// defaults at 128³: mean grain radius 18 voxels, pore bodies ~10–14 voxels
// across, no core) at steps 3, 5 and 8 of its 10-step full-morphology
// drainage.
func packTargets(t testing.TB) []targetScene {
	c := &scenario.Campaign{Shape: [3]int{128, 128, 128}, Steps: 10, Seed: 1, NoCore: true}
	var out []targetScene
	for _, step := range []int{1, 3, 5} {
		lab, _, _ := c.Step(step)
		out = append(out, renderTarget(t, fmt.Sprintf("pack step %d", step), lab))
	}
	return out
}

// fineTargets are a fine-grained rock: a Boolean model of solid balls of
// radius 4 voxels at porosity 0.40 (pores 2–6 voxels wide), 96³, drained by
// full morphology (Hilpert & Miller 2001, pkg/scenario) from the low-z face
// to the first capillary radius giving S_n ≥ 0.2, 0.4 and 0.6.
func fineTargets(t testing.TB) []targetScene {
	const n = 96
	c := phase.Default()
	rock := volume.NewShape[uint8](n, n, n, 2e-6)
	for i := range rock.Pix {
		rock.Pix[i] = c.Wetting
	}
	synth.Boolean(rock, synth.BooleanIntensity(-math.Log(0.4), 4), 4, c.Solid, 7)
	d, err := scenario.NewDrainage(rock, phase.Of(c.Wetting), scenario.DrainageOptions{OpenSides: true})
	if err != nil {
		t.Fatal(err)
	}
	var out []targetScene
	for _, want := range []float64{0.2, 0.4, 0.6} {
		var nw []bool
		for rc := d.EntryRadius(); rc > 0.5; rc -= 0.05 {
			nw = d.Invade(rc, nil)
			if d.Saturation(nw) >= want {
				break
			}
		}
		out = append(out, renderTarget(t, fmt.Sprintf("fine S_n≥%.1f", want), d.Labels(nw, c.Wetting, c.Nonwetting)))
	}
	return out
}

// confusion counts voxels by true phase (rows solid, wetting, nonwetting)
// and label (columns in the same order).
func confusionOf(got, truth *volume.Labels, c phase.Codes) [3][3]int64 {
	idx := func(l uint8) int {
		switch l {
		case c.Solid:
			return 0
		case c.Wetting:
			return 1
		case c.Nonwetting:
			return 2
		}
		return -1
	}
	var m [3][3]int64
	for i, tv := range truth.Pix {
		a, b := idx(tv), idx(got.Pix[i])
		if a >= 0 && b >= 0 {
			m[a][b]++
		}
	}
	return m
}

// angleOf returns the mean contact angle pkg/measure reports on lab (wall
// gap g voxels) and its number of samples.
func angleOf(t testing.TB, lab *volume.Labels, gap float64) (float64, int64) {
	t.Helper()
	o := measure.Defaults()
	o.SkipCurvature = true
	o.Contact.WallGap = gap
	r, err := measure.Volume(lab, o, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	if r.AngleMean == nil {
		return math.NaN(), 0
	}
	return *r.AngleMean, r.AngleSamples
}

// targetRow is one line of the issue 15 table.
type targetRow struct {
	sc                score
	dTheta, dTheta3   float64
	theta, theta3     float64
	conf              [3][3]int64
	samples, samplesT int64
}

func measureTarget(t testing.TB, s targetScene, p Params) targetRow {
	t.Helper()
	grey := s.grey
	if p.Order == "nsw" {
		grey = s.doped
	}
	lab, _ := pipeline(t, grey, p, nil)
	var r targetRow
	r.sc = scoreOf(t, lab, s.truth, p.Codes)
	r.conf = confusionOf(lab, s.truth, p.Codes)
	a, n := angleOf(t, lab, 0)
	at, nt := angleOf(t, s.truth, 0)
	a3, _ := angleOf(t, lab, 3)
	at3, _ := angleOf(t, s.truth, 3)
	r.theta, r.theta3, r.samples, r.samplesT = at, at3, n, nt
	r.dTheta, r.dTheta3 = a-at, a3-at3
	return r
}

func (r targetRow) String() string {
	c := r.conf
	return fmt.Sprintf("pore %6.2f %%  ΔS_w %+7.4f  ΔA_wn %+6.1f %%  θ %5.1f°: Δθ %+5.1f° (gap 3: %5.1f°, %+5.1f°)  S_w %.3f  confusion s[%d %d %d] w[%d %d %d] n[%d %d %d]",
		100*r.sc.poreAcc, r.sc.dS, 100*r.sc.dA, r.theta, r.dTheta, r.theta3, r.dTheta3, r.sc.sTrue,
		c[0][0], c[0][1], c[0][2], c[1][0], c[1][1], c[1][2], c[2][0], c[2][1], c[2][2])
}

// measuredIssue15 are the errors of TestIssue15Table measured 2026-12-05:
// 1 − pore accuracy, ΔS_w, relative ΔA_wn, Δθ (grey − labels, contact
// wall gap 0).
var measuredIssue15 = map[string][4]float64{
	"pack step 1 nws":  {0.0263, +0.0003, +0.066, +4.8},
	"pack step 1 nsw":  {0.0255, +0.0016, -0.113, +11.3},
	"pack step 3 nws":  {0.0367, +0.0051, +0.092, +0.9},
	"pack step 3 nsw":  {0.0425, +0.0032, -0.220, +12.0},
	"pack step 5 nws":  {0.0367, +0.0080, +0.151, +0.3},
	"pack step 5 nsw":  {0.0465, +0.0013, -0.267, +14.4},
	"fine S_n≥0.2 nws": {0.1298, +0.0142, +0.261, +0.1},
	"fine S_n≥0.2 nsw": {0.1267, -0.0166, -0.072, +19.1},
	"fine S_n≥0.4 nws": {0.1554, +0.0583, +0.357, +0.9},
	"fine S_n≥0.4 nsw": {0.1449, +0.0233, -0.042, +11.4},
	"fine S_n≥0.6 nws": {0.1638, +0.0836, +0.541, +1.1},
	"fine S_n≥0.6 nsw": {0.1361, +0.0546, +0.120, +9.7},
}

// TestIssue15Table measures the issue 15 targets — pore voxels labelled
// right ≥ 98.5 %, |ΔS_w| ≤ 0.01, |ΔA_wn| ≤ 10 %, contact-angle mean within
// 3° of the labels' — on the demo's grain pack (128³, steps 1, 3, 5 of its
// drainage: S_w 0.92, 0.51, 0.44) and a fine-grained rock (96³, grain
// radius 4, porosity 0.40, S_w 0.78, 0.42, 0.31) at CNR 5 with a PSF of σ 1
// voxel, single scan with the defaults (median, 3-class Otsu, seeded
// watershed), as uint16 and with doped brine (order nsw; before: without
// the solid-layer passes). Rows are logged with the confusion matrix per
// phase (rows the truth solid, wetting, nonwetting; columns the labels).
//
// Source: the forward model's truth labels; the contact angle is that of
// pkg/measure on the truth labels (the estimator itself is checked against
// analytic caps in pkg/contact). Each row is held to twice its measured
// errors (floors 0.5 % pore, 0.003 ΔS_w, 2 % ΔA_wn, 3° Δθ), and to a
// target where the measurement meets it.
func TestIssue15Table(t *testing.T) {
	if testing.Short() {
		t.Skip("six forward-model scans up to 128³, three segmentations each, with contact angles")
	}
	rows := ""
	for _, s := range append(packTargets(t), fineTargets(t)...) {
		for _, v := range []string{"nws", "nsw", "nsw before"} {
			p := Defaults()
			p.Order = v[:3]
			noSolidLayers = v == "nsw before"
			r := measureTarget(t, s, p)
			noSolidLayers = false
			key := s.name + " " + v
			rows += fmt.Sprintf("%-14s %-10s %s\n", s.name, v, r)
			if v == "nsw before" {
				continue
			}
			got := [4]float64{1 - r.sc.poreAcc, r.sc.dS, r.sc.dA, r.dTheta}
			m, ok := measuredIssue15[key]
			if !ok {
				t.Errorf("%s: no measured errors recorded (got %v)", key, got)
				continue
			}
			floor := [4]float64{0.005, 0.003, 0.02, 3}
			target := [4]float64{0.015, 0.01, 0.10, 3}
			for j := range got {
				tol := math.Max(2*math.Abs(m[j]), floor[j])
				if math.Abs(m[j]) <= target[j] {
					tol = math.Min(tol, target[j])
				}
				if math.IsNaN(got[j]) || math.Abs(got[j]) > tol {
					t.Errorf("%s: error %d is %+.4f, measured %+.4f, tolerance %.4f", key, j, got[j], m[j], tol)
				}
			}
		}
	}
	t.Logf("issue 15 targets, CNR 5, PSF σ 1 voxel, defaults:\n%s", rows)
}
