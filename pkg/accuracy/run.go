// Package accuracy estimates how well a campaign's processing measures
// saturation, w–n interfacial area, capillary pressure and contact angle in
// that campaign's own rock at its resolution: capillary-equilibrium states
// with a known Pc and contact angle (package equilibrium; level-set
// quasi-static displacement after Prodanović & Bryant 2006, J. Colloid
// Interface Sci. 304:442) are built in a region of the campaign's solid
// mask, rendered as grey scans with the campaign's grey levels, noise and
// blur (package forward; Estimate measures them on the campaign's own
// scan), and segmented and measured with the campaign's parameter set by
// the code a worker runs on a tile (package scan). The true labels are
// measured by the same measurement code, so S_w and a_wn are compared with
// the truth measured alike; Pc and θ are compared with the prescribed
// values.
//
// Limits: the states' contact angle comes out a few degrees below the
// prescribed one (package equilibrium doc), which enters the θ bias here;
// the noise is white (reconstruction noise of a real scan is correlated
// over a few voxels) and the blur a Gaussian; registration resampling of
// drifting steps is not modelled.
package accuracy

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/distance"
	"sluice/pkg/equilibrium"
	"sluice/pkg/forward"
	"sluice/pkg/measure"
	"sluice/pkg/phase"
	"sluice/pkg/scan"
	"sluice/pkg/scenario"
	"sluice/pkg/segment"
	"sluice/pkg/volume"
)

// Defaults of Options.
const (
	DefaultTheta     = 45.0
	DefaultStates    = 4
	DefaultMinRadius = 8.0
	// MinSaturation is the nonwetting saturation below which a state is
	// left out (no interface worth measuring).
	MinSaturation = 0.005
)

// Options configure a Run.
type Options struct {
	// Theta is the prescribed contact angle through the wetting phase
	// (degrees, 0 ≤ θ < 90; no default: 0 means 0, the CLI's default is
	// DefaultTheta).
	Theta float64
	// States is the number of Pc values (default 4).
	States int
	// MinRadius bounds the radius of curvature of the corner menisci,
	// σ/Pc, from below (voxels; default 8): the largest Pc/σ is
	// 1/MinRadius.
	MinRadius float64
	// Seed fixes the noise of the rendered scans.
	Seed uint64
	// Workers for relaxation, segmentation and measurement (0: all CPUs).
	Workers int
	// MaxTime bounds each relaxation (equilibrium.Options.MaxTime; 0: its
	// default).
	MaxTime float64
	// Pressures, when set, are the Pc/σ of the states (1/voxel, ascending)
	// instead of the choice from the pore-size distribution.
	Pressures []float64
}

// Defaults fills the zero States and MinRadius with their defaults and
// checks the options.
func (o *Options) Defaults() error {
	if o.States == 0 {
		o.States = DefaultStates
	}
	if o.MinRadius == 0 {
		o.MinRadius = DefaultMinRadius
	}
	switch {
	case !(o.Theta >= 0 && o.Theta < 90):
		return fmt.Errorf("accuracy: contact angle %g°: want 0 ≤ θ < 90 (drainage of a wetting phase)", o.Theta)
	case o.States < 1 || o.States > 12:
		return fmt.Errorf("accuracy: %d states: want 1 to 12", o.States)
	case !(o.MinRadius >= 2 && o.MinRadius <= 100):
		return fmt.Errorf("accuracy: minimum radius of curvature %g voxels: want 2 to 100", o.MinRadius)
	}
	return nil
}

// Input is what a Run needs from a campaign.
type Input struct {
	// Solid is the region's solid mask (its Box at the origin or not; code
	// Config.Segment.Codes.Solid is solid, every other code pore). A voxel
	// of phase.Outside is refused.
	Solid *volume.Labels
	// Config is the campaign's effective configuration (segmentation and
	// measurement); the sample cylinder and its detection are turned off
	// (the region lies inside the sample).
	Config campaign.Config
	// Stored are the campaign thresholds in threshold scope "campaign".
	Stored *segment.CampaignThresholds
	// Scan gives grey levels, noise and blur.
	Scan ScanEstimate
	// DType of the campaign's scans (the rendered states are rounded to it).
	DType volume.DType
}

// Quantity is one measured quantity of a state: the value measured from
// the true labels (labels path), from the rendered grey scan (grey path),
// and the truth it is compared with.
type Quantity struct {
	Truth  *float64 `json:"truth"`
	Labels *float64 `json:"labels"`
	Grey   *float64 `json:"grey"`
}

// State is one equilibrium state and what was measured on it.
type State struct {
	// PcOverSigma is the prescribed total curvature κ = Pc/σ (1/m);
	// PcPrescribed = σκ (Pa, null without σ); CornerRadius = σ/Pc in
	// voxels.
	PcOverSigma  float64  `json:"curvature_prescribed_per_m"`
	PcPrescribed *float64 `json:"capillary_pressure_prescribed_pa"`
	CornerRadius float64  `json:"corner_radius_voxels"`
	Converged    bool     `json:"relaxation_converged"`
	RelaxTime    float64  `json:"relaxation_time"`
	RelaxSeconds float64  `json:"relaxation_wall_s"`
	SatNonwet    float64  `json:"saturation_nonwetting_true"`
	// Skipped says why the state is not measured (too little nonwetting
	// phase); empty when it is.
	Skipped string `json:"skipped,omitempty"`
	// S_w (truth: true labels counted), a_wn (1/m; truth: true labels
	// measured), κ (1/m; truth: prescribed), Pc (Pa; truth: prescribed),
	// θ (degrees; truth: prescribed).
	SatWetting  Quantity `json:"saturation_wetting"`
	SpecificWN  Quantity `json:"specific_area_wn_per_m"`
	Curvature   Quantity `json:"curvature_wn_mean_per_m"`
	Pc          Quantity `json:"capillary_pressure_pa"`
	AngleMean   Quantity `json:"contact_angle_mean_deg"`
	AngleStdDeg Quantity `json:"contact_angle_std_deg"`
}

// Stat is the bias (mean error) and spread (sample standard deviation of
// the error, null with one state) over the measured states.
type Stat struct {
	Bias   *float64 `json:"bias"`
	Spread *float64 `json:"spread"`
	N      int      `json:"n"`
}

// Summary holds the errors of one path (labels or grey): S_w absolute,
// a_wn and Pc relative (fractions; Pc through κ, so also without σ), θ in
// degrees.
type Summary struct {
	SatWetting Stat `json:"saturation_wetting_abs"`
	SpecificWN Stat `json:"specific_area_wn_rel"`
	Pc         Stat `json:"capillary_pressure_rel"`
	Angle      Stat `json:"contact_angle_deg"`
}

// Report is the outcome of a Run (stored as JSON with the campaign).
type Report struct {
	Campaign  string `json:"campaign,omitempty"`
	Step      string `json:"step,omitempty"`
	ParamHash string `json:"param_hash,omitempty"`
	// RegionMin and RegionShape give the box of the campaign's scan the
	// states were built in (z, y, x; voxels).
	RegionMin   [3]int  `json:"region_min_zyx"`
	RegionShape [3]int  `json:"region_shape_zyx"`
	VoxelSize   float64 `json:"voxel_size_m"`
	IFT         float64 `json:"ift_n_per_m"`
	Theta       float64 `json:"theta_prescribed_deg"`
	MinRadius   float64 `json:"min_radius_voxels"`
	Porosity    float64 `json:"region_porosity"`
	// PoreRadius are the 50th, 90th and 99th percentiles of the distance
	// from pore voxels to the solid (voxels).
	PoreRadius [3]float64   `json:"pore_distance_p50_p90_p99_voxels"`
	Scan       ScanEstimate `json:"scan"`
	// CNR rendered: |μ_w − μ_n|/σ.
	CNR    float64 `json:"cnr"`
	DType  string  `json:"dtype"`
	Seed   uint64  `json:"seed"`
	States []State `json:"states"`
	// LabelsPath is the error of measurement alone (true labels); GreyPath
	// the error of segmentation and measurement (rendered scans).
	LabelsPath Summary  `json:"labels_path"`
	GreyPath   Summary  `json:"grey_path"`
	Notes      []string `json:"notes"`
	Version    string   `json:"software_version,omitempty"`
	CreatedAt  string   `json:"created_at,omitempty"`
	Seconds    float64  `json:"wall_s"`
}

// Progress receives the work done so far and the total (arbitrary units)
// and what is being done.
type Progress func(done, total int64, what string)

// Pressures returns the prescribed Pc/σ (1/voxel) of n states, ascending,
// chosen from the pore-size distribution: from the entry curvature of the
// largest pores, 2cos θ/r99 (r99 the 99th percentile of the pore voxels'
// distance to the solid), to min(1/minRadius, 2cos θ/r50), evenly spaced.
// It returns an error when even 1/minRadius cannot enter the largest pores.
func Pressures(dist []float64, theta, minRadius float64, n int) ([]float64, [3]float64, error) {
	if len(dist) == 0 {
		return nil, [3]float64{}, errors.New("accuracy: the region holds no pore space")
	}
	d := slices.Clone(dist)
	slices.Sort(d)
	q := func(p float64) float64 { return d[min(len(d)-1, int(p*float64(len(d))))] }
	r := [3]float64{q(0.5), q(0.9), q(0.99)}
	c := 2 * math.Cos(theta*math.Pi/180)
	lo := c / r[2]
	hi := math.Min(1/minRadius, c/r[0])
	if lo >= hi {
		return nil, r, fmt.Errorf("accuracy: the largest pores (99th percentile of the distance to the solid: %.1f voxels) admit no interface of radius ≥ %g voxels at θ %g° (entry Pc/σ %.3g per voxel > %.3g): pores this small are near the resolution limit; lower --min-radius to see how far off the numbers are", r[2], minRadius, theta, lo, 1/minRadius)
	}
	// A state exactly at the entry value holds a meniscus at the inlet
	// only: start a tenth of the range above it.
	lo += (hi - lo) / 10
	out := make([]float64, n)
	for i := range out {
		if n == 1 {
			out[i] = hi
			continue
		}
		out[i] = lo + (hi-lo)*float64(i)/float64(n-1)
	}
	return out, r, nil
}

// Run builds the states and measures them.
func Run(in Input, opt Options, progress Progress) (*Report, error) {
	t0 := time.Now()
	if err := opt.Defaults(); err != nil {
		return nil, err
	}
	if progress == nil {
		progress = func(int64, int64, string) {}
	}
	cfg := in.Config
	cfg.DetectSample = false
	cfg.Segment.Sample = segment.Sample{}
	if err := cfg.Validate(); err != nil {
		return nil, fmt.Errorf("accuracy: %w", err)
	}
	mo, err := cfg.MeasureOptions()
	if err != nil {
		return nil, err
	}
	codes := cfg.Segment.Codes
	sc := in.Scan
	if math.IsNaN(sc.Nonwetting) || math.IsNaN(sc.Wetting) || !(sc.Noise >= 0) || !(sc.Blur >= 0) {
		return nil, fmt.Errorf("accuracy: the scan estimate lacks a grey level or noise (nonwetting %g, wetting %g, noise %g, blur %g)", sc.Nonwetting, sc.Wetting, sc.Noise, sc.Blur)
	}
	if sc.Wetting == sc.Nonwetting {
		return nil, errors.New("accuracy: wetting and nonwetting grey levels are equal: the fluids cannot be told apart")
	}
	h := in.Solid.VoxelSize
	if !(h > 0) {
		return nil, errors.New("accuracy: the solid mask has no voxel size")
	}
	shape := in.Solid.Box.Size()
	if shape[0] < 16 || shape[1] < 16 || shape[2] < 16 {
		return nil, fmt.Errorf("accuracy: region %v: want every edge ≥ 16 voxels", shape)
	}
	axis := mo.FlowAxis
	box := volume.BoxOf(shape[0], shape[1], shape[2])
	// The region at the origin, with the faces parallel to the flow axis
	// made solid: the equilibrium solver treats them as walls at θ, so the
	// labels, the rendered scan and the measurement see the same walls.
	solidLab := volume.New[uint8](box, h)
	pore := make([]bool, box.Voxels())
	nPore := 0
	i := 0
	for z := 0; z < shape[0]; z++ {
		for y := 0; y < shape[1]; y++ {
			for x := 0; x < shape[2]; x++ {
				v := in.Solid.Pix[i]
				if v == 255 {
					return nil, fmt.Errorf("accuracy: region voxel (%d, %d, %d) lies outside the sample: choose a region inside it", z+in.Solid.Box.Min[0], y+in.Solid.Box.Min[1], x+in.Solid.Box.Min[2])
				}
				p := [3]int{z, y, x}
				wall := false
				for a := 0; a < 3; a++ {
					if a != axis && (p[a] == 0 || p[a] == shape[a]-1) {
						wall = true
					}
				}
				if v == codes.Solid || wall {
					solidLab.Pix[i] = codes.Solid
				} else {
					solidLab.Pix[i] = codes.Wetting
					pore[i] = true
					nPore++
				}
				i++
			}
		}
	}
	solidMask := make([]bool, len(pore))
	for j, p := range pore {
		solidMask[j] = !p
	}
	d2 := distance.SquaredToMask(solidMask, shape)
	var dist []float64
	for j, p := range pore {
		if p {
			dist = append(dist, math.Sqrt(d2[j]))
		}
	}
	P, radii, err := Pressures(dist, opt.Theta, opt.MinRadius, opt.States)
	if opt.Pressures != nil {
		P, err = opt.Pressures, nil
	}
	if err != nil {
		return nil, err
	}
	rep := &Report{RegionMin: in.Solid.Box.Min, RegionShape: shape, VoxelSize: h, IFT: cfg.IFT, Theta: opt.Theta, MinRadius: opt.MinRadius,
		Porosity: float64(nPore) / float64(len(pore)), PoreRadius: radii, Scan: sc, DType: in.DType.String(), Seed: opt.Seed}
	sigma := sc.Noise
	if sigma > 0 {
		rep.CNR = math.Abs(sc.Wetting-sc.Nonwetting) / sigma
	}
	const relaxUnits, measureUnits = 10, 3
	total := int64(len(P) * (relaxUnits + measureUnits))
	var done int64
	solver, err := equilibrium.New(pore, shape, equilibrium.Options{Theta: opt.Theta, Inlet: equilibrium.Face{Axis: axis}, Workers: opt.Workers, MaxTime: opt.MaxTime})
	if err != nil {
		return nil, fmt.Errorf("accuracy: %w", err)
	}
	// Each state starts from the previous one joined with the
	// full-morphology state at r_c = 2cos θ/P (Hilpert & Miller 2001, Adv.
	// Water Resour. 24:243: the pore space reached from the inlet by balls
	// whose meniscus radius 2/P meets the wall at θ), so the level set
	// starts near its equilibrium instead of creeping in from the inlet
	// face (measured on an 86³ region of the 128³ demo, θ 45°, corner
	// radius 5.5 voxels: from the inlet slice the first state stopped at
	// the time limit 4000 unconverged; from this start it converged at
	// t 3696, S_n 0.583 against 0.579).
	drain, err := scenario.NewDrainage(solidLab, phase.Of(codes.Wetting), scenario.DrainageOptions{Inlet: scenario.Face{Axis: axis}, Connectivity: mo.Connectivity})
	if err != nil {
		return nil, fmt.Errorf("accuracy: %w", err)
	}
	prev := make([]bool, len(pore))
	cosT := math.Cos(opt.Theta * math.Pi / 180)
	var solidForSeg *volume.Labels
	if cfg.Segment.Reference {
		solidForSeg = solidLab
	}
	for k, p := range P {
		progress(done, total, fmt.Sprintf("state %d/%d: relaxing at Pc/σ %.4f per voxel", k+1, len(P), p))
		tr := time.Now()
		start := drain.Invade(2*cosT/p, nil)
		for j := range start {
			start[j] = (start[j] || prev[j]) && pore[j]
		}
		if err := solver.SetNonwetting(start); err != nil {
			return nil, fmt.Errorf("accuracy: %w", err)
		}
		st, err := solver.Relax(p)
		if err != nil {
			return nil, fmt.Errorf("accuracy: %w", err)
		}
		done += relaxUnits
		s := State{PcOverSigma: p / h, CornerRadius: 1 / p, Converged: st.Converged, RelaxTime: st.Time, RelaxSeconds: time.Since(tr).Seconds()}
		if cfg.IFT > 0 {
			s.PcPrescribed = ptr(cfg.IFT * p / h)
		}
		nw := solver.Nonwetting()
		prev = nw
		truth := solidLab.Clone()
		nn := 0
		for j, b := range nw {
			if b && pore[j] {
				truth.Pix[j] = codes.Nonwetting
				nn++
			}
		}
		s.SatNonwet = float64(nn) / float64(nPore)
		if s.SatNonwet < MinSaturation {
			s.Skipped = fmt.Sprintf("nonwetting saturation %.4f below %g", s.SatNonwet, MinSaturation)
			rep.States = append(rep.States, s)
			done += measureUnits
			continue
		}
		progress(done, total, fmt.Sprintf("state %d/%d: measuring the true labels", k+1, len(P)))
		rt, err := measure.Volume(truth, mo, cfg.Tile, opt.Workers)
		if err != nil {
			return nil, fmt.Errorf("accuracy: true labels: %w", err)
		}
		done++
		progress(done, total, fmt.Sprintf("state %d/%d: rendering, segmenting and measuring", k+1, len(P)))
		fp := forward.Params{Codes: codes, Solid: sc.Solid, Wetting: sc.Wetting, Nonwetting: sc.Nonwetting,
			Wall: sc.Solid, Air: sc.Solid, Blur: sc.Blur, CNR: rep.CNR, Seed: opt.Seed + uint64(k)}
		img, err := forward.Render(truth, fp)
		if err != nil {
			return nil, fmt.Errorf("accuracy: %w", err)
		}
		var grey volume.Any = img
		switch in.DType {
		case volume.Uint16:
			grey = forward.Uint16(img)
		case volume.Uint8:
			u := volume.New[uint8](img.Box, h)
			for j, v := range img.Pix {
				u.Pix[j] = uint8(math.Max(0, math.Min(255, math.Round(float64(v)))))
			}
			grey = u
		}
		done++
		_, rg, _, _, err := scan.WholeCampaign(grey, cfg, solidForSeg, opt.Workers, in.Stored, "accuracy", 0)
		if err != nil {
			return nil, fmt.Errorf("accuracy: segmenting the rendered state: %w", err)
		}
		done++
		s.SatWetting = Quantity{Truth: rt.SatWetting, Labels: rt.SatWetting, Grey: rg.SatWetting}
		s.SpecificWN = Quantity{Truth: rt.SpecificWN, Labels: rt.SpecificWN, Grey: rg.SpecificWN}
		s.Curvature = Quantity{Truth: ptr(p / h), Labels: rt.CurvMean, Grey: rg.CurvMean}
		s.Pc = Quantity{Truth: s.PcPrescribed, Labels: rt.Pc, Grey: rg.Pc}
		s.AngleMean = Quantity{Truth: ptr(opt.Theta), Labels: rt.AngleMean, Grey: rg.AngleMean}
		s.AngleStdDeg = Quantity{Labels: rt.AngleStd, Grey: rg.AngleStd}
		rep.States = append(rep.States, s)
	}
	progress(total, total, "done")
	rep.LabelsPath = summarise(rep.States, func(q Quantity) *float64 { return q.Labels })
	rep.GreyPath = summarise(rep.States, func(q Quantity) *float64 { return q.Grey })
	rep.Notes = notes(rep)
	rep.Seconds = time.Since(t0).Seconds()
	return rep, nil
}

func ptr(v float64) *float64 { return &v }

// summarise computes bias and spread of each quantity over the measured
// states for one path.
func summarise(states []State, pick func(Quantity) *float64) Summary {
	stat := func(err func(s State) (float64, bool)) Stat {
		var e []float64
		for _, s := range states {
			if s.Skipped != "" {
				continue
			}
			if v, ok := err(s); ok {
				e = append(e, v)
			}
		}
		var st Stat
		st.N = len(e)
		if len(e) == 0 {
			return st
		}
		m := 0.0
		for _, v := range e {
			m += v
		}
		m /= float64(len(e))
		st.Bias = ptr(m)
		if len(e) > 1 {
			v := 0.0
			for _, x := range e {
				v += (x - m) * (x - m)
			}
			st.Spread = ptr(math.Sqrt(v / float64(len(e)-1)))
		}
		return st
	}
	abs := func(q func(State) Quantity) func(State) (float64, bool) {
		return func(s State) (float64, bool) {
			m, t := pick(q(s)), q(s).Truth
			if m == nil || t == nil {
				return 0, false
			}
			return *m - *t, true
		}
	}
	rel := func(q func(State) Quantity) func(State) (float64, bool) {
		return func(s State) (float64, bool) {
			m, t := pick(q(s)), q(s).Truth
			if m == nil || t == nil || *t == 0 {
				return 0, false
			}
			return *m / *t - 1, true
		}
	}
	return Summary{
		SatWetting: stat(abs(func(s State) Quantity { return s.SatWetting })),
		SpecificWN: stat(rel(func(s State) Quantity { return s.SpecificWN })),
		Pc:         stat(rel(func(s State) Quantity { return s.Curvature })),
		Angle:      stat(abs(func(s State) Quantity { return s.AngleMean })),
	}
}

// notes are the cautions stored with the report.
func notes(r *Report) []string {
	n := []string{
		"Image-derived capillary pressure and contact angles are estimates; their error grows as radii of curvature approach a few voxels. These figures hold for this region, resolution and parameter set; do not use them alone for engineering or safety decisions.",
		"S_w and a_wn are compared with the true labels measured by the same code; Pc (through the curvature κ = Pc/σ) and θ with the prescribed values. The states' own contact angle is a few degrees below the prescribed one (level-set wall treatment), which is part of the θ bias.",
		"Noise is rendered white and the blur Gaussian, at the grey levels, noise σ and blur of the scan (estimated from the campaign's step, or given with --mask); reconstruction noise of a real scan is correlated over a few voxels, and drift-registration resampling is not modelled.",
	}
	unconv := 0
	for _, s := range r.States {
		if !s.Converged && s.Skipped == "" {
			unconv++
		}
	}
	if unconv > 0 {
		n = append(n, fmt.Sprintf("%d state(s) reached the relaxation time limit before the interface came to rest: their curvature is near, not at, the prescribed one.", unconv))
	}
	return n
}
