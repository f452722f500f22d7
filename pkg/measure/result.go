package measure

import (
	"fmt"
	"math"
	"slices"

	"sluice/pkg/blockse"
	"sluice/pkg/cluster"
	"sluice/pkg/contact"
	"sluice/pkg/curvature"
	"sluice/pkg/filling"
	"sluice/pkg/morph"
	"sluice/pkg/tracking"
	"sluice/pkg/volume"
)

// Result is the measurement of one step, in SI units. Its JSON form is the
// output of `sluice measure --json`, the content of a step's result.json and
// a row of the series; the keys are a contract other tools rely on.
// Quantities that cannot be computed (no interface, no contact line, no σ)
// are null.
type Result struct {
	Voxels           int64   `json:"voxels"`
	VoxelSize        float64 `json:"voxel_size_m"`
	Shape            [3]int  `json:"shape_zyx"`
	VoxelsSolid      int64   `json:"voxels_solid"`
	VoxelsWetting    int64   `json:"voxels_wetting"`
	VoxelsNonwetting int64   `json:"voxels_nonwetting"`
	VoxelsOutside    int64   `json:"voxels_outside"`
	BulkVolume       float64 `json:"bulk_volume_m3"`
	// PhasesDetected is the number of phases segmentation found in the
	// sample from the grey histogram (3: rock and both fluids; 2: rock and
	// one fluid); 0 when the input was labels. PhasesNote says how it was
	// decided (segment.Phases.Describe).
	PhasesDetected int    `json:"phases_detected,omitempty"`
	PhasesNote     string `json:"phases_note,omitempty"`
	// Grey-level drift of each phase against the campaign's level, in grey
	// units and as a fraction of the smallest contrast between adjacent
	// campaign levels, and whether a threshold shift had to be capped
	// (segment threshold scope "campaign"; absent otherwise, or when the
	// level was not measured).
	GreyDriftNonwetting         *float64 `json:"grey_drift_nonwetting,omitempty"`
	GreyDriftWetting            *float64 `json:"grey_drift_wetting,omitempty"`
	GreyDriftSolid              *float64 `json:"grey_drift_solid,omitempty"`
	GreyDriftNonwettingFraction *float64 `json:"grey_drift_nonwetting_fraction,omitempty"`
	GreyDriftWettingFraction    *float64 `json:"grey_drift_wetting_fraction,omitempty"`
	GreyDriftSolidFraction      *float64 `json:"grey_drift_solid_fraction,omitempty"`
	GreyDriftBeyond             *bool    `json:"grey_drift_beyond,omitempty"`
	GreyDriftNote               string   `json:"grey_drift_note,omitempty"`
	// Drift registration to the reference scan (reference-scan mode with
	// register on; absent otherwise): the step's shift against the
	// reference in voxels and metres (z, y, x; the scan shows at p what the
	// reference shows at p − shift), the normalised phase-correlation peak
	// and whether a component exceeds register.max_shift (pkg/register).
	RegistrationZ      *float64 `json:"registration_z_voxels,omitempty"`
	RegistrationY      *float64 `json:"registration_y_voxels,omitempty"`
	RegistrationX      *float64 `json:"registration_x_voxels,omitempty"`
	RegistrationZM     *float64 `json:"registration_z_m,omitempty"`
	RegistrationYM     *float64 `json:"registration_y_m,omitempty"`
	RegistrationXM     *float64 `json:"registration_x_m,omitempty"`
	RegistrationPeak   *float64 `json:"registration_peak,omitempty"`
	RegistrationBeyond *bool    `json:"registration_beyond,omitempty"`
	Porosity           *float64 `json:"porosity"`
	SatWetting         *float64 `json:"saturation_wetting"`
	SatNonwetting      *float64 `json:"saturation_nonwetting"`

	AreaWN     float64  `json:"area_wn_m2"`
	AreaWS     float64  `json:"area_ws_m2"`
	AreaNS     float64  `json:"area_ns_m2"`
	SpecificWN *float64 `json:"specific_area_wn_per_m"`
	SpecificWS *float64 `json:"specific_area_ws_per_m"`
	SpecificNS *float64 `json:"specific_area_ns_per_m"`
	CurvMean   *float64 `json:"curvature_wn_mean_per_m"`
	CurvMedian *float64 `json:"curvature_wn_median_per_m"`
	CurvArea   float64  `json:"curvature_wn_area_m2"`
	IFT        *float64 `json:"ift_n_per_m"`
	Pc         *float64 `json:"capillary_pressure_pa"`
	PcMedian   *float64 `json:"capillary_pressure_median_pa"`
	// Standard errors of the means above, from the spread between blocks
	// of blockse.Edge voxels (package blockse; BlockEdge): null with fewer
	// than blockse.MinBlocks blocks holding interface (samples).
	CurvMeanSE *float64 `json:"curvature_wn_mean_se_per_m"`
	PcSE       *float64 `json:"capillary_pressure_se_pa"`

	// Connected and trapped interfaces apart (Armstrong, Porter &
	// Wildenschild 2012, Adv. Water Resour. 46:55): the w–n band voxels
	// attributed to ganglia that touch the inlet or the outlet face
	// (cluster.Ganglion.Connected, the definition of
	// nonwetting_trapped_fraction) and to the other, trapped, ganglia.
	// Null when the tiles carry no attribution (see Combine).
	CurvConnected     *float64 `json:"curvature_wn_connected_mean_per_m"`
	CurvConnectedSE   *float64 `json:"curvature_wn_connected_mean_se_per_m"`
	CurvConnectedArea *float64 `json:"curvature_wn_connected_area_m2"`
	PcConnected       *float64 `json:"capillary_pressure_connected_pa"`
	PcConnectedSE     *float64 `json:"capillary_pressure_connected_se_pa"`
	CurvTrapped       *float64 `json:"curvature_wn_trapped_mean_per_m"`
	CurvTrappedSE     *float64 `json:"curvature_wn_trapped_mean_se_per_m"`
	CurvTrappedArea   *float64 `json:"curvature_wn_trapped_area_m2"`
	PcTrapped         *float64 `json:"capillary_pressure_trapped_pa"`
	PcTrappedSE       *float64 `json:"capillary_pressure_trapped_se_pa"`
	// TrappedGanglia is the distribution of the per-ganglion mean
	// curvature (and Pc) over trapped ganglia with enough interface.
	TrappedGanglia *GangliaCurvature `json:"trapped_ganglia_curvature"`
	// BlockEdge is the edge of the blocks of the standard errors (m).
	BlockEdge float64 `json:"se_block_edge_m"`

	AngleMean    *float64 `json:"contact_angle_mean_deg"`
	AngleMeanSE  *float64 `json:"contact_angle_mean_se_deg"`
	AngleMedian  *float64 `json:"contact_angle_median_deg"`
	AngleStd     *float64 `json:"contact_angle_std_deg"`
	AngleSamples int64    `json:"contact_angle_samples"`
	// AngleNote says, in one line, why there is no contact angle when the
	// step holds solid and both fluids but no sample was measured.
	AngleNote string `json:"contact_angle_note,omitempty"`
	// AngleHist counts contact-angle samples in 1° bins: AngleHist[i]
	// holds angles in [i, i+1) degrees, through the wetting phase.
	AngleHist []int64 `json:"contact_angle_histogram"`

	// The topological contact angle of the trapped ganglia (topoangle.go:
	// Gauss–Bonnet on each ganglion's w–n interface and footprint, after
	// Sun et al. 2020, Geophys. Res. Lett. 47:e2019GL086151), through the
	// wetting phase: from the turnings summed over the ganglia that give
	// one (TopoAngle, its cosine TopoCos) and the median of the ganglia's
	// own angles; TopoGanglia counts them. Null without the curvature
	// measurement (not attempted) or without such a ganglion (TopoNote
	// says why).
	TopoAngle   *float64 `json:"contact_angle_topological_deg"`
	TopoCos     *float64 `json:"contact_angle_topological_cos"`
	TopoMedian  *float64 `json:"contact_angle_topological_median_deg"`
	TopoGanglia int      `json:"contact_angle_topological_ganglia"`
	TopoNote    string   `json:"contact_angle_topological_note,omitempty"`

	EulerNonwetting int64 `json:"euler_nonwetting"`
	EulerWetting    int64 `json:"euler_wetting"`
	EulerSolid      int64 `json:"euler_solid"`

	// Geometric state of the fluids (McClure, Armstrong, Berrill, Schlüter,
	// Berg, Gray & Miller 2018, Phys. Rev. Fluids 3:084306): with S_w
	// (saturation_wetting), a_wn (specific_area_wn_per_m) and χ_n
	// (euler_nonwetting), the integral of the mean curvature
	// H = (k1 + k2)/2 over the w–n interface, J_wn = ∫H dA (m), in the
	// convention of the Minkowski functional M = ∫H dS (science.md: a ball
	// of radius r has 4πr), normal out of the nonwetting phase. It is
	// estimated as A_wn·κ̄/2 (geometric.go), and given per bulk volume as
	// well, like χ_n. Null without the curvature measurement.
	MeanCurvIntegralWN      *float64 `json:"mean_curvature_integral_wn_m"`
	SpecificMeanCurvWN      *float64 `json:"specific_mean_curvature_integral_wn_per_m2"`
	SpecificEulerNonwetting *float64 `json:"specific_euler_nonwetting_per_m3"`

	GangliaCount    int      `json:"ganglia_count"`
	LargestFraction *float64 `json:"ganglion_largest_fraction"`
	Percolates      bool     `json:"nonwetting_percolates"`
	TrappedFraction *float64 `json:"nonwetting_trapped_fraction"`
	Connectivity    int      `json:"connectivity"`
	FlowAxis        string   `json:"flow_axis"`

	// FrontPosition is the distance of the displacement front from the
	// inlet face (m; profile.go states the definition); null without a
	// front or without a profile.
	FrontPosition *float64 `json:"front_position_m"`
	// SatProfile is the saturation and porosity profile along the flow
	// axis; null when a tile carried no per-slice counts.
	SatProfile *Profile `json:"saturation_profile"`

	// PoreFilling holds the pore-filling events between the previous step
	// of the run and this one (package filling). A property of two steps,
	// not of one volume: set by the aggregator on step results, absent from
	// `sluice measure --json`.
	PoreFilling *filling.Result `json:"pore_filling,omitempty"`
	// GanglionTracking links this step's nonwetting ganglia to the
	// previous step's (package tracking); set by the aggregator like
	// PoreFilling.
	GanglionTracking *tracking.Result `json:"ganglion_tracking,omitempty"`

	// Minkowski holds the four functionals of each phase.
	Minkowski map[string]Functionals `json:"minkowski"`
	// Clusters is the full cluster summary.
	Clusters cluster.Summary `json:"clusters"`
}

// GangliaCurvature is the distribution over trapped ganglia of their own
// area-weighted mean curvature Σκw/Σw (and Pc = σ·that): only ganglia
// whose attributed interface area is at least MinArea count.
type GangliaCurvature struct {
	// MinArea is the interface-area threshold (m²; MinGanglionArea voxel²).
	MinArea float64 `json:"min_area_m2"`
	// Count is the number of trapped ganglia at or above the threshold,
	// Below the number of trapped ganglia under it (left out).
	Count int `json:"count"`
	Below int `json:"below_threshold"`
	// Quantiles of the per-ganglion curvature (1/m) and Pc (Pa, null
	// without σ): 10th, 25th, 50th, 75th and 90th percentiles (linear
	// interpolation between order statistics); null when Count is 0.
	CurvP10    *float64 `json:"curvature_p10_per_m"`
	CurvP25    *float64 `json:"curvature_p25_per_m"`
	CurvMedian *float64 `json:"curvature_median_per_m"`
	CurvP75    *float64 `json:"curvature_p75_per_m"`
	CurvP90    *float64 `json:"curvature_p90_per_m"`
	PcP10      *float64 `json:"pc_p10_pa"`
	PcP25      *float64 `json:"pc_p25_pa"`
	PcMedian   *float64 `json:"pc_median_pa"`
	PcP75      *float64 `json:"pc_p75_pa"`
	PcP90      *float64 `json:"pc_p90_pa"`
}

// MinGanglionArea is the least w–n interface area (voxel², as the co-area
// estimate measures it) a trapped ganglion needs for its own curvature to
// enter the distribution. Single digitised balls (TestGangliaBallError)
// read κ within ±0.7 % of 2/R from radius 5 voxels up (measured area
// 271–279 voxel²), −2 % at radius 4 (162) and −9 % at 3 (77); real ganglia
// have necks and flat parts and segmentation noise weighs most on small
// ones, so the threshold sits at the smallest ball that is still exact:
// 250 voxel² counts a radius-5 ball and leaves out a radius-4 one. The
// published yardstick (Akai et al. 2019, Materials 12:2138: pore Pc within
// 30 % for radii > 6 voxels) is met with margin above it.
const MinGanglionArea = 250.0

// Functionals are the Minkowski functionals of one phase in SI units.
type Functionals struct {
	Volume        float64 `json:"volume_m3"`
	Surface       float64 `json:"surface_m2"`
	MeanCurvature float64 `json:"mean_curvature_integral_m"`
	Euler6        int64   `json:"euler_6"`
	Euler26       int64   `json:"euler_26"`
}

// Add merges q into p (the cores must not overlap).
func (p *Partial) Add(q *Partial) {
	for i := range p.Counts {
		p.Counts[i] += q.Counts[i]
	}
	for ph := 0; ph < 3; ph++ {
		for c := 0; c < 256; c++ {
			p.Padded[ph][c] += q.Padded[ph][c]
			p.Interior[ph][c] += q.Interior[ph][c]
		}
	}
	if q.Curvature != nil {
		if p.Curvature == nil {
			p.Curvature = new(curvature.Partial)
		}
		p.Curvature.Add(q.Curvature)
	}
	if q.Profile != nil {
		if p.Profile == nil {
			p.Profile = new(ProfilePartial)
		}
		p.Profile.Add(q.Profile)
	}
	if q.Contact != nil {
		if p.Contact == nil {
			p.Contact = new(contact.Partial)
		}
		p.Contact.Add(q.Contact)
	}
}

// gangliaSums are the curvature sums of the connected and trapped ganglia
// per block, and the per-ganglion sums.
type gangliaSums struct {
	connected, trapped blockse.Sums
	ganglia            []cluster.Ganglion
}

// splitGanglia maps the tiles' per-component block sums to whole-volume
// ganglia and splits them into connected and trapped. ok is false when a
// tile carries no attribution.
func splitGanglia(parts []*Partial, m *cluster.Merged) (gangliaSums, bool) {
	g := gangliaSums{ganglia: m.Ganglia}
	if !m.Curvature {
		return g, false
	}
	tiles := make([]*cluster.Tile, len(parts))
	for t, p := range parts {
		tiles[t] = p.Clusters
	}
	res := m.Resolver(tiles)
	con, trp := blockse.Acc{}, blockse.Acc{}
	for t, p := range parts {
		for _, b := range p.GangliaBlocks {
			var gi int32
			switch {
			case b.Owner >= 1 && int(b.Owner) <= len(m.Local[t]):
				gi = m.Local[t][b.Owner-1]
			case b.Owner == 0 && b.At != nil:
				var err error
				if gi, err = res.At(*b.At); err != nil {
					return g, false
				}
			default:
				return g, false
			}
			acc := trp
			if m.Ganglia[gi].Connected() {
				acc = con
			}
			acc.Add(b.Key, b.W, b.X)
		}
	}
	g.connected, g.trapped = con.Sums(), trp.Sums()
	return g, true
}

// Combine merges the partials of every tile of a step (they must cover
// whole exactly once) into the step result.
func Combine(parts []*Partial, whole volume.Box, voxelSize float64, opt Options) (*Result, error) {
	if len(parts) == 0 {
		return nil, fmt.Errorf("measure: no tiles to combine")
	}
	var sum Partial
	tiles := make([]*cluster.Tile, 0, len(parts))
	covered := 0
	profiles := 0
	for _, p := range parts {
		if p == nil {
			return nil, fmt.Errorf("measure: missing tile result")
		}
		if p.Profile != nil {
			profiles++
		}
		sum.Add(p)
		tiles = append(tiles, p.Clusters)
		covered += p.Core.Voxels()
	}
	if covered != whole.Voxels() {
		return nil, fmt.Errorf("measure: tiles cover %d voxels, scan has %d", covered, whole.Voxels())
	}
	m, err := cluster.Join(tiles, whole, opt.clusterOptions())
	if err != nil {
		return nil, err
	}
	co := opt.clusterOptions()
	if co.Connectivity == 0 {
		co.Connectivity = 26
	}
	cs := cluster.Summarize(m.Ganglia, co)
	r := finish(&sum, cs, whole, voxelSize, opt)
	if profiles == len(parts) { // a profile from only some tiles would be wrong: leave it out
		if r.SatProfile, r.FrontPosition, err = finishProfile(sum.Profile, whole, r.VoxelSize, opt); err != nil {
			return nil, err
		}
	}
	if m.Topo {
		r.setTopo(m.Ganglia)
	} else if opt.SkipTopological && !opt.SkipCurvature {
		r.TopoNote = "not measured (measure.skip_topological)"
	}
	if sum.Curvature != nil {
		if g, ok := splitGanglia(parts, m); ok {
			r.setGanglia(g, opt)
		}
	}
	return r, nil
}

// setGanglia fills the connected and trapped curvature and the
// per-ganglion distribution.
func (r *Result) setGanglia(g gangliaSums, opt Options) {
	h := r.VoxelSize
	set := func(s blockse.Sums, mean, se, area, pc, pcse **float64) {
		e := blockse.Ratio(s)
		var w float64
		for _, b := range s {
			w += b.W
		}
		*area = ptr(w * h * h)
		*mean = ptr(e.Mean / h)
		*se = ptr(e.SE / h)
		if opt.IFT > 0 {
			*pc = ptr(opt.IFT * e.Mean / h)
			*pcse = ptr(opt.IFT * e.SE / h)
		}
	}
	set(g.connected, &r.CurvConnected, &r.CurvConnectedSE, &r.CurvConnectedArea, &r.PcConnected, &r.PcConnectedSE)
	set(g.trapped, &r.CurvTrapped, &r.CurvTrappedSE, &r.CurvTrappedArea, &r.PcTrapped, &r.PcTrappedSE)
	d := &GangliaCurvature{MinArea: MinGanglionArea * h * h}
	var ks []float64
	for _, gg := range g.ganglia {
		if gg.Connected() {
			continue
		}
		if gg.CurvArea >= MinGanglionArea {
			ks = append(ks, gg.CurvKappaArea/gg.CurvArea/h)
		} else {
			d.Below++
		}
	}
	d.Count = len(ks)
	if len(ks) > 0 {
		slices.Sort(ks)
		q := func(f float64) float64 {
			x := f * float64(len(ks)-1)
			i := int(math.Floor(x))
			if i >= len(ks)-1 {
				return ks[len(ks)-1]
			}
			return ks[i] + (x-float64(i))*(ks[i+1]-ks[i])
		}
		dst := [5]**float64{&d.CurvP10, &d.CurvP25, &d.CurvMedian, &d.CurvP75, &d.CurvP90}
		pcs := [5]**float64{&d.PcP10, &d.PcP25, &d.PcMedian, &d.PcP75, &d.PcP90}
		for i, f := range [5]float64{0.1, 0.25, 0.5, 0.75, 0.9} {
			v := q(f)
			*dst[i] = ptr(v)
			if opt.IFT > 0 {
				*pcs[i] = ptr(opt.IFT * v)
			}
		}
	}
	r.TrappedGanglia = d
}

func ptr(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

func ratio(a, b float64) *float64 {
	if b == 0 {
		return nil
	}
	return ptr(a / b)
}

func finish(s *Partial, cs cluster.Summary, whole volume.Box, h float64, opt Options) *Result {
	if h <= 0 {
		h = 1e-6
	}
	r := &Result{
		Voxels:           int64(whole.Voxels()),
		VoxelSize:        h,
		Shape:            whole.Size(),
		VoxelsSolid:      s.Counts[Solid],
		VoxelsWetting:    s.Counts[Wetting],
		VoxelsNonwetting: s.Counts[Nonwetting],
		VoxelsOutside:    s.Counts[3],
		Connectivity:     opt.Connectivity,
		FlowAxis:         [3]string{"z", "y", "x"}[opt.FlowAxis],
		Minkowski:        map[string]Functionals{},
		Clusters:         cs,
		BlockEdge:        blockse.Edge * h,
	}
	inside := float64(r.Voxels - r.VoxelsOutside)
	pore := float64(r.VoxelsWetting + r.VoxelsNonwetting)
	h2, h3 := h*h, h*h*h
	r.BulkVolume = inside * h3
	r.Porosity = ratio(pore, inside)
	r.SatWetting = ratio(float64(r.VoxelsWetting), pore)
	r.SatNonwetting = ratio(float64(r.VoxelsNonwetting), pore)

	var f [3]morph.Functionals
	for ph, name := range [3]string{"solid", "wetting", "nonwetting"} {
		pad := morph.FromHistogram(&s.Padded[ph])
		in := morph.FromHistogram(&s.Interior[ph])
		f[ph] = morph.Functionals{Volume: pad.Volume, Surface: in.Surface, MeanCurvature: in.MeanCurvature, Euler6: pad.Euler6, Euler26: pad.Euler26}
		r.Minkowski[name] = Functionals{
			Volume:        pad.Volume * h3,
			Surface:       in.Surface * h2,
			MeanCurvature: in.MeanCurvature * h,
			Euler6:        pad.Euler6,
			Euler26:       pad.Euler26,
		}
	}
	euler := func(ph int) int64 {
		if opt.Connectivity == 6 {
			return f[ph].Euler6
		}
		return f[ph].Euler26
	}
	r.EulerSolid, r.EulerWetting, r.EulerNonwetting = euler(Solid), euler(Wetting), euler(Nonwetting)

	sS, sW, sN := f[Solid].Surface, f[Wetting].Surface, f[Nonwetting].Surface
	r.AreaWN = math.Max(0, (sW+sN-sS)/2) * h2
	r.AreaWS = math.Max(0, (sW+sS-sN)/2) * h2
	r.AreaNS = math.Max(0, (sN+sS-sW)/2) * h2
	if r.BulkVolume > 0 {
		r.SpecificWN = ptr(r.AreaWN / r.BulkVolume)
		r.SpecificWS = ptr(r.AreaWS / r.BulkVolume)
		r.SpecificNS = ptr(r.AreaNS / r.BulkVolume)
	}

	if c := s.Curvature; c != nil {
		r.CurvArea = c.Area * h2
		r.CurvMean = ptr(c.Mean() / h)
		r.CurvMedian = ptr(c.Median() / h)
		e := blockse.Ratio(c.Blocks)
		r.CurvMeanSE = ptr(e.SE / h)
		if opt.IFT > 0 {
			r.PcSE = ptr(opt.IFT * e.SE / h)
			r.IFT = ptr(opt.IFT)
			if r.CurvMean != nil {
				r.Pc = ptr(opt.IFT * *r.CurvMean)
			}
			if r.CurvMedian != nil {
				r.PcMedian = ptr(opt.IFT * *r.CurvMedian)
			}
		}
	}
	if c := s.Contact; c != nil {
		r.AngleSamples = c.N
		if c.N > 0 {
			r.AngleMean = ptr(c.Mean())
			r.AngleMedian = ptr(c.Median())
			r.AngleStd = ptr(c.Std())
			r.AngleMeanSE = ptr(blockse.Ratio(c.Blocks).SE)
		}
		hist := c.Histogram1Deg()
		r.AngleHist = hist[:]
		if c.N == 0 && r.VoxelsSolid > 0 && r.VoxelsWetting > 0 && r.VoxelsNonwetting > 0 {
			r.AngleNote = noAngleNote(c)
		}
	}

	r.setGeometricState(s.Curvature != nil)

	r.GangliaCount = cs.Count
	if cs.Total > 0 {
		r.LargestFraction = ptr(cs.LargestFraction)
		r.TrappedFraction = ptr(cs.TrappedFraction)
	}
	r.Percolates = cs.Percolates
	return r
}

// noAngleNote says why a step with solid and both fluids has no contact
// angle sample.
func noAngleNote(c *contact.Partial) string {
	switch {
	case c.NonwettingOnSolid == 0:
		return "no three-phase contact line found: the nonwetting phase touches the solid nowhere in the labels " +
			"(a wetting film separates them: real, or a partial-volume artefact of the segmentation)"
	case c.Line == 0:
		return "no three-phase contact line found: the nonwetting phase touches the solid, but nowhere beside wetting phase that touches it too"
	}
	return fmt.Sprintf("%d contact-line points found but none could be fitted: too few wetting–nonwetting interface faces within the fit radius "+
		"(points too close to the edge of the sample or of the scan, or a line only a voxel or two long)", c.Line)
}
