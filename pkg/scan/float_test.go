package scan

import (
	"fmt"
	"math"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/measure"
	"sluice/pkg/segment"
	"sluice/pkg/volume"
)

// greyKind is one way of recording the same scene: integer grey or float32
// attenuation, nonwetting–wetting–solid ("nws") or doped-brine
// ("nsw") grey order.
type greyKind struct {
	name  string
	order string
	float bool
	// levels of n, w, s and the noise σ, in grey units or cm⁻¹.
	n, w, s, sigma float64
}

// greyKinds: the default uint16 scan (forward.Default: n 14000, w 24000,
// s 40000, σ 2000, i.e. CNR 5), the same scene as float32 attenuation
// coefficients in cm⁻¹ (gas 0.2, brine 0.9, rock 2.0, σ 0.14: CNR 5 too;
// the gas peak's noise tail runs below zero, as it does in reconstructed
// attenuation), and both with the brine doped so that it is the brightest
// phase (order nsw). The doped scans keep the adjacent contrasts and the
// noise of the undoped ones (n 14000, s 24000, w 40000, σ 2000; n 0.2,
// s 0.9, w 2.0 cm⁻¹, σ 0.14), so that the segmentation faces the same
// separation problem and should reach the same accuracy; forward's CNR,
// |μ_w − μ_n|/σ, is then 13 (n and w are no longer adjacent).
var greyKinds = []greyKind{
	{"uint16 nws", "nws", false, 14000, 24000, 40000, 2000},
	{"float32 nws", "nws", true, 0.2, 0.9, 2.0, 0.14},
	{"uint16 nsw", "nsw", false, 14000, 40000, 24000, 2000},
	{"float32 nsw", "nsw", true, 0.2, 2.0, 0.9, 0.14},
}

// render renders the scene's labels as kind k.
func (k greyKind) render(t testing.TB, s *fluidScene, seed uint64) volume.Any {
	t.Helper()
	fp := forward.Default()
	fp.Seed = seed
	fp.Nonwetting, fp.Wetting, fp.Solid = k.n, k.w, k.s
	fp.CNR = math.Abs(k.w-k.n) / k.sigma
	img, err := forward.Render(s.lab, fp)
	if err != nil {
		t.Fatal(err)
	}
	if k.float {
		return img
	}
	return forward.Uint16(img)
}

func (k greyKind) config(tile int) campaign.Config {
	c := campaign.Default()
	c.Tile = tile
	c.Segment.Order = k.order
	c.Measure.SkipContact, c.Measure.SkipCurvature = true, true
	return c
}

// accuracy of labels against the truth: fraction of true pore voxels
// labelled right, ΔS_w and relative ΔA_wn (pkg/measure on both).
type accuracy struct{ pore, dS, dA float64 }

func accuracyOf(t testing.TB, got, truth *volume.Labels) accuracy {
	t.Helper()
	o := measure.Defaults()
	o.SkipCurvature, o.SkipContact = true, true
	rt, err := measure.Volume(truth, o, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	rg, err := measure.Volume(got, o, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	var pore, ok float64
	for i, v := range truth.Pix {
		if v == 1 || v == 2 {
			pore++
			if got.Pix[i] == v {
				ok++
			}
		}
	}
	return accuracy{ok / pore, *rg.SatWetting - *rt.SatWetting, rg.AreaWN/rt.AreaWN - 1}
}

// kindRun is one kind of scan through a campaign of scenes in one
// threshold scope: the accuracy of every step, and the record and
// prepared pass 1 of each.
type kindRun struct {
	acc  []accuracy
	prep []Prepared
	ct   *segment.CampaignThresholds
}

func runKind(t *testing.T, k greyKind, scenes []*fluidScene, scope string) kindRun {
	t.Helper()
	c := k.config(48)
	c.Segment.ThresholdScope = scope
	var r kindRun
	for i, s := range scenes {
		lab, _, prep, fresh, err := WholeCampaign(k.render(t, s, 1), c, nil, 2, r.ct, fmt.Sprintf("s%02d", i), float64(i))
		if err != nil {
			t.Fatalf("%s %s step %d: %v", k.name, scope, i, err)
		}
		if fresh != nil {
			r.ct = fresh
		}
		a := accuracyOf(t, lab, s.truth)
		r.acc = append(r.acc, a)
		r.prep = append(r.prep, prep)
		t.Logf("%-11s %-8s S_n %.3f: pore %.2f %%  ΔS_w %+.4f  ΔA_wn %+5.1f %%  T %.4g", k.name, scope, s.snw, 100*a.pore, a.dS, 100*a.dA, prep.Thresholds.T)
	}
	return r
}

// worst returns the lowest pore accuracy and the largest |ΔS_w| and
// |ΔA_wn| of a run.
func (r kindRun) worst() accuracy {
	w := accuracy{pore: 1}
	for _, a := range r.acc {
		w.pore, w.dS, w.dA = math.Min(w.pore, a.pore), math.Max(w.dS, math.Abs(a.dS)), math.Max(w.dA, math.Abs(a.dA))
	}
	return w
}

// TestFloat32AndDopedBrine: float32 attenuation scans and doped-brine
// scans (grey order nsw) of a drainage (S_n 0.05 … 0.70, 96³, CNR 5, PSF
// σ 0.7 voxel; greyKinds) go through histogram, thresholds (per step and
// campaign), median, seeded watershed and tiles as the uint16 scans do.
//
// Source: the forward model's truth labels (pkg/forward renders the grey
// from known labels; pore voxels right, ΔS_w and ΔA_wn by pkg/measure on
// both). Measured 2026-12-05, largest errors over the five steps (pore
// accuracy lowest, |ΔS_w|, |ΔA_wn|):
//
//	uint16  nws step      94.13 %  0.0129  14.7 %
//	float32 nws step      94.17 %  0.0122  14.4 %
//	uint16  nws campaign  93.23 %  0.0039   8.9 %
//	float32 nws campaign  93.23 %  0.0042   9.2 %
//	uint16  nsw step      93.75 %  0.0113  25.4 %
//	float32 nsw step      93.77 %  0.0107  25.4 %
//	uint16  nsw campaign  91.48 %  0.0318  35.4 %
//	float32 nsw campaign  91.51 %  0.0317  35.4 %
//
// float32 and uint16 of one scene differ per step by at most 0.04 % pore
// voxels, 0.0008 in S_w and 2.5 % in A_wn (the binning differs: 1024 bins
// of 64 grey against the campaign's float32 range widened by
// segment.FloatMargin). Bands: twice those (0.1 %, 0.002, 5 %). The
// uint16 and float32 campaigns meet the bounds of the uint16 campaign test
// (|ΔS_w| ≤ 0.008, TestCampaignThresholdsAccuracy) and |ΔA_wn| ≤ 10 %
// (issue 15). Doped brine per step is as accurate as the undoped scans in
// pore voxels and S_w (lowest pore accuracy within 0.5 %, |ΔS_w| within
// 0.005 of theirs; measured −0.38 %, −0.0016) but reads the w–n area lower
// (|ΔA_wn| 25.4 % against 14.7 %: held within 15 % of the undoped one).
// Before the solid-layer passes (segment: the blurred n–w edge passes
// through the solid grey) the doped scans read ΔA_wn −59 … −82 % and pore
// 88.2 % at S_n 0.7 (seen failing here). Doped brine with campaign
// thresholds is worse again (|ΔS_w| 0.032 at S_n 0.70; per step 0.011):
// held to twice its measured errors, a limitation documented in
// docs/segmentation-thresholds.md.
func TestFloat32AndDopedBrine(t *testing.T) {
	if testing.Short() {
		t.Skip("40 forward-model steps segmented whole; run without -short")
	}
	scenes := campaignScenes(t)[1:]
	runs := map[string]kindRun{}
	for _, k := range greyKinds {
		for _, scope := range []string{segment.ScopeStep, segment.ScopeCampaign} {
			runs[k.name+" "+scope] = runKind(t, k, scenes, scope)
		}
	}
	for _, order := range []string{"nws", "nsw"} {
		for _, scope := range []string{segment.ScopeStep, segment.ScopeCampaign} {
			u, f := runs["uint16 "+order+" "+scope], runs["float32 "+order+" "+scope]
			for i := range scenes {
				a, b := u.acc[i], f.acc[i]
				if math.Abs(a.pore-b.pore) > 0.001 || math.Abs(a.dS-b.dS) > 0.002 || math.Abs(a.dA-b.dA) > 0.05 {
					t.Errorf("%s %s step %d: float32 pore %.2f %% ΔS_w %+.4f ΔA_wn %+.1f %%, uint16 %.2f %% %+.4f %+.1f %%: want within 0.1 %%, 0.002, 5 %%",
						order, scope, i, 100*b.pore, b.dS, 100*b.dA, 100*a.pore, a.dS, 100*a.dA)
				}
			}
		}
	}
	for _, name := range []string{"uint16 nws campaign", "float32 nws campaign"} {
		if w := runs[name].worst(); w.dS > 0.008 || w.dA > 0.10 {
			t.Errorf("%s: largest |ΔS_w| %.4f, |ΔA_wn| %.1f %%; want <= 0.008 and 10 %%", name, w.dS, 100*w.dA)
		}
	}
	for _, dt := range []string{"uint16", "float32"} {
		a, b := runs[dt+" nws step"].worst(), runs[dt+" nsw step"].worst()
		if b.pore < a.pore-0.005 || b.dS > a.dS+0.005 || b.dA > a.dA+0.15 {
			t.Errorf("%s doped brine per step: pore %.2f %%, |ΔS_w| %.4f, |ΔA_wn| %.1f %%; undoped %.2f %%, %.4f, %.1f %%: want within 0.5 %%, 0.005, 15 %%",
				dt, 100*b.pore, b.dS, 100*b.dA, 100*a.pore, a.dS, 100*a.dA)
		}
		if w := runs[dt+" nsw campaign"].worst(); w.pore < 1-2*(1-0.9148) || w.dS > 2*0.0318 || w.dA > 2*0.354 {
			t.Errorf("%s doped brine, campaign: pore %.2f %%, |ΔS_w| %.4f, |ΔA_wn| %.1f %%: beyond twice the measured 91.48 %%, 0.0318, 35.4 %%", dt, 100*w.pore, w.dS, 100*w.dA)
		}
	}
	// The campaign's float32 binning is fixed by the step that fixed its
	// thresholds and kept by every later step, as are the thresholds (no
	// drift in these scans).
	for _, order := range []string{"nws", "nsw"} {
		r := runs["float32 "+order+" campaign"]
		ct := r.ct
		if ct == nil || ct.Step != "s00" || ct.Bins != 1024 || !(ct.Range[1] > ct.Range[0]) || ct.Range[0] >= 0 {
			t.Fatalf("float32 %s: record %+v, want fixed by s00 with 1024 bins over a range reaching below 0", order, ct)
		}
		for i, p := range r.prep {
			h := p.Hist
			if h.Lo != ct.Range[0] || h.Width != (ct.Range[1]-ct.Range[0])/float64(ct.Bins) || len(h.Counts) != ct.Bins {
				t.Errorf("float32 %s step %d: binned %g + %g × %d, want the campaign's %v in %d bins", order, i, h.Lo, h.Width, len(h.Counts), ct.Range, ct.Bins)
			}
			if fmt.Sprint(p.Thresholds.T) != fmt.Sprint(ct.T) || p.Thresholds.Campaign.Drift.Beyond {
				t.Errorf("float32 %s step %d: thresholds %v (%s), want the campaign's %v", order, i, p.Thresholds.T, p.Thresholds.Campaign.Drift.Note, ct.T)
			}
		}
	}
}

// TestFloat32AndDopedBrineTiling: the labels of float32 and doped-brine
// scans, segmented with a stored campaign record, do not depend on the
// tiling (1, 8 and 27 tiles; every pass, the solid-layer passes included,
// is exact under the halo).
func TestFloat32AndDopedBrineTiling(t *testing.T) {
	if testing.Short() {
		t.Skip("9 forward-model steps segmented whole; run without -short")
	}
	scenes := campaignScenes(t)
	for _, k := range greyKinds[1:] {
		c := k.config(96)
		c.Segment.ThresholdScope = segment.ScopeCampaign
		_, _, _, ct, err := WholeCampaign(k.render(t, scenes[1], 1), c, nil, 2, nil, "s00", 0)
		if err != nil || ct == nil {
			t.Fatalf("%s: %v %v", k.name, err, ct)
		}
		g := k.render(t, scenes[4], 1)
		var first *volume.Labels
		for _, tile := range []int{96, 48, 32} {
			c.Tile = tile
			lab, _, _, _, err := WholeCampaign(g, c, nil, 2, ct, "s01", 1)
			if err != nil {
				t.Fatal(err)
			}
			if first == nil {
				first = lab
				continue
			}
			n := 0
			for i := range lab.Pix {
				if lab.Pix[i] != first.Pix[i] {
					n++
				}
			}
			if n > 0 {
				t.Errorf("%s: %d labels differ between tile 96 and tile %d", k.name, n, tile)
			}
		}
	}
}

// TestCampaignBinningRefusals: a record fixed on uint16 scans is refused
// for a float32 scan in one line, and a float32 step beyond the campaign's
// range is flagged.
func TestCampaignBinningRefusals(t *testing.T) {
	s := campaignScenes(t)[3]
	k := greyKinds[0]
	c := k.config(96)
	c.Segment.ThresholdScope = segment.ScopeCampaign
	_, _, _, ct, err := WholeCampaign(k.render(t, s, 1), c, nil, 2, nil, "s00", 0)
	if err != nil || ct == nil {
		t.Fatal(err, ct)
	}
	_, _, _, _, err = WholeCampaign(greyKinds[1].render(t, s, 1), c, nil, 2, ct, "s01", 1)
	if err == nil || !strings.Contains(err.Error(), "uint16") || !strings.Contains(err.Error(), "float32") || strings.Contains(err.Error(), "\n") {
		t.Errorf("float32 scan against a uint16 record: %v, want a one-line refusal naming both", err)
	}
	// float32: a later scan with every level × 3 lies mostly beyond the
	// campaign's range.
	f := greyKinds[1]
	_, _, _, ct, err = WholeCampaign(f.render(t, s, 1), c, nil, 2, nil, "s00", 0)
	if err != nil || ct == nil {
		t.Fatal(err, ct)
	}
	hot := f
	hot.n, hot.w, hot.s, hot.sigma = 3*f.n, 3*f.w, 3*f.s, 3*f.sigma
	_, res, prep, _, err := WholeCampaign(hot.render(t, s, 1), c, nil, 2, ct, "s01", 1)
	if err != nil {
		t.Fatal(err)
	}
	d := prep.Thresholds.Campaign.Drift
	if !d.Beyond || !strings.Contains(d.Note, "outside the campaign's float32 range") || res.GreyDriftBeyond == nil || !*res.GreyDriftBeyond {
		t.Errorf("float32 scan beyond the campaign's range: drift %+v, want flagged", d)
	}
}
