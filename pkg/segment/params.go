package segment

import (
	"fmt"
	"math"
	"strings"

	"sluice/pkg/filter"
	"sluice/pkg/phase"
)

// Filter names the denoiser applied before histogram and thresholds.
type Filter struct {
	// Method is "none", "median" (3×3×3), "gaussian" or "nlm" (non-local
	// means). Default "median".
	Method string `json:"method" yaml:"method"`
	// Sigma is the Gaussian standard deviation in voxels (method gaussian;
	// default 1).
	Sigma float64 `json:"sigma,omitempty" yaml:"sigma,omitempty"`
	// Truncate is the Gaussian half-width in sigmas (default 4, as scipy).
	Truncate float64 `json:"truncate,omitempty" yaml:"truncate,omitempty"`
	// NLM holds the non-local means parameters (method nlm); NLM.Sigma, the
	// noise standard deviation in grey units, is required.
	NLM filter.NLM `json:"nlm,omitempty" yaml:"nlm,omitempty"`
}

// Hysteresis grows the nonwetting phase from certain seeds through an
// uncertain grey band (see the package doc).
type Hysteresis struct {
	// Band is the half-width of the uncertain band around the threshold that
	// bounds the nonwetting class, in grey units. 0 turns hysteresis off.
	Band float64 `json:"band" yaml:"band"`
	// Steps bounds the growth: a band voxel joins the nonwetting phase when a
	// path of at most Steps face-neighbour moves through band voxels joins it
	// to a seed. Default 4. It is part of the halo.
	Steps int `json:"steps" yaml:"steps"`
}

// PartialVolume describes the blur used to correct fluid grey values next
// to the solid. With b the solid indicator blurred by a Gaussian of standard
// deviation Blur, a pore voxel of grey v is taken to hold fluid of grey
// (v − μ_s·b)/(1 − b), μ_s the solid grey (b is capped at MaxFraction).
type PartialVolume struct {
	// Blur is the point-spread standard deviation in voxels (0 = off).
	Blur float64 `json:"blur" yaml:"blur"`
	// SolidGrey is μ_s; 0 means the peak of the solid class of the merged
	// histogram.
	SolidGrey float64 `json:"solid_grey,omitempty" yaml:"solid_grey,omitempty"`
	// MaxFraction caps b (default 0.6): nearer the solid the correction
	// amplifies noise more than it removes bias.
	MaxFraction float64 `json:"max_fraction,omitempty" yaml:"max_fraction,omitempty"`
	// LocalFluid is the number of local-fluid passes in 3-class mode (0 =
	// off, default 0; 1 or 2 recommended with Blur set): each pass redraws
	// the solid mask at the 50 % blurred-solid level for the fluid found
	// around each voxel by the previous pass, then redoes the correction
	// (see the package doc). Each pass adds 2·PVHalo() to the halo.
	LocalFluid int `json:"local_fluid,omitempty" yaml:"local_fluid,omitempty"`
}

// PVHalo returns the halo the partial-volume correction adds.
func (p Params) PVHalo() int {
	return filter.GaussianRadius(p.PartialVolume.Blur, filter.DefaultTruncate)
}

// Sample is the cylindrical sample (axis along z) in global voxel
// coordinates; voxels whose centre lies farther than Radius from (Y, X) get
// the label phase.Outside. Radius 0 means no mask.
type Sample struct {
	Y      float64 `json:"y" yaml:"y"`
	X      float64 `json:"x" yaml:"x"`
	Radius float64 `json:"radius" yaml:"radius"`
}

// Inside reports whether voxel (y, x) is in the sample.
func (s Sample) Inside(y, x int) bool {
	if s.Radius <= 0 {
		return true
	}
	dy, dx := float64(y)-s.Y, float64(x)-s.X
	return dy*dy+dx*dx <= s.Radius*s.Radius
}

// Params holds every knob of the segmentation. The zero value is not
// valid; start from Defaults().
type Params struct {
	// Codes are the output label codes (default 0 solid, 1 wetting,
	// 2 nonwetting); phase.Outside marks voxels outside the sample.
	Codes phase.Codes `json:"codes" yaml:"codes"`
	// Order lists the phases from darkest to brightest grey as a permutation
	// of the letters n (nonwetting), w (wetting) and s (solid). Default "nws"
	// (gas or oil darkest, rock brightest); "nsw" for a doped brine.
	Order string `json:"order" yaml:"order"`
	// Filter is the denoiser run before everything else.
	Filter Filter `json:"filter" yaml:"filter"`
	// Threshold is "otsu" (3-class multi-level Otsu, or 2-class Otsu in
	// reference mode, on the merged histogram), "isodata" (reference mode
	// only: Ridler–Calvard midpoint of the two fluid means, not pulled
	// towards the smaller fluid as Otsu is) or "fixed" (Fixed).
	Threshold string `json:"threshold" yaml:"threshold"`
	// Fixed are the grey thresholds for Threshold "fixed": two ascending
	// values, or one in reference mode. A voxel above a threshold belongs to
	// the brighter class.
	Fixed []float64 `json:"fixed,omitempty" yaml:"fixed,omitempty"`
	// ThresholdScope is "step" (or empty, the default: thresholds from each
	// step's own histogram, or Fixed) or "campaign": thresholds fixed once
	// for the campaign, from the first step holding every phase or from
	// Fixed, and followed for grey-level drift within a bound (see
	// campaign.go).
	ThresholdScope string `json:"threshold_scope,omitempty" yaml:"threshold_scope,omitempty"`
	// Reference selects reference-scan mode: Segment takes the solid (and
	// outside) voxels from a mask and only separates the two fluids in the
	// pore space with one threshold.
	Reference bool `json:"reference" yaml:"reference"`
	// Bins is the histogram size for uint16 (a power of two from 16 to 1024;
	// default 1024, i.e. 64 grey values per bin) and float32 (2..65536,
	// default 1024) data; uint8 always uses 256 bins of one grey value.
	Bins int `json:"bins" yaml:"bins"`
	// Range is the float32 histogram range [lo, hi]; values outside it go to
	// the end bins. Leave zero to measure it with Extent first.
	Range [2]float64 `json:"range" yaml:"range"`
	// PartialVolume corrects the fluid grey next to the solid for the
	// scanner blur (see the package doc); Blur 0 = off.
	PartialVolume PartialVolume `json:"partial_volume" yaml:"partial_volume"`
	// Assign decides the voxels between the confident ones of each class:
	// "watershed" (default: seeds are the voxels whose face neighbours
	// share their threshold class; the rest are flooded from them over the
	// grey differences, see the package doc) or "threshold" (every voxel
	// keeps the class of its filtered grey).
	Assign string `json:"assign" yaml:"assign"`
	// Watershed bounds the flood of Assign "watershed".
	Watershed Watershed `json:"watershed" yaml:"watershed"`
	// Hysteresis of the nonwetting phase; Band 0 = off.
	Hysteresis Hysteresis `json:"hysteresis" yaml:"hysteresis"`
	// MinIsland: 26-connected nonwetting components of fewer voxels become
	// wetting. 0 or 1 = off. MinIsland − 1 is part of the halo.
	MinIsland int `json:"min_island" yaml:"min_island"`
	// Fluids states the fluids the scans hold: "auto" (or empty; decided
	// per step from the merged histogram, see DecidePhases), "both",
	// "wetting" or "nonwetting" (one fluid only, e.g. the brine-saturated
	// first scan of a drainage).
	Fluids string `json:"fluids,omitempty" yaml:"fluids,omitempty"`
	// Sample is the cylinder; voxels outside are labelled phase.Outside and
	// left out of the histogram.
	Sample Sample `json:"sample" yaml:"sample"`
	// SampleBlock is the edge, in voxels, of the (y, x) blocks whose grey
	// statistics the histogram carries for DetectSample. Default 8.
	SampleBlock int `json:"sample_block" yaml:"sample_block"`
}

// Defaults returns codes 0/1/2, order "nws", a 3×3×3 median, 3-class Otsu,
// 1024 bins, watershed assignment (sum cost, at most 4 steps), hysteresis
// off, island removal off, no sample mask, and 8-voxel blocks for sample
// detection.
func Defaults() Params {
	return Params{
		Codes:         phase.Default(),
		Order:         "nws",
		Filter:        Filter{Method: "median", Sigma: 1, Truncate: filter.DefaultTruncate, NLM: filter.NLM{PatchRadius: 1, SearchRadius: 2}},
		Threshold:     "otsu",
		Bins:          1024,
		Assign:        AssignWatershed,
		Watershed:     Watershed{Steps: 4, Cost: CostSum},
		Hysteresis:    Hysteresis{Steps: 4},
		PartialVolume: PartialVolume{MaxFraction: 0.6},
		SampleBlock:   8,
	}
}

// Validate reports unusable parameters.
func (p Params) Validate() error {
	if err := p.Codes.Validate(); err != nil {
		return fmt.Errorf("segment: %w", err)
	}
	if len(p.Order) != 3 || strings.Count(p.Order, "n") != 1 || strings.Count(p.Order, "w") != 1 || strings.Count(p.Order, "s") != 1 {
		return fmt.Errorf("segment: order %q must be a permutation of n, w and s", p.Order)
	}
	switch p.Filter.Method {
	case "none", "median":
	case "gaussian":
		if !(p.Filter.Sigma > 0) || !(p.Filter.Truncate > 0) || p.Filter.Sigma > 20 {
			return fmt.Errorf("segment: Gaussian filter needs 0 < sigma <= 20 (got %g) and truncate > 0 (got %g)", p.Filter.Sigma, p.Filter.Truncate)
		}
	case "nlm":
		if err := p.Filter.NLM.Validate(); err != nil {
			return fmt.Errorf("segment: %w", err)
		}
	default:
		return fmt.Errorf("segment: unknown filter %q (want none, median, gaussian or nlm)", p.Filter.Method)
	}
	switch p.ThresholdScope {
	case "", ScopeStep, ScopeCampaign:
	default:
		return fmt.Errorf("segment: threshold_scope %q must be step or campaign", p.ThresholdScope)
	}
	if p.ThresholdScope == ScopeCampaign && p.Threshold == "isodata" {
		return fmt.Errorf("segment: threshold_scope campaign takes otsu (levels from the first step) or fixed thresholds, not isodata")
	}
	switch p.Fluids {
	case "", FluidsAuto, FluidsBoth, FluidsWetting, FluidsNonwetting:
	default:
		return fmt.Errorf("segment: fluids %q must be auto, both, wetting or nonwetting", p.Fluids)
	}
	switch p.Threshold {
	case "otsu":
	case "isodata":
		if !p.Reference {
			return fmt.Errorf("segment: isodata thresholds need reference mode (two classes)")
		}
	case "fixed":
		want := len(presentOrder(p, p.Fluids)) - 1
		if len(p.Fixed) != want {
			return fmt.Errorf("segment: fixed thresholds: got %d values, want %d", len(p.Fixed), want)
		}
		for i, t := range p.Fixed {
			if math.IsNaN(t) || math.IsInf(t, 0) || (i > 0 && t <= p.Fixed[i-1]) {
				return fmt.Errorf("segment: fixed thresholds %v must be finite and ascending", p.Fixed)
			}
		}
	default:
		return fmt.Errorf("segment: unknown threshold method %q (want otsu, isodata or fixed)", p.Threshold)
	}
	if p.Bins < 2 || p.Bins > 65536 {
		return fmt.Errorf("segment: bins %d out of range 2..65536", p.Bins)
	}
	if math.IsNaN(p.Range[0]) || math.IsNaN(p.Range[1]) || math.IsInf(p.Range[0], 0) || math.IsInf(p.Range[1], 0) || p.Range[1] < p.Range[0] {
		return fmt.Errorf("segment: bad float range %v", p.Range)
	}
	switch p.Assign {
	case AssignWatershed:
		ws := p.Watershed
		if ws.Steps < 1 || ws.Steps > 16 || (ws.Cost != CostSum && ws.Cost != CostMax) {
			return fmt.Errorf("segment: watershed steps %d must be in 1..16 and cost %q sum or max", ws.Steps, ws.Cost)
		}
	case AssignThreshold:
	default:
		return fmt.Errorf("segment: unknown assign %q (want watershed or threshold)", p.Assign)
	}
	h := p.Hysteresis
	if h.Band < 0 || math.IsNaN(h.Band) || math.IsInf(h.Band, 0) || (h.Band > 0 && (h.Steps < 1 || h.Steps > 64)) {
		return fmt.Errorf("segment: hysteresis band %g must be >= 0 with steps in 1..64 (got %d)", h.Band, h.Steps)
	}
	if h.Band > 0 && !p.Reference && p.Order[1] == 'n' {
		return fmt.Errorf("segment: hysteresis needs the nonwetting phase darkest or brightest (order %q)", p.Order)
	}
	pv := p.PartialVolume
	if pv.Blur < 0 || pv.Blur > 5 || math.IsNaN(pv.Blur) || math.IsNaN(pv.SolidGrey) || math.IsInf(pv.SolidGrey, 0) || (pv.Blur > 0 && !(pv.MaxFraction > 0 && pv.MaxFraction < 1)) {
		return fmt.Errorf("segment: partial volume blur %g must be in 0..5 with max fraction in (0,1) (got %g)", pv.Blur, pv.MaxFraction)
	}
	if pv.LocalFluid < 0 || pv.LocalFluid > 4 || (pv.LocalFluid > 0 && (pv.Blur == 0 || p.Reference)) {
		return fmt.Errorf("segment: partial volume local_fluid %d must be in 0..4, and above 0 only with blur > 0 in 3-class mode", pv.LocalFluid)
	}
	if pv.Blur > 0 && !p.Reference && p.Order[1] == 's' {
		return fmt.Errorf("segment: partial-volume correction needs the solid darkest or brightest (order %q) or reference mode", p.Order)
	}
	if p.MinIsland < 0 || p.MinIsland > 4096 {
		return fmt.Errorf("segment: min_island %d out of range 0..4096", p.MinIsland)
	}
	if p.Sample.Radius < 0 || math.IsNaN(p.Sample.Radius) || math.IsNaN(p.Sample.Y) || math.IsNaN(p.Sample.X) {
		return fmt.Errorf("segment: bad sample cylinder %+v", p.Sample)
	}
	if p.SampleBlock < 1 {
		return fmt.Errorf("segment: sample block %d must be >= 1", p.SampleBlock)
	}
	return nil
}

// FilterHalo returns the halo the filter alone needs.
func (p Params) FilterHalo() int {
	switch p.Filter.Method {
	case "median":
		return filter.MedianHalo
	case "gaussian":
		return filter.GaussianRadius(p.Filter.Sigma, p.Filter.Truncate)
	case "nlm":
		return p.Filter.NLM.Halo()
	}
	return 0
}

// Halo returns the halo a tile needs for Segment to equal the whole-volume
// result: filter halo + partial-volume blur radius·(1 + 2·LocalFluid) +
// watershed steps + 1 + hysteresis steps + (MinIsland − 1).
func (p Params) Halo() int {
	h := p.FilterHalo() + p.PVHalo()*(1+2*p.PartialVolume.LocalFluid) + p.WatershedHalo()
	if p.Hysteresis.Band > 0 {
		h += p.Hysteresis.Steps
	}
	if p.MinIsland > 1 {
		h += p.MinIsland - 1
	}
	return h
}
