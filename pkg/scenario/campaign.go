// Package scenario makes the synthetic displacement campaign that
// `sluice demo` feeds through the pipeline and that the pipeline's checks
// compare against: gas (the nonwetting phase) invading a brine-filled
// (wetting) grain pack by full-morphology drainage (Hilpert & Miller 2001,
// Adv. Water Resour. 24:243) at a falling capillary radius r_c.
//
// The scenario is our own invention, for the demo and tests only:
//
//   - Rock: a sandstone-like pack of cemented spherical grains
//     (synth.GrainPack), porosity 0.28 by default, grain radius scaled to the
//     volume (36 voxels at 256³), in a cylindrical core whose outside is
//     phase.Outside (on by default, so the sample-mask path is exercised).
//   - Fluids: the pore space starts full of brine; gas enters through the
//     low-z face (inlet), brine leaves through the high-z face (outlet); the
//     sides are walls (a sleeve).
//   - Schedule: step 0 is at r_c = RcStart (by default the smaller of the
//     entry radius — where step 0 holds no gas, a brine-saturated reference
//     state — and 1.6 × the breakthrough radius). Steps 1 … N−K−M−1 raise the
//     capillary pressure linearly in time (1/r_c linear) to r_c = RcEnd (by
//     default 0.8 × the breakthrough radius, S_n ≈ 0.5–0.7); the next K
//     steps (SteadySteps, default 5) lower r_c by only SteadyDrift (default
//     0.1 %) per step, so the fluid state is nearly constant: ground truth
//     for a steady-state detector. With ImbibitionSteps M > 0 the last M of
//     the N steps (after the steady ones) raise r_c again to RcImbibition:
//     brine re-invades and gas is cut into trapped ganglia (imbibition.go).
//     Scan i is taken at t = i × Interval.
//
// Ground truth per step (Truth): r_c in voxels and metres, the imposed
// capillary pressure Pc = 2σ/r_c (Young–Laplace for the spherical terminal
// menisci of radius r_c; science.md), whether the step is one of the steady
// ones, and, for the campaign, the first step at which the nonwetting phase
// percolates inlet → outlet (Breakthrough, found from the step labels by a
// flood fill).
//
// Curvature caveat, measured: only the terminal menisci in pore throats are
// spheres of radius r_c (κ = 2/r_c; measured median −4 … −8 % at r_c 10–12
// voxels in a funnel). Most of the w–n interface of a full-morphology state
// wraps wetting phase at grain contacts and in corners; there it is the
// envelope of r_c-balls sliding along a line (κ ≈ 1/r_c, less at saddles),
// where a real meniscus at the same pressure would have radius r_c/2. The
// area-weighted median κ over all interfaces of a pack is therefore about
// 0.4–0.56 × 2/r_c (96³ pack, r_c 8–12), and image-based Pc from all
// interfaces reads low against Truth.Pc by that factor. Compare the
// imposed Pc with the curvature of terminal menisci, or with the upper
// tail (90th percentile ≈ 2/r_c).
//
// Boundaries: the inlet reservoir is not modelled beyond the face, so ball
// centres lie inside the box; a thin sliver of wetting phase can stay where
// a pore meets the inlet face next to its wall.
//
// Cost: the rock, its exact distance map and the widest-path map of the ball
// centres are computed once (Prepare); each step then costs one exact
// distance transform of its connected ball centres (the dilation by the
// ball of radius r_c) and a copy of the rock, and can be made on demand in
// any order. With Trapping the steps depend on each other and are made in
// sequence (cached, so walking forward stays cheap).
package scenario

import (
	"fmt"
	"math"
	"sync"

	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// Campaign describes a synthetic drainage campaign. Zero fields take the
// documented defaults. Use it through a pointer; Prepare (or the first
// Step) fixes the configuration, and later changes to the fields are
// ignored.
type Campaign struct {
	// Shape is (nz, ny, nx); default 256³.
	Shape [3]int
	// Steps is the number of scans; default 30.
	Steps int
	// SteadySteps is K, the number of last steps with nearly constant r_c;
	// default 5. Use a negative value for none.
	SteadySteps int
	// SteadyDrift is the relative fall of r_c per steady step; default
	// 0.001. Use a negative value for exactly constant r_c.
	SteadyDrift float64
	// Seed selects the rock.
	Seed uint64
	// VoxelSize is the voxel edge in metres; default 4 µm.
	VoxelSize float64
	// IFT is the gas–brine interfacial tension σ in N/m; default 0.035
	// (CO2–brine at storage conditions is 25–45 mN/m, Chalbaud et al. 2009,
	// Adv. Water Resour. 32:98).
	IFT float64
	// Interval is the time between scans in seconds; default 45.
	Interval float64
	// RcStart and RcEnd bound the ramp of r_c in voxels; zero takes the
	// smaller of the rock's entry radius and 1.6 × its breakthrough radius,
	// and 0.8 × the breakthrough radius (Drainage.EntryRadius,
	// Drainage.BreakthroughRadius).
	RcStart, RcEnd float64
	// Rock is the grain pack; a zero MeanRadius takes 0.14 × the smallest
	// edge of Shape (36 voxels at 256³, which puts the breakthrough radius
	// near 11 voxels), a zero Porosity takes 0.28, a zero CoreRadius takes half the smaller of ny, nx
	// minus 2 (unless NoCore), a zero Seed takes Seed.
	Rock synth.GrainPack
	// NoCore fills the whole box with rock (no cylinder, no Outside).
	NoCore bool
	// Trapping keeps wetting phase that lost contact with the outlet
	// (Drainage.Trap). Off by default.
	Trapping bool
	// ImbibitionSteps is the number of last scans in which brine
	// re-invades (imbibition.go), counted in Steps, after the steady ones;
	// default 0 (none). RcImbibition is the r_c they rise to; zero takes
	// 1.8 × the breakthrough radius (in the demo's 256³ pack gas is then
	// trapped from the third imbibition step of four; at 1.3 × only in the
	// last).
	ImbibitionSteps int
	RcImbibition    float64
	// Codes are the label codes; the zero value takes phase.Default().
	Codes phase.Codes
	// Drainage options (inlet face, connectivity, open sides).
	Drainage DrainageOptions

	once  sync.Once
	err   error
	rock  *volume.Labels
	pack  synth.PackInfo
	drain *Drainage
	rcs   []float64

	mu        sync.Mutex
	trapStep  int // last step whose trapped set is cached, −1 for none
	trapped   []bool
	imbMu     sync.Mutex
	imbStep   int // last imbibition step cached in imbNW, −1 for none
	imbNW     []bool
	breakOnce sync.Once
	breakStep int
}

// StepTruth is what is known exactly about one step.
type StepTruth struct {
	Step  int
	TimeS float64
	// Rc is the capillary radius in voxels, RcMetres in metres.
	Rc, RcMetres float64
	// Pc = 2σ/r_c in Pa: the imposed capillary pressure, carried by the
	// terminal menisci (see the package doc for the other interfaces).
	Pc float64
	// Curvature = 2/r_c in 1/m: the total curvature κ of the terminal
	// menisci.
	Curvature float64
	// Steady marks the K steps after the ramp, whose r_c is nearly
	// constant.
	Steady bool
	// Imbibition marks the last ImbibitionSteps steps (r_c rising).
	Imbibition bool
}

func (c *Campaign) resolve() {
	if c.Shape == [3]int{} {
		c.Shape = [3]int{256, 256, 256}
	}
	if c.Steps == 0 {
		c.Steps = 30
	}
	switch {
	case c.SteadySteps == 0:
		c.SteadySteps = 5
	case c.SteadySteps < 0:
		c.SteadySteps = 0
	}
	switch {
	case c.SteadyDrift == 0:
		c.SteadyDrift = 0.001
	case c.SteadyDrift < 0:
		c.SteadyDrift = 0
	}
	if c.VoxelSize == 0 {
		c.VoxelSize = 4e-6
	}
	if c.IFT == 0 {
		c.IFT = 0.035
	}
	if c.Interval == 0 {
		c.Interval = 45
	}
	if c.Codes == (phase.Codes{}) {
		c.Codes = phase.Default()
	}
	edge := min(c.Shape[0], c.Shape[1], c.Shape[2])
	if c.Rock.MeanRadius == 0 {
		c.Rock.MeanRadius = 0.14 * float64(edge)
	}
	if c.Rock.Porosity == 0 {
		c.Rock.Porosity = 0.28
	}
	if c.Rock.CoreRadius == 0 && !c.NoCore {
		c.Rock.CoreRadius = float64(min(c.Shape[1], c.Shape[2]))/2 - 2
	}
	if c.NoCore {
		c.Rock.CoreRadius = 0
	}
	if c.Rock.Seed == 0 {
		c.Rock.Seed = c.Seed
	}
}

func (c *Campaign) validate() error {
	for _, n := range c.Shape {
		if n < 8 {
			return fmt.Errorf("scenario: campaign shape %v, want every edge ≥ 8", c.Shape)
		}
	}
	switch {
	case c.Steps < 2:
		return fmt.Errorf("scenario: campaign of %d steps, want ≥ 2", c.Steps)
	case c.ImbibitionSteps < 0 || c.RcImbibition < 0:
		return fmt.Errorf("scenario: %d imbibition steps to r_c %g", c.ImbibitionSteps, c.RcImbibition)
	case c.SteadySteps+c.ImbibitionSteps > c.Steps-2:
		return fmt.Errorf("scenario: %d steady and %d imbibition steps leave no ramp in %d steps", c.SteadySteps, c.ImbibitionSteps, c.Steps)
	case c.SteadyDrift >= 0.1:
		return fmt.Errorf("scenario: steady drift %g per step is not steady (want < 0.1)", c.SteadyDrift)
	case !(c.VoxelSize > 0) || !(c.IFT > 0) || !(c.Interval > 0):
		return fmt.Errorf("scenario: voxel size %g m, IFT %g N/m and interval %g s must be positive", c.VoxelSize, c.IFT, c.Interval)
	case c.RcStart < 0 || c.RcEnd < 0:
		return fmt.Errorf("scenario: negative capillary radius (start %g, end %g)", c.RcStart, c.RcEnd)
	}
	return c.Codes.Validate()
}

// Prepare applies the defaults, builds the rock and its distance maps, and
// fixes the r_c schedule. It runs once; later calls return the first
// result.
func (c *Campaign) Prepare() error {
	c.once.Do(func() { c.err = c.prepare() })
	return c.err
}

func (c *Campaign) prepare() error {
	c.resolve()
	if err := c.validate(); err != nil {
		return err
	}
	c.rock = volume.NewShape[uint8](c.Shape[0], c.Shape[1], c.Shape[2], c.VoxelSize)
	pack, err := c.Rock.Draw(c.rock, c.Codes.Solid, c.Codes.Wetting)
	if err != nil {
		return fmt.Errorf("scenario: rock: %w", err)
	}
	c.pack = pack
	c.drain, err = NewDrainage(c.rock, phase.Of(c.Codes.Wetting), c.Drainage)
	if err != nil {
		return err
	}
	start, end := c.RcStart, c.RcEnd
	bt := c.drain.BreakthroughRadius()
	if start == 0 {
		start = math.Min(c.drain.EntryRadius(), 1.6*bt)
	}
	if end == 0 {
		end = 0.8 * bt
	}
	if !(end > 0 && end < start) {
		return fmt.Errorf("scenario: r_c must fall from start %g to end %g voxels (both > 0)", start, end)
	}
	c.RcStart, c.RcEnd = start, end
	ramp := c.Steps - c.SteadySteps - c.ImbibitionSteps
	c.rcs = make([]float64, c.Steps)
	for i := 0; i < ramp; i++ {
		// 1/r_c, hence Pc, rises linearly with time.
		f := float64(i) / float64(ramp-1)
		c.rcs[i] = 1 / (1/start + f*(1/end-1/start))
	}
	for i := ramp; i < ramp+c.SteadySteps; i++ {
		c.rcs[i] = end * (1 - c.SteadyDrift*float64(i-ramp+1))
	}
	if c.ImbibitionSteps > 0 {
		if c.RcImbibition == 0 {
			c.RcImbibition = 1.8 * bt
		}
		if err := c.imbibitionRadii(c.imbibitionStart(), c.RcImbibition); err != nil {
			return err
		}
	}
	c.imbStep = -1
	c.trapStep = -1
	c.breakStep = -2
	return nil
}

func (c *Campaign) mustPrepare() {
	if err := c.Prepare(); err != nil {
		panic(err)
	}
}

// Rc returns the capillary radius of step i in voxels. It panics if
// Prepare fails.
func (c *Campaign) Rc(i int) float64 {
	c.mustPrepare()
	return c.rcs[i]
}

// Truth returns the ground truth of step i. It panics if Prepare fails.
func (c *Campaign) Truth(i int) StepTruth {
	c.mustPrepare()
	rc := c.rcs[i]
	return StepTruth{
		Step:       i,
		TimeS:      float64(i) * c.Interval,
		Rc:         rc,
		RcMetres:   rc * c.VoxelSize,
		Pc:         2 * c.IFT / (rc * c.VoxelSize),
		Curvature:  2 / (rc * c.VoxelSize),
		Steady:     i >= c.imbibitionStart()-c.SteadySteps && i < c.imbibitionStart(),
		Imbibition: i >= c.imbibitionStart(),
	}
}

// Step returns the labels of step i, its capillary radius in voxels and its
// scan time in seconds. Steps may be asked for in any order and from
// several goroutines. It panics if Prepare fails or i is out of range; call
// Prepare first to get the error.
func (c *Campaign) Step(i int) (labels *volume.Labels, rc float64, timeS float64) {
	c.mustPrepare()
	if i < 0 || i >= c.Steps {
		panic(fmt.Sprintf("scenario: step %d of a %d-step campaign", i, c.Steps))
	}
	nw := c.nonwetting(i)
	return c.drain.Labels(nw, c.Codes.Wetting, c.Codes.Nonwetting), c.rcs[i], float64(i) * c.Interval
}

func (c *Campaign) nonwetting(i int) []bool {
	if i >= c.imbibitionStart() {
		return c.imbibed(i)
	}
	return c.drainageNW(i)
}

// drainageNW is the nonwetting mask of drainage step i.
func (c *Campaign) drainageNW(i int) []bool {
	if !c.Trapping {
		return c.drain.Invade(c.rcs[i], nil)
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if i <= c.trapStep {
		c.trapStep, c.trapped = -1, nil
	}
	var nw []bool
	for j := c.trapStep + 1; j <= i; j++ {
		nw = c.drain.Invade(c.rcs[j], c.trapped)
		c.trapped = c.drain.Trap(nw, c.trapped)
		c.trapStep = j
	}
	return nw
}

// Breakthrough returns the first step whose nonwetting phase percolates
// from the inlet face to the outlet face (connectivity of the drainage,
// 26 by default), or −1 if none does. It finds it from the step labels by
// bisection over the drainage steps (drainage only advances as r_c falls;
// the imbibition steps after them are not searched).
func (c *Campaign) Breakthrough() int {
	c.mustPrepare()
	c.breakOnce.Do(func() {
		perc := func(i int) bool {
			lab, _, _ := c.Step(i)
			return c.Percolating(lab)
		}
		lo, hi := 0, c.imbibitionStart()-1
		if !perc(hi) {
			c.breakStep = -1
			return
		}
		for lo < hi {
			m := (lo + hi) / 2
			if perc(m) {
				hi = m
			} else {
				lo = m + 1
			}
		}
		c.breakStep = lo
	})
	return c.breakStep
}

// Percolating reports whether the nonwetting phase of lab (a step of this
// campaign) connects the inlet face to the outlet face.
func (c *Campaign) Percolating(lab *volume.Labels) bool {
	c.mustPrepare()
	mask := make([]bool, len(lab.Pix))
	for i, v := range lab.Pix {
		mask[i] = v == c.Codes.Nonwetting
	}
	return Percolates(mask, lab.Box.Size(), c.drain.opt.Inlet, c.drain.opt.Connectivity)
}

// RockLabels returns the rock (solid, wetting-filled pore space, Outside) and
// what the grain pack reports about it. It panics if Prepare fails.
func (c *Campaign) RockLabels() (*volume.Labels, synth.PackInfo) {
	c.mustPrepare()
	return c.rock, c.pack
}

// Drain returns the drainage model of the campaign's rock.
func (c *Campaign) Drain() *Drainage {
	c.mustPrepare()
	return c.drain
}

// Saturation returns the nonwetting saturation S_n of a step's labels over
// the pore space (wetting + nonwetting voxels).
func (c *Campaign) Saturation(lab *volume.Labels) float64 {
	c.mustPrepare()
	w, n := 0, 0
	for _, v := range lab.Pix {
		switch v {
		case c.Codes.Wetting:
			w++
		case c.Codes.Nonwetting:
			n++
		}
	}
	if w+n == 0 {
		return math.NaN()
	}
	return float64(n) / float64(w+n)
}
