package scenario

// Imbibition after the drainage: the last ImbibitionSteps scans of a
// campaign lower the capillary pressure again (r_c rises from the drainage's
// last radius to RcImbibition) and brine re-invades from the outlet.
//
// The rule is our own, in the spirit of the morphological methods (Hilpert
// & Miller 2001, Adv. Water Resour. 24:243, who pair drainage with an
// imbibition by the same balls): at radius r_c the nonwetting phase may stay
// only in pore voxels covered by a ball of radius r_c lying in the pore space
// (the opening of the pore space by that ball); everything else it held
// becomes brine. So brine fills the throats and the narrow parts of the pore
// bodies first, as a wetting phase does when Pc falls, and
//
//	nw(i) = nw(i−1) ∩ Open(pore, r_c(i)).
//
// Brine reaches those voxels through the films a voxel image does not
// resolve (water-wet rock), so no brine connectivity is required; gas that
// loses its path to the inlet (and to the outlet) cannot leave and stays
// where the opening keeps it: once the throats around a pore body fill, its gas is a trapped
// ganglion. A trapped ganglion still loses the voxels the next, larger ball
// cannot cover (for CO2 in brine: dissolution at the lower pressure; here:
// the rule), so it shrinks, and where a neck between two bodies empties it
// splits in two. The nonwetting set only ever shrinks, so a trapped ganglion
// (no path to the inlet or the outlet) never re-joins the connected gas, and the volume
// that is trapped at one step is trapped, or brine, at every later step.

import (
	"fmt"
	"math"

	"sluice/pkg/distance"
	"sluice/pkg/volume"
)

// Open returns the opening of the pore space by the ball of radius rc
// (voxels): every pore voxel within rc of a ball centre, a centre being a
// pore voxel farther than rc from every non-pore voxel (as in Invade, but
// with no connection to the inlet required).
func (d *Drainage) Open(rc float64) []bool {
	n := len(d.pore)
	r2 := rc * rc
	if q := math.Round(r2); math.Abs(r2-q) < 1e-9*q {
		r2 = q
	}
	centre := make([]bool, n)
	for i := range centre {
		centre[i] = d.pore[i] && float64(d.dist2[i]) > r2
	}
	out := make([]bool, n)
	if !anyTrue(centre) {
		return out
	}
	dil := distance.SquaredToMask(centre, d.shape)
	for i := range out {
		out[i] = d.pore[i] && dil[i] <= r2
	}
	return out
}

// Imbibe returns the nonwetting mask after brine re-invades at radius rc:
// nw ∩ Open(rc) (see the file doc).
func (d *Drainage) Imbibe(nw []bool, rc float64) []bool {
	open := d.Open(rc)
	out := make([]bool, len(nw))
	for i := range out {
		out[i] = nw[i] && open[i]
	}
	return out
}

// Trapped returns the nonwetting voxels of nw with no path through nw to the
// inlet face or to the outlet face (connectivity of the drainage): the
// trapped ganglia, by the definition of package cluster (a ganglion touching
// either face is connected).
func (d *Drainage) Trapped(nw []bool) []bool {
	in := FloodFromFace(nw, d.shape, d.opt.Inlet, d.opt.Connectivity)
	out := FloodFromFace(nw, d.shape, d.opt.Inlet.Opposite(), d.opt.Connectivity)
	tr := make([]bool, len(nw))
	for i := range tr {
		tr[i] = nw[i] && !in[i] && !out[i]
	}
	return tr
}

// imbibitionRadii fills c.rcs[from:] with the imbibition schedule: r_c
// rising from the radius of step from−1 to end, 1/r_c (Pc) falling linearly
// in time.
func (c *Campaign) imbibitionRadii(from int, end float64) error {
	m := c.Steps - from
	if m <= 0 {
		return nil
	}
	start := c.rcs[from-1]
	if !(end > start) {
		return fmt.Errorf("scenario: imbibition r_c must rise from %g to %g voxels", start, end)
	}
	for k := 1; k <= m; k++ {
		f := float64(k) / float64(m)
		c.rcs[from+k-1] = 1 / (1/start + f*(1/end-1/start))
	}
	return nil
}

// imbibitionStart is the first imbibition step (c.Steps when none).
func (c *Campaign) imbibitionStart() int { return c.Steps - c.ImbibitionSteps }

// imbibed returns the nonwetting mask of imbibition step i ≥
// imbibitionStart(), walking forward from the last drainage step (cached).
func (c *Campaign) imbibed(i int) []bool {
	c.imbMu.Lock()
	defer c.imbMu.Unlock()
	first := c.imbibitionStart()
	if c.imbStep < first-1 || c.imbStep > i {
		c.imbStep, c.imbNW = first-1, c.drainageNW(first-1)
	}
	for j := c.imbStep + 1; j <= i; j++ {
		c.imbNW = c.drain.Imbibe(c.imbNW, c.rcs[j])
		c.imbStep = j
	}
	out := make([]bool, len(c.imbNW))
	copy(out, c.imbNW)
	return out
}

// TrappedSaturation returns the saturation of trapped nonwetting phase of a
// step's labels: voxels of nonwetting ganglia touching neither the inlet nor
// the outlet face (Drainage.Trapped), over the pore voxels.
func (c *Campaign) TrappedSaturation(lab *volume.Labels) float64 {
	c.mustPrepare()
	nw := make([]bool, len(lab.Pix))
	for i, v := range lab.Pix {
		nw[i] = v == c.Codes.Nonwetting
	}
	tr := c.drain.Trapped(nw)
	p, n := 0, 0
	for i, v := range lab.Pix {
		if v == c.Codes.Nonwetting || v == c.Codes.Wetting {
			p++
			if tr[i] {
				n++
			}
		}
	}
	if p == 0 {
		return math.NaN()
	}
	return float64(n) / float64(p)
}
