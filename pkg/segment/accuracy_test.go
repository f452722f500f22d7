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

// scene renders a drained rock at the given CNR as uint16 and returns the
// grey volume, the truth labels and the forward parameters. The rock is a
// Boolean model of solid grains; the fluids come from full-morphology
// drainage (Hilpert & Miller 2001, pkg/scenario) from the low-z face, at the
// largest capillary radius that gives S_n >= 0.35: nonwetting in the pore
// bodies, wetting in throats and corners, as in a water-wet drainage.
func scene(n int, cnr float64, seed uint64) (*volume.Volume[uint16], *volume.Labels, forward.Params) {
	c := phase.Default()
	rock := volume.NewShape[uint8](n, n, n, 2e-6)
	for i := range rock.Pix {
		rock.Pix[i] = c.Wetting
	}
	synth.Boolean(rock, synth.BooleanIntensity(-math.Log(0.4), 7), 7, c.Solid, seed)
	d, err := scenario.NewDrainage(rock, phase.Of(c.Wetting), scenario.DrainageOptions{OpenSides: true})
	if err != nil {
		panic(err)
	}
	var nw []bool
	for rc := d.EntryRadius(); rc > 1; rc -= 0.25 {
		nw = d.Invade(rc, nil)
		if d.Saturation(nw) >= 0.35 {
			break
		}
	}
	lab := d.Labels(nw, c.Wetting, c.Nonwetting)
	fp := forward.Default()
	fp.CNR, fp.Seed = cnr, seed
	img, err := forward.Render(lab, fp)
	if err != nil {
		panic(err)
	}
	return forward.Uint16(img), forward.Truth(lab, fp), fp
}

// packScene is a scan of the demo's rock: a cemented grain pack
// (synth.GrainPack through scenario.Campaign defaults: porosity 0.28, mean
// grain radius 0.14·n, 18 voxels at n = 128, so pore bodies are ~10–14 voxels
// across) drained by full morphology from the z = 0 face, at the given step
// of a 10-step campaign (r_c falls from the entry radius to 0.8× the
// breakthrough radius). No cylinder: every voxel is rock, so all interfaces
// are between phases. It returns the rendered scan, the truth labels and the
// forward parameters.
func packScene(n int, seed uint64, step int, cnr float64) (*volume.Volume[uint16], *volume.Labels, forward.Params) {
	c := &scenario.Campaign{Shape: [3]int{n, n, n}, Steps: 10, Seed: seed, NoCore: true}
	lab, _, _ := c.Step(step)
	fp := forward.Default()
	fp.CNR, fp.Seed = cnr, seed
	img, err := forward.Render(lab, fp)
	if err != nil {
		panic(err)
	}
	return forward.Uint16(img), forward.Truth(lab, fp), fp
}

// score compares labels with the truth: fraction of truth pore voxels
// labelled correctly, wetting saturation error, relative error of the w–n
// interfacial area as sluice reports it (pkg/measure: 13-direction Crofton
// surface areas of the three phases, A_wn = (S_w + S_n − S_s)/2) and
// porosity error.
type score struct {
	poreAcc, dS, dA, dPhi float64
	sTrue, aTrue, phiTrue float64
}

func scoreOf(t testing.TB, got, truth *volume.Labels, c phase.Codes) score {
	t.Helper()
	var pore, ok float64
	for i, tv := range truth.Pix {
		if tv == c.Wetting || tv == c.Nonwetting {
			pore++
			if got.Pix[i] == tv {
				ok++
			}
		}
	}
	at, st, pt := croftonWN(t, truth)
	ag, sg, pg := croftonWN(t, got)
	return score{poreAcc: ok / pore, dS: sg - st, dA: ag/at - 1, dPhi: pg - pt, sTrue: st, aTrue: at, phiTrue: pt}
}

// croftonWN returns the w–n interfacial area in voxel faces, the wetting
// saturation and the porosity, measured by pkg/measure (curvature and
// contact angles off).
func croftonWN(t testing.TB, l *volume.Labels) (area, sw, phi float64) {
	t.Helper()
	o := measure.Defaults()
	o.SkipCurvature, o.SkipContact = true, true
	r, err := measure.Volume(l, o, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	if r.SatWetting == nil || r.Porosity == nil {
		t.Fatal("no pore space")
	}
	return r.AreaWN / (l.VoxelSize * l.VoxelSize), *r.SatWetting, *r.Porosity
}

// errs are errors against the forward model's truth: 1 − pore accuracy,
// ΔS_w, relative ΔA_wn, Δφ.
type errs struct{ pore, dS, dA, dPhi float64 }

// floors keep a band from collapsing where the measured error happens to
// be near zero: 0.3 % for ΔS_w and Δφ (about what swapping the scan mask
// for the ideal one moves them), 0.5 % pore accuracy and 2 % area (about
// the spread of one variant between CNR 3, 5 and 10).
var floors = errs{pore: 0.005, dS: 0.003, dA: 0.02, dPhi: 0.003}

// checkTruth holds sc to twice the errors m measured against the forward
// model's truth (with floors), and, where the issue 3 targets are given,
// to those when they are tighter. Source: the forward model's truth labels;
// issue 3 targets (pore accuracy ≥ 98 %, |ΔS_w| ≤ 0.01, |ΔA_wn| ≤ 10 %;
// common practice for fluid segmentation quality, cf. Schlüter et al. 2014,
// Water Resour. Res. 50:3615).
func checkTruth(t *testing.T, name string, sc score, m errs, target *errs) {
	t.Helper()
	tol := errs{
		pore: math.Max(2*math.Abs(m.pore), floors.pore),
		dS:   math.Max(2*math.Abs(m.dS), floors.dS),
		dA:   math.Max(2*math.Abs(m.dA), floors.dA),
		dPhi: math.Max(2*math.Abs(m.dPhi), floors.dPhi),
	}
	if target != nil {
		tol.pore, tol.dS, tol.dA = math.Min(tol.pore, target.pore), math.Min(tol.dS, target.dS), math.Min(tol.dA, target.dA)
	}
	if 1-sc.poreAcc > tol.pore || math.Abs(sc.dS) > tol.dS || math.Abs(sc.dA) > tol.dA || math.Abs(sc.dPhi) > tol.dPhi {
		t.Errorf("%s: pore accuracy %.2f %% (want >= %.2f %%), ΔS_w %+.4f (tol %.4f), ΔA_wn %+.1f %% (tol %.1f %%), Δφ %+.4f (tol %.4f)",
			name, 100*sc.poreAcc, 100*(1-tol.pore), sc.dS, tol.dS, 100*sc.dA, 100*tol.dA, sc.dPhi, tol.dPhi)
	}
}

// issue3 are the CNR 5 targets of issue 3 as errors.
var issue3 = errs{pore: 0.02, dS: 0.01, dA: 0.10}

// pipeline runs the whole-volume pipeline: histogram, thresholds, segment.
func pipeline(t testing.TB, grey volume.Any, p Params, solid *volume.Labels) (*volume.Labels, Thresholds) {
	t.Helper()
	h, err := Histogram(grey, grey.Bounds(), p, solid)
	if err != nil {
		t.Fatal(err)
	}
	th, err := ComputeThresholds(h, p)
	if err != nil {
		t.Fatal(err)
	}
	lab, err := Segment(grey, grey.Bounds(), th, p, solid)
	if err != nil {
		t.Fatal(err)
	}
	return lab, th
}

func withFilter(fp forward.Params, method string) Params {
	p := Defaults()
	p.Filter.Method = method
	p.Filter.NLM.Sigma = fp.NoiseSigma()
	p.Hysteresis = Hysteresis{}
	p.MinIsland = 8
	return p
}

// referenceMask segments a brine-saturated reference scan of the same rock
// into a solid mask, as practitioners do with the high-quality scan taken
// before the flow experiment (long exposure: CNR 20, same point-spread
// function). At CNR 20 the noise (σ = 500) is 1/16 of the half contrast
// between brine and rock (8000), so no denoiser is needed, and a 3×3×3
// median would cost more than it gives: it rounds off grain corners and
// closes narrow pore corners (measured on the 128³ pack: 2579 pore voxels
// called solid without a filter, ~3× more with the median). The threshold is
// the Ridler–Calvard midpoint of the two class means (Isodata), which for
// equal noise in both classes is the grey of the blurred edge at the true
// boundary; Otsu would lean towards the larger class (the solid).
func referenceMask(t testing.TB, truth *volume.Labels, fp forward.Params) *volume.Labels {
	t.Helper()
	c := phase.Default()
	rp := fp
	rp.CNR, rp.Seed = 20, fp.Seed+1000
	img, err := forward.Render(idealMask(truth), rp)
	if err != nil {
		t.Fatal(err)
	}
	grey := forward.Uint16(img)
	p := Defaults()
	p.Filter.Method = "none"
	h, err := Histogram(grey, grey.Box, p, nil)
	if err != nil {
		t.Fatal(err)
	}
	tb, err := Isodata(h.Counts)
	if err != nil {
		t.Fatal(err)
	}
	mask := volume.New[uint8](grey.Box, grey.VoxelSize)
	for i, v := range grey.Pix {
		mask.Pix[i] = c.Wetting
		if float64(v) > h.Centre(tb) {
			mask.Pix[i] = c.Solid
		}
	}
	return mask
}

// prefiltered runs the denoiser of p once over the whole scan and returns
// the result as float32 with parameters that bin it exactly as p bins the
// uint16 scan (1024 bins of 64 grey values from 0) and filter it no
// further. The accuracy tests use it so that one NLM pass serves every
// variant; the stages after the filter are the same code either way.
func prefiltered(t testing.TB, grey *volume.Volume[uint16], p Params) *volume.Volume[float32] {
	t.Helper()
	f, err := filtered(grey, grey.Box, p)
	if err != nil {
		t.Fatal(err)
	}
	return f
}

func unfiltered(p Params) Params {
	p.Filter.Method = "none"
	p.Range = [2]float64{0, 65536}
	p.Bins = 1024
	return p
}

type variant struct {
	name       string
	filter     string
	pv         bool
	reference  bool
	ideal      bool // reference mask = true solid
	localFluid int  // local-fluid passes (3-class mode)
	watershed  bool // Assign "watershed" (default); else "threshold"
}

// variants: the first six are the threshold assignment (the only one
// before the watershed existed; their numbers are those of 2026-12-04),
// the last three the default watershed assignment without any
// partial-volume correction (no PSF needed).
var variants = []variant{
	{"median 3-class", "median", false, false, false, 0, false},
	{"nlm 3-class+pv", "nlm", true, false, false, 0, false},
	{"nlm ref+pv, scan mask", "nlm", true, true, false, 0, false},
	{"nlm ref+pv, ideal mask", "nlm", true, true, true, 0, false},
	{"nlm 3-class+pv+lf1", "nlm", true, false, false, 1, false},
	{"nlm 3-class+pv+lf2", "nlm", true, false, false, 2, false},
	{"median 3-class ws", "median", false, false, false, 0, true},
	{"nlm 3-class ws", "nlm", false, false, false, 0, true},
	{"nlm ref ws, scan mask", "nlm", false, true, false, 0, true},
}

func (v variant) params(fp forward.Params) Params {
	p := withFilter(fp, v.filter)
	if !v.watershed {
		p.Assign = AssignThreshold
	}
	if v.pv {
		p.PartialVolume.Blur = fp.Blur
		p.PartialVolume.LocalFluid = v.localFluid
	}
	p.Reference = v.reference
	return p
}

// idealMask is the true solid: what a perfect segmentation of the
// reference scan would give.
func idealMask(truth *volume.Labels) *volume.Labels {
	m := truth.Clone()
	c := phase.Default()
	for i, v := range m.Pix {
		if v == c.Nonwetting {
			m.Pix[i] = c.Wetting
		}
	}
	return m
}

// measuredSeed1 are the errors measured against the truth of the seed-1
// scene (128³ demo rock, step 5) on 2026-12-04, per CNR and variant:
// 1 − pore accuracy, ΔS_w, ΔA_wn (relative), Δφ. The checks allow twice
// each (with floors).
var measuredSeed1 = map[string]errs{
	"CNR 3 median 3-class":          {0.0474, +0.0422, +1.145, +0.0093},
	"CNR 3 nlm 3-class+pv":          {0.0294, +0.0139, +0.816, +0.0065},
	"CNR 3 nlm ref+pv, scan mask":   {0.0143, -0.0061, -0.025, -0.0011},
	"CNR 3 nlm ref+pv, ideal mask":  {0.0099, -0.0038, -0.029, 0},
	"CNR 3 nlm 3-class+pv+lf1":      {0.0296, -0.0003, +0.315, -0.0005},
	"CNR 3 nlm 3-class+pv+lf2":      {0.0295, -0.0077, +0.063, -0.0022},
	"CNR 5 median 3-class":          {0.0433, +0.0364, +1.070, +0.0067},
	"CNR 5 nlm 3-class+pv":          {0.0218, +0.0122, +0.747, +0.0059},
	"CNR 5 nlm ref+pv, scan mask":   {0.0115, -0.0062, -0.051, -0.0011},
	"CNR 5 nlm ref+pv, ideal mask":  {0.0071, -0.0039, -0.056, 0},
	"CNR 5 nlm 3-class+pv+lf1":      {0.0203, -0.0037, +0.161, -0.0007},
	"CNR 5 nlm 3-class+pv+lf2":      {0.0215, -0.0096, -0.053, -0.0023},
	"CNR 10 median 3-class":         {0.0423, +0.0334, +1.041, +0.0042},
	"CNR 10 nlm 3-class+pv":         {0.0165, +0.0121, +0.711, +0.0053},
	"CNR 10 nlm ref+pv, scan mask":  {0.0093, -0.0060, -0.062, -0.0011},
	"CNR 10 nlm ref+pv, ideal mask": {0.0049, -0.0037, -0.066, 0},
	"CNR 10 nlm 3-class+pv+lf1":     {0.0138, -0.0052, +0.058, -0.0010},
	"CNR 10 nlm 3-class+pv+lf2":     {0.0152, -0.0090, -0.094, -0.0021},
	// Watershed assignment (default), no partial-volume correction;
	// measured 2026-12-05.
	"CNR 3 median 3-class ws":      {0.0353, -0.0047, -0.041, -0.0002},
	"CNR 3 nlm 3-class ws":         {0.0329, -0.0109, -0.134, -0.0022},
	"CNR 3 nlm ref ws, scan mask":  {0.0159, -0.0032, +0.037, -0.0011},
	"CNR 5 median 3-class ws":      {0.0306, -0.0064, -0.075, -0.0017},
	"CNR 5 nlm 3-class ws":         {0.0255, -0.0090, -0.116, -0.0021},
	"CNR 5 nlm ref ws, scan mask":  {0.0135, -0.0027, +0.024, -0.0011},
	"CNR 10 median 3-class ws":     {0.0273, -0.0081, -0.082, -0.0029},
	"CNR 10 nlm 3-class ws":        {0.0199, -0.0082, -0.101, -0.0022},
	"CNR 10 nlm ref ws, scan mask": {0.0113, -0.0028, +0.012, -0.0011},
}

// TestAccuracyForwardModel scores the pipeline on forward-model scans of
// the 128³ demo rock at CNR 3, 5 and 10, every variant held to twice its
// measured errors against the truth (measuredSeed1), and reference mode at
// CNR 5 also to the issue 3 targets.
func TestAccuracyForwardModel(t *testing.T) {
	const n = 128
	rows := ""
	for _, cnr := range []float64{3, 5, 10} {
		grey, truth, fp := packScene(n, 1, 5, cnr)
		mask, ideal := referenceMask(t, truth, fp), idealMask(truth)
		nlm := prefiltered(t, grey, withFilter(fp, "nlm"))
		med := prefiltered(t, grey, withFilter(fp, "median"))
		for _, v := range variants {
			p := v.params(fp)
			var m *volume.Labels
			if v.reference {
				m = mask
			}
			if v.ideal {
				m = ideal
			}
			f := nlm
			if v.filter == "median" {
				f = med
			}
			lab, th := pipeline(t, f, unfiltered(p), m)
			sc := scoreOf(t, lab, truth, p.Codes)
			key := fmt.Sprintf("CNR %g %s", cnr, v.name)
			rows += fmt.Sprintf("%-32s pore %6.2f %%  ΔS_w %+7.4f  ΔA_wn %+6.1f %%  Δφ %+7.4f  thresholds %v  (true S_w %.3f, A_wn %.0f, φ %.4f)\n",
				key, 100*sc.poreAcc, sc.dS, 100*sc.dA, sc.dPhi, th.T, sc.sTrue, sc.aTrue, sc.phiTrue)
			var target *errs
			if cnr == 5 && v.reference {
				target = &issue3
			}
			me, ok := measuredSeed1[key]
			if !ok {
				t.Errorf("%s: no measured errors recorded", key)
				continue
			}
			checkTruth(t, key, sc, me, target)
		}
	}
	t.Logf("accuracy on %d³ forward-model scans (rock seed 1, step 5):\n%s", n, rows)
}

// TestAccuracyOtherScenes checks reference mode (scan mask) and single-scan
// 3-class mode with local-fluid passes on another rock and drainage state
// (seed 2: more nonwetting, S_w 0.29, hence more w–n interface in corners),
// at CNR 5, each held to twice its errors measured against the truth on
// 2026-12-04, reference mode also to the issue 3 targets.
func TestAccuracyOtherScenes(t *testing.T) {
	measured := map[string]errs{
		"nlm ref+pv, scan mask": {0.0187, -0.0082, -0.083, -0.0012},
		"nlm 3-class+pv+lf1":    {0.0297, -0.0019, +0.183, +0.0005},
		"nlm 3-class+pv+lf2":    {0.0310, -0.0143, -0.089, -0.0023},
		// Watershed, no partial-volume correction (2026-12-05).
		"nlm 3-class ws":        {0.0381, -0.0158, -0.184, -0.0027},
		"nlm ref ws, scan mask": {0.0230, -0.0013, +0.027, -0.0012},
	}
	grey, truth, fp := packScene(128, 2, 5, 5)
	p := variants[2].params(fp)
	f := prefiltered(t, grey, p)
	mask := referenceMask(t, truth, fp)
	lab, th := pipeline(t, f, unfiltered(p), mask)
	sc := scoreOf(t, lab, truth, p.Codes)
	t.Logf("seed 2, ref+pv scan mask: true S_w %.3f φ %.4f, pore %.2f %%, ΔS_w %+.4f, ΔA_wn %+.1f %%, Δφ %+.4f, threshold %v", sc.sTrue, sc.phiTrue, 100*sc.poreAcc, sc.dS, 100*sc.dA, sc.dPhi, th.T)
	checkTruth(t, "seed 2, "+variants[2].name, sc, measured[variants[2].name], &issue3)
	for _, v := range []variant{variants[4], variants[5], variants[7], variants[8]} {
		p := v.params(fp)
		var sm *volume.Labels
		if v.reference {
			sm = mask
		}
		lab, th := pipeline(t, f, unfiltered(p), sm)
		sc := scoreOf(t, lab, truth, p.Codes)
		t.Logf("seed 2, %s: pore %.2f %%, ΔS_w %+.4f, ΔA_wn %+.1f %%, Δφ %+.4f, thresholds %v", v.name, 100*sc.poreAcc, sc.dS, 100*sc.dA, sc.dPhi, th.T)
		m, ok := measured[v.name]
		if !ok {
			t.Errorf("seed 2, %s: no measured errors recorded", v.name)
			continue
		}
		checkTruth(t, "seed 2, "+v.name, sc, m, nil)
	}
}

// TestAccuracyWithArtefacts checks reference mode (scan mask) on the
// seed-1 scene (96³) with ring streaks (σ 300 grey, 0.15 of the noise) and
// a 5 % intensity drift along z added to the fast scan, against the truth
// at twice the errors measured on 2026-12-04 (pore accuracy 97.93 %,
// ΔS_w −0.0084, ΔA_wn −6.3 %, Δφ −0.0013). The issue 3 targets are for
// clean scans and are not applied.
func TestAccuracyWithArtefacts(t *testing.T) {
	_, truth, fp := packScene(96, 1, 5, 5)
	fp.Rings, fp.Drift = 300, 0.05
	img, err := forward.Render(truth, fp)
	if err != nil {
		t.Fatal(err)
	}
	grey := forward.Uint16(img)
	p := variants[2].params(fp)
	seg, th := pipeline(t, grey, p, referenceMask(t, truth, fp))
	sc := scoreOf(t, seg, truth, p.Codes)
	t.Logf("96³, rings 300 + drift 5 %%, CNR 5: pore %.2f %%, ΔS_w %+.4f, ΔA_wn %+.1f %%, Δφ %+.4f, threshold %v", 100*sc.poreAcc, sc.dS, 100*sc.dA, sc.dPhi, th.T)
	checkTruth(t, "rings + drift", sc, errs{0.0207, -0.0084, -0.063, -0.0013}, nil)
}
