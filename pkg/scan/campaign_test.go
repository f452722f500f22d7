package scan

import (
	"fmt"
	"math"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/segment"
	"sluice/pkg/volume"
)

// renderScaled renders a scene's labels with every grey level (phases,
// wall, air) multiplied by gain: a beam that decays between scans. The
// noise keeps CNR 5 of the scaled contrast.
func renderScaled(t testing.TB, s *fluidScene, gain float64, seed uint64) *volume.Volume[uint16] {
	t.Helper()
	fp := forward.Default()
	fp.Seed = seed
	fp.Nonwetting *= gain
	fp.Wetting *= gain
	fp.Solid *= gain
	fp.Wall *= gain
	fp.Air *= gain
	img, err := forward.Render(s.lab, fp)
	if err != nil {
		t.Fatal(err)
	}
	return forward.Uint16(img)
}

type campaignRun struct {
	snw  []float64 // measured S_n per step
	th   [][]float64
	prep []Prepared
	ct   *segment.CampaignThresholds
}

// runCampaign segments and measures the grey scans of a campaign in
// order, in threshold scope "step" or "campaign".
func runCampaign(t testing.TB, greys []*volume.Volume[uint16], scope string, tile int) campaignRun {
	t.Helper()
	c := campaign.Default()
	c.Tile = tile
	c.Measure.SkipContact, c.Measure.SkipCurvature = true, true
	c.Segment.ThresholdScope = scope
	var out campaignRun
	for i, g := range greys {
		_, res, prep, fresh, err := WholeCampaign(g, c, nil, 2, out.ct, fmt.Sprintf("s%02d", i), float64(i))
		if err != nil {
			t.Fatalf("step %d: %v", i, err)
		}
		if fresh != nil {
			out.ct = fresh
		}
		out.snw = append(out.snw, snwOf(res))
		out.th = append(out.th, prep.Thresholds.T)
		out.prep = append(out.prep, prep)
	}
	return out
}

// campaignScenes are forward-model scans (CNR 5, blur 0.7 voxel, 96³) of
// one rock whose pore space goes from brine only to S_n 0.7 by
// full-morphology drainage: the phase fractions change strongly.
func campaignScenes(t testing.TB) []*fluidScene {
	var out []*fluidScene
	for _, x := range []float64{0, 0.05, 0.1, 0.3, 0.5, 0.7} {
		out = append(out, makeFluidScene(t, 96, 1, x))
	}
	return out
}

// TestCampaignThresholdsAccuracy: with threshold scope "campaign" the
// thresholds are fixed by the first step holding both fluids and stay the
// same for every later step, and S_n is at least as accurate as per-step
// Otsu's on a campaign whose fluid fractions change strongly.
//
// Source: the forward model's truth labels (pkg/forward renders the grey
// from known labels). Measured 2026-12-05, S_n error against the truth at
// true S_n 0, 0.049, 0.099, 0.295, 0.493, 0.695: per-step Otsu 0, +0.0012,
// +0.0009, +0.0036, +0.0069, +0.0129 (3-class Otsu moves its split towards
// the smaller class as S_n grows: T 20192 → 20960); campaign 0 (pending:
// brine only, own split), +0.0006, −0.0001, +0.0004, +0.0015, +0.0039
// (thresholds 19124.7 and 32062.5, midpoints of the levels 14069.8,
// 24179.6, 39945.4 found at the S_n 0.049 step). Band 0.008 ≈ 2 × the
// largest campaign error.
func TestCampaignThresholdsAccuracy(t *testing.T) {
	scenes := campaignScenes(t)
	var greys []*volume.Volume[uint16]
	for _, s := range scenes {
		greys = append(greys, s.grey)
	}
	step := runCampaign(t, greys, segment.ScopeStep, 48)
	camp := runCampaign(t, greys, segment.ScopeCampaign, 48)
	var maxStep, maxCamp float64
	for i, s := range scenes {
		es, ec := step.snw[i]-s.snw, camp.snw[i]-s.snw
		t.Logf("S_n %.4f: per-step %+.4f T %v | campaign %+.4f T %v", s.snw, es, step.th[i], ec, camp.th[i])
		maxStep, maxCamp = math.Max(maxStep, math.Abs(es)), math.Max(maxCamp, math.Abs(ec))
		if math.Abs(ec) > 0.008 {
			t.Errorf("campaign scope, true S_n %.4f: error %+.4f beyond 0.008", s.snw, ec)
		}
	}
	if !(maxCamp <= maxStep) {
		t.Errorf("campaign thresholds: largest |ΔS_n| %.4f, per-step Otsu %.4f; want campaign <= per-step", maxCamp, maxStep)
	}
	ct := camp.ct
	if ct == nil || ct.Source != segment.SourceFirstStep || ct.Step != "s01" {
		t.Fatalf("campaign thresholds %+v, want fixed by step s01 (the first holding both fluids)", ct)
	}
	if c := camp.prep[0].Thresholds.Campaign; c == nil || !c.Pending {
		t.Errorf("brine-only first step: %+v, want pending with its own split", c)
	}
	for i := 1; i < len(scenes); i++ {
		if ph := camp.prep[i].Thresholds.Phases; ph.Decided != segment.DecidedCampaign || !strings.Contains(ph.Describe(), "campaign thresholds") {
			t.Errorf("step %d: phases %+v (%s), want decided by the campaign thresholds", i, ph, ph.Describe())
		}
		if fmt.Sprint(camp.th[i]) != fmt.Sprint(ct.T) {
			t.Errorf("step %d: thresholds %v, want the campaign's %v (no drift in these scans)", i, camp.th[i], ct.T)
		}
	}
	// The levels: Source: forward.Default() phase greys 14000, 24000,
	// 40000; measured after the median 14069.8, 24179.6, 39945.4 (partial
	// volume pulls the brine peak towards the rock); band 1 % of each.
	for k, want := range []float64{14000, 24000, 40000} {
		if l := ct.Levels[k]; l == nil || math.Abs(*l-want) > 0.01*want {
			t.Errorf("campaign level %d: %v, want %g ± 1 %%", k, fmtPtrs(ct.Levels), want)
		}
	}
}

// TestCampaignDrift: a beam that decays (every grey level × gain, gain
// falling 1 % per scan) is followed: the drift of each phase level has the
// sign and magnitude of the imposed one, the thresholds move with it and
// S_n stays within 0.01; a drop to gain 0.85 is flagged beyond the bound.
//
// Source: the imposed gains on the forward model (expected drift of class
// k = (g_i/g_1 − 1)·L_k, L_k the campaign level fixed at the gain-0.99
// step) and its truth labels. Measured 2026-12-05 (gains 1, 0.99, 0.98,
// 0.97, 0.96, 0.95 on S_n 0 … 0.7): solid drift within 2 grey of the
// imposed one (−1596.8 vs −1597.9), nonwetting within 51, brine within 138
// grey (−587.7 vs −725.4 at S_n 0.49: the brine peak moves with the fluid
// fractions too; without any gain the levels move by up to 59 (n) and 145
// (w) grey, 1.45 % of the smallest contrast, which is why shifts below
// DriftIgnore = 2 % are not applied). Band: 300 grey (≈ 2 × 138). S_n error
// with the drift followed at most +0.0046 (target 0.01); with the campaign
// thresholds left unmoved at most −0.0023, and at gain 0.90 −0.016 unmoved
// vs +0.0047 followed. At gain 0.85 the brine peak leaves its window (no
// level), the w|s threshold would move by 36 % of its contrast: capped at
// 25 % and flagged; S_n +0.0068 (unmoved −0.053).
func TestCampaignDrift(t *testing.T) {
	scenes := campaignScenes(t)
	gains := []float64{1, 0.99, 0.98, 0.97, 0.96, 0.95}
	var greys []*volume.Volume[uint16]
	for i, s := range scenes {
		greys = append(greys, renderScaled(t, s, gains[i], 1))
	}
	r := runCampaign(t, greys, segment.ScopeCampaign, 48)
	ct := r.ct
	if ct == nil || ct.Step != "s01" {
		t.Fatalf("campaign thresholds %+v, want fixed by step s01", ct)
	}
	for i := 2; i < len(scenes); i++ {
		d := r.prep[i].Thresholds.Campaign.Drift
		var mean [3]float64
		for k := 0; k < 3; k++ {
			want := (gains[i]/gains[1] - 1) * *ct.Levels[k]
			mean[k] = want
			got := d.Delta[k]
			if got == nil || math.Abs(*got-want) > 300 || math.Signbit(*got) != math.Signbit(want) {
				t.Errorf("step %d gain %.2f class %c: drift %v, want %.0f ± 300 grey", i, gains[i], ct.Order[k], fmtPtrs(d.Delta), want)
			}
			if f := d.Fraction[k]; got != nil && (f == nil || math.Abs(*f - *got / *ct.Contrast[0]) > 1e-12) {
				t.Errorf("step %d class %d: fraction %v, want drift/contrast %v", i, k, fmtPtrs(d.Fraction), *got / *ct.Contrast[0])
			}
		}
		// Thresholds follow: each moves by the mean of its phases' drifts
		// (applied once it exceeds 2 % of the contrast).
		for j := 0; j < 2; j++ {
			want := (mean[j] + mean[j+1]) / 2
			if math.Abs(want) < segment.DriftIgnore**ct.Contrast[j]-300 {
				continue
			}
			if got := r.th[i][j] - ct.T[j]; math.Abs(got-want) > 300 || d.Beyond {
				t.Errorf("step %d threshold %d moved %.0f, want %.0f ± 300 (beyond %v)", i, j, got, want, d.Beyond)
			}
		}
		if e := r.snw[i] - scenes[i].snw; math.Abs(e) > 0.01 {
			t.Errorf("step %d gain %.2f: S_n error %+.4f beyond 0.01", i, gains[i], e)
		}
		t.Logf("step %d gain %.2f: drift %s (fraction %s) shift %v; S_n %+.4f", i, gains[i], fmtPtrs(d.Delta), fmtPtrs(d.Fraction), d.Shift, r.snw[i]-scenes[i].snw)
	}
	// Beyond the bound: flagged, the shift capped at DriftMax.
	c := campaign.Default()
	c.Tile = 48
	c.Measure.SkipContact, c.Measure.SkipCurvature = true, true
	c.Segment.ThresholdScope = segment.ScopeCampaign
	_, res, prep, _, err := WholeCampaign(renderScaled(t, scenes[5], 0.85, 1), c, nil, 2, ct, "s05", 5)
	if err != nil {
		t.Fatal(err)
	}
	d := prep.Thresholds.Campaign.Drift
	t.Logf("gain 0.85: drift %s shift %v beyond %v: %s; S_n %+.4f", fmtPtrs(d.Delta), d.Shift, d.Beyond, d.Note, snwOf(res)-scenes[5].snw)
	if res.GreyDriftBeyond == nil || !*res.GreyDriftBeyond || res.GreyDriftSolid == nil || *res.GreyDriftSolid != *d.Delta[2] || res.GreyDriftNote != d.Note {
		t.Errorf("gain 0.85: result drift %v %v %q, want beyond, the solid drift %v and the note", res.GreyDriftBeyond, res.GreyDriftSolid, res.GreyDriftNote, *d.Delta[2])
	}
	if !d.Beyond || d.Note == "" || math.Abs(math.Abs(d.Shift[1])-segment.DriftMax**ct.Contrast[1]) > 1e-9 {
		t.Errorf("gain 0.85: beyond %v, shift %v, note %q; want flagged with the w|s shift capped at %.0f", d.Beyond, d.Shift, d.Note, segment.DriftMax**ct.Contrast[1])
	}
}

// TestCampaignTilingInvariant: the campaign thresholds, the drift and the
// shifted thresholds come from the merged histogram, so they are the same
// for 1, 8 and 27 tiles.
func TestCampaignTilingInvariant(t *testing.T) {
	scenes := campaignScenes(t)
	var first string
	for i, tile := range []int{96, 48, 32} {
		c := campaign.Default()
		c.Tile = tile
		c.Segment.ThresholdScope = segment.ScopeCampaign
		var ct *segment.CampaignThresholds
		var got string
		for k, g := range []*volume.Volume[uint16]{scenes[1].grey, renderScaled(t, scenes[4], 0.96, 1)} {
			prep, eff, err := Prepare(MemorySource(g), g.Bounds(), g.DType(), c, nil, 2)
			if err != nil {
				t.Fatal(err)
			}
			prep, fresh, err := CampaignPrepare(prep, eff, ct, fmt.Sprint("s", k), float64(k))
			if err != nil {
				t.Fatal(err)
			}
			if fresh != nil {
				ct = fresh
			}
			got += fmt.Sprint(prep.Thresholds.T, fmtPtrs(prep.Thresholds.Campaign.Drift.Delta), prep.Thresholds.Campaign.Drift.Shift)
		}
		if i == 0 {
			first = got
		} else if got != first {
			t.Errorf("tile %d: %s, tile 96: %s", tile, got, first)
		}
	}
}

// TestCampaignRefusals: what could be misread is refused in one line naming
// the key.
func TestCampaignRefusals(t *testing.T) {
	s := makeFluidScene(t, 96, 1, 0.3)
	c := campaign.Default()
	c.Tile = 48
	c.Segment.ThresholdScope = segment.ScopeCampaign
	c.Segment.Threshold, c.Segment.Fixed = "fixed", []float64{19000, 70000}
	prep, eff, err := Prepare(MemorySource(s.grey), s.grey.Bounds(), s.grey.DType(), c, nil, 2)
	if err != nil {
		t.Fatal(err)
	}
	_, _, err = CampaignPrepare(prep, eff, nil, "s00", 0)
	if err == nil || !strings.Contains(err.Error(), "segment.fixed") || !strings.Contains(err.Error(), "70000") || strings.Contains(err.Error(), "\n") {
		t.Errorf("user threshold 70000 above the data: %v, want a one-line refusal naming segment.fixed", err)
	}
	// Within the data: taken as given, source user, levels from the step.
	c.Segment.Fixed = []float64{19000, 32000}
	prep, eff, _ = Prepare(MemorySource(s.grey), s.grey.Bounds(), s.grey.DType(), c, nil, 2)
	p2, ct, err := CampaignPrepare(prep, eff, nil, "s00", 0)
	if err != nil || ct == nil || ct.Source != segment.SourceUser || fmt.Sprint(p2.Thresholds.T) != "[19000 32000]" {
		t.Errorf("user thresholds 19000, 32000: %v %+v %v", err, ct, p2.Thresholds.T)
	}
	// A stored record that does not fit the configuration (reference mode
	// needs one threshold).
	c2 := campaign.Default()
	c2.Segment.ThresholdScope = segment.ScopeCampaign
	c2.Segment.Reference = true
	_, _, err = CampaignPrepare(prep, c2, ct, "s01", 1)
	if err == nil || !strings.Contains(err.Error(), "campaign thresholds") {
		t.Errorf("record of 2 thresholds in reference mode: %v, want a refusal", err)
	}
}

func fmtPtrs(v []*float64) string {
	s := "["
	for i, p := range v {
		if i > 0 {
			s += " "
		}
		if p == nil {
			s += "null"
		} else {
			s += fmt.Sprintf("%.1f", *p)
		}
	}
	return s + "]"
}

// TestCampaignFloat32AndReference: float32 scans (the same grey as
// float32; per step the histogram range is measured per step, in scope
// campaign it is the campaign's, segment.CampaignBinning) and reference mode with the partial-volume correction (the
// demo's set-up) go through campaign thresholds as accurately.
//
// Source: the forward model's truth labels. Measured 2026-12-05, S_n
// error at true S_n 0.049 … 0.695: float32 per-step Otsu +0.0011 …
// +0.0131, campaign +0.0006 … +0.0078 (thresholds 19121.2/32062.2 over
// the campaign's widened range, fixed by s01; at S_n 0.695 the brine
// level reads high with no drift at all — a minority brine peak pulled by
// its neighbours — so the n|w threshold moves by +291, past DriftIgnore;
// with the range measured per step it was +0.0073 and +245); reference mode with
// partial_volume.blur 0.7 and threshold assignment, per step +0.0003 …
// −0.0064, campaign −0.0001 … −0.0044. Bands: the 0.01 saturation target
// and campaign <= per step. (Reference mode without the correction is
// worse with campaign thresholds, −0.0211 against −0.0075 per step: the
// nonwetting voxels at the rock, brightened by the blur, lie above the
// midpoint; see docs/segmentation-thresholds.md.)
func TestCampaignFloat32AndReference(t *testing.T) {
	scenes := campaignScenes(t)
	for _, mode := range []string{"float32", "reference"} {
		var maxErr [2]float64
		for j, scope := range []string{segment.ScopeStep, segment.ScopeCampaign} {
			c := campaign.Default()
			c.Tile = 48
			c.Measure.SkipContact, c.Measure.SkipCurvature = true, true
			c.Segment.ThresholdScope = scope
			if mode == "reference" {
				c.Segment.Reference = true
				c.Segment.PartialVolume.Blur = 0.7
				c.Segment.Assign = segment.AssignThreshold
			}
			var ct *segment.CampaignThresholds
			for i, s := range scenes {
				var g volume.Any = s.grey
				var mask *volume.Labels
				if mode == "float32" {
					g = volume.Float(s.grey)
				} else {
					mask = s.rock
				}
				_, res, prep, fresh, err := WholeCampaign(g, c, mask, 2, ct, fmt.Sprintf("s%02d", i), float64(i))
				if err != nil {
					t.Fatal(err)
				}
				if fresh != nil {
					ct = fresh
				}
				e := snwOf(res) - s.snw
				maxErr[j] = math.Max(maxErr[j], math.Abs(e))
				t.Logf("%s %s S_n %.4f: %+.4f T %v", mode, scope, s.snw, e, prep.Thresholds.T)
				if scope == segment.ScopeCampaign && math.Abs(e) > 0.01 {
					t.Errorf("%s campaign, true S_n %.4f: error %+.4f beyond 0.01", mode, s.snw, e)
				}
			}
			if scope == segment.ScopeCampaign && (ct == nil || ct.Step != "s01") {
				t.Errorf("%s: campaign thresholds %+v, want fixed by s01", mode, ct)
			}
		}
		if !(maxErr[1] <= maxErr[0]) {
			t.Errorf("%s: largest |ΔS_n| campaign %.4f, per step %.4f; want campaign <= per step", mode, maxErr[1], maxErr[0])
		}
	}
}
