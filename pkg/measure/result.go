package measure

import (
	"fmt"
	"math"

	"sluice/pkg/cluster"
	"sluice/pkg/contact"
	"sluice/pkg/curvature"
	"sluice/pkg/morph"
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
	PhasesDetected int      `json:"phases_detected,omitempty"`
	PhasesNote     string   `json:"phases_note,omitempty"`
	Porosity       *float64 `json:"porosity"`
	SatWetting     *float64 `json:"saturation_wetting"`
	SatNonwetting  *float64 `json:"saturation_nonwetting"`

	AreaWN       float64  `json:"area_wn_m2"`
	AreaWS       float64  `json:"area_ws_m2"`
	AreaNS       float64  `json:"area_ns_m2"`
	SpecificWN   *float64 `json:"specific_area_wn_per_m"`
	SpecificWS   *float64 `json:"specific_area_ws_per_m"`
	SpecificNS   *float64 `json:"specific_area_ns_per_m"`
	CurvMean     *float64 `json:"curvature_wn_mean_per_m"`
	CurvMedian   *float64 `json:"curvature_wn_median_per_m"`
	CurvArea     float64  `json:"curvature_wn_area_m2"`
	IFT          *float64 `json:"ift_n_per_m"`
	Pc           *float64 `json:"capillary_pressure_pa"`
	PcMedian     *float64 `json:"capillary_pressure_median_pa"`
	AngleMean    *float64 `json:"contact_angle_mean_deg"`
	AngleMedian  *float64 `json:"contact_angle_median_deg"`
	AngleStd     *float64 `json:"contact_angle_std_deg"`
	AngleSamples int64    `json:"contact_angle_samples"`
	// AngleNote says, in one line, why there is no contact angle when the
	// step holds solid and both fluids but no sample was measured.
	AngleNote string `json:"contact_angle_note,omitempty"`
	// AngleHist counts contact-angle samples in 1° bins: AngleHist[i]
	// holds angles in [i, i+1) degrees, through the wetting phase.
	AngleHist []int64 `json:"contact_angle_histogram"`

	EulerNonwetting int64 `json:"euler_nonwetting"`
	EulerWetting    int64 `json:"euler_wetting"`
	EulerSolid      int64 `json:"euler_solid"`

	GangliaCount    int      `json:"ganglia_count"`
	LargestFraction *float64 `json:"ganglion_largest_fraction"`
	Percolates      bool     `json:"nonwetting_percolates"`
	TrappedFraction *float64 `json:"nonwetting_trapped_fraction"`
	Connectivity    int      `json:"connectivity"`
	FlowAxis        string   `json:"flow_axis"`

	// Minkowski holds the four functionals of each phase.
	Minkowski map[string]Functionals `json:"minkowski"`
	// Clusters is the full cluster summary.
	Clusters cluster.Summary `json:"clusters"`
}

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
	if q.Contact != nil {
		if p.Contact == nil {
			p.Contact = new(contact.Partial)
		}
		p.Contact.Add(q.Contact)
	}
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
	for _, p := range parts {
		if p == nil {
			return nil, fmt.Errorf("measure: missing tile result")
		}
		sum.Add(p)
		tiles = append(tiles, p.Clusters)
		covered += p.Core.Voxels()
	}
	if covered != whole.Voxels() {
		return nil, fmt.Errorf("measure: tiles cover %d voxels, scan has %d", covered, whole.Voxels())
	}
	cs, err := cluster.Merge(tiles, whole, opt.clusterOptions())
	if err != nil {
		return nil, err
	}
	return finish(&sum, cs, whole, voxelSize, opt), nil
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
		if opt.IFT > 0 {
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
		}
		hist := c.Histogram1Deg()
		r.AngleHist = hist[:]
		if c.N == 0 && r.VoxelsSolid > 0 && r.VoxelsWetting > 0 && r.VoxelsNonwetting > 0 {
			r.AngleNote = noAngleNote(c)
		}
	}

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
