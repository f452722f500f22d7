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
// labelled correctly, wetting saturation error, and relative error of the
// w–n interfacial area as sluice reports it (pkg/measure: 13-direction
// Crofton surface areas of the three phases, A_wn = (S_w + S_n − S_s)/2).
type score struct {
	poreAcc, dS, dA float64
	sTrue, aTrue    float64
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
	at, st := croftonWN(t, truth)
	ag, sg := croftonWN(t, got)
	return score{poreAcc: ok / pore, dS: sg - st, dA: ag/at - 1, sTrue: st, aTrue: at}
}

// croftonWN returns the w–n interfacial area in voxel faces and the wetting
// saturation, measured by pkg/measure (curvature and contact angles off).
func croftonWN(t testing.TB, l *volume.Labels) (area, sw float64) {
	t.Helper()
	o := measure.Defaults()
	o.SkipCurvature, o.SkipContact = true, true
	r, err := measure.Volume(l, o, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	if r.SatWetting == nil {
		t.Fatal("no pore space")
	}
	return r.AreaWN / (l.VoxelSize * l.VoxelSize), *r.SatWetting
}

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
}

var variants = []variant{
	{"median 3-class", "median", false, false, false, 0},
	{"nlm 3-class+pv", "nlm", true, false, false, 0},
	{"nlm ref+pv, scan mask", "nlm", true, true, false, 0},
	{"nlm ref+pv, ideal mask", "nlm", true, true, true, 0},
	{"nlm 3-class+pv+lf1", "nlm", true, false, false, 1},
	{"nlm 3-class+pv+lf2", "nlm", true, false, false, 2},
}

func (v variant) params(fp forward.Params) Params {
	p := withFilter(fp, v.filter)
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

// TestAccuracyForwardModel scores the pipeline on forward-model scans of
// the 128³ demo rock at CNR 3, 5 and 10 and asserts the targets at CNR 5 in
// reference mode (mask from a rendered reference scan, NLM on the fast
// scan); single-scan 3-class mode is only held to sanity bounds.
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
			rows += fmt.Sprintf("CNR %3.0f  %-24s pore %6.2f %%  ΔS_w %+7.4f  ΔA_wn %+6.1f %%  thresholds %v  (true S_w %.3f, A_wn %.0f)\n",
				cnr, v.name, 100*sc.poreAcc, sc.dS, 100*sc.dA, th.T, sc.sTrue, sc.aTrue)
			switch {
			case cnr == 5 && v.reference:
				// Source: issue 3 targets (common practice for fluid segmentation quality).
				if sc.poreAcc < 0.98 || math.Abs(sc.dS) > 0.01 || math.Abs(sc.dA) > 0.10 {
					t.Errorf("CNR 5, %s: pore accuracy %.4f (want >= 0.98), ΔS %.4f (want |.| <= 0.01), ΔA %.3f (want |.| <= 0.10)", v.name, sc.poreAcc, sc.dS, sc.dA)
				}
			case !v.reference:
				checkSingleScan(t, cnr, v, sc)
			}
		}
	}
	t.Logf("accuracy on %d³ forward-model scans (rock seed 1, step 5):\n%s", n, rows)
}

// TestAccuracyOtherScenes asserts the CNR 5 targets in reference mode with
// a scan mask on another rock and drainage state (seed 2: more nonwetting,
// S_w 0.29, hence more w–n interface in corners).
func TestAccuracyOtherScenes(t *testing.T) {
	grey, truth, fp := packScene(128, 2, 5, 5)
	p := variants[2].params(fp)
	f := prefiltered(t, grey, p)
	lab, th := pipeline(t, f, unfiltered(p), referenceMask(t, truth, fp))
	sc := scoreOf(t, lab, truth, p.Codes)
	t.Logf("seed 2, ref+pv scan mask: true S_w %.3f, pore %.2f %%, ΔS_w %+.4f, ΔA_wn %+.1f %%, threshold %v", sc.sTrue, 100*sc.poreAcc, sc.dS, 100*sc.dA, th.T)
	// Source: issue 3 targets.
	if sc.poreAcc < 0.98 || math.Abs(sc.dS) > 0.01 || math.Abs(sc.dA) > 0.10 {
		t.Errorf("seed 2 misses the CNR 5 targets: pore %.4f, ΔS %.4f, ΔA %.3f", sc.poreAcc, sc.dS, sc.dA)
	}
	for _, v := range variants[4:] {
		p := v.params(fp)
		lab, th := pipeline(t, f, unfiltered(p), nil)
		sc := scoreOf(t, lab, truth, p.Codes)
		t.Logf("seed 2, %s: pore %.2f %%, ΔS_w %+.4f, ΔA_wn %+.1f %%, thresholds %v", v.name, 100*sc.poreAcc, sc.dS, 100*sc.dA, th.T)
		checkSingleScan(t, 5, v, sc)
	}
}

// checkSingleScan holds single-scan 3-class mode to what it meets on both
// rocks (seeds 1 and 2) at CNR 5: one local-fluid pass meets the saturation
// target (|ΔS_w| <= 0.01), two passes the area target (|ΔA_wn| <= 10 %);
// neither meets the pore-voxel target (98 %) on both, nor both of the
// others at once, so the rest are bounds around the measured values. Other
// single-scan variants get sanity bounds.
func checkSingleScan(t *testing.T, cnr float64, v variant, sc score) {
	t.Helper()
	if cnr == 5 && v.localFluid == 1 {
		// Source: issue 3 target |ΔS_w| <= 0.01; pore and area are bounds
		// (measured 97.0–98.0 %, +16…+18 %).
		if sc.poreAcc < 0.965 || math.Abs(sc.dS) > 0.01 || math.Abs(sc.dA) > 0.25 {
			t.Errorf("CNR 5, %s: pore %.4f (want >= 0.965), ΔS %.4f (want |.| <= 0.01), ΔA %.3f (want |.| <= 0.25)", v.name, sc.poreAcc, sc.dS, sc.dA)
		}
		return
	}
	if cnr == 5 && v.localFluid == 2 {
		// Source: issue 3 target |ΔA_wn| <= 10 %; pore and saturation are
		// bounds (measured 96.9–97.9 %, −0.010…−0.014).
		if sc.poreAcc < 0.965 || math.Abs(sc.dS) > 0.02 || math.Abs(sc.dA) > 0.10 {
			t.Errorf("CNR 5, %s: pore %.4f (want >= 0.965), ΔS %.4f (want |.| <= 0.02), ΔA %.3f (want |.| <= 0.10)", v.name, sc.poreAcc, sc.dS, sc.dA)
		}
		return
	}
	// Sanity bounds (common practice: no target, but a broken stage would
	// fall far below).
	if sc.poreAcc < 0.90 || math.Abs(sc.dS) > 0.08 || sc.dA < -0.5 || sc.dA > 1.5 {
		t.Errorf("CNR %g, %s: pore %.4f, ΔS %.4f, ΔA %.3f outside sanity bounds", cnr, v.name, sc.poreAcc, sc.dS, sc.dA)
	}
}

// TestAccuracyWithArtefacts reports reference mode (scan mask) on the
// seed-1 scene with ring streaks (σ 300 grey, 0.15 of the noise) and a 5 %
// intensity drift along z added to the fast scan.
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
	t.Logf("96³, rings 300 + drift 5 %%, CNR 5: pore %.2f %%, ΔS_w %+.4f, ΔA_wn %+.1f %%, threshold %v", 100*sc.poreAcc, sc.dS, 100*sc.dA, th.T)
	// Source: issue 3 targets, relaxed (artefacts are not part of the target); common practice.
	if sc.poreAcc < 0.95 {
		t.Errorf("pore accuracy %.4f with artefacts", sc.poreAcc)
	}
}
