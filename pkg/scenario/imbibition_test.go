package scenario

import (
	"testing"

	"sluice/pkg/measure"
)

// TestImbibitionTrapping: the imbibition steps after a drainage only ever
// take nonwetting voxels away (nw(i) ⊂ nw(i−1)), a voxel trapped at one step
// (its ganglion touches neither the inlet nor the outlet face) is trapped or
// brine at every later step (trapped volume never re-joins the connected
// phase), brine fills the throats so that trapped ganglia appear, and the
// series of trapped saturation from the scenario's flood fills equals the
// one package measure finds with its own cluster labelling and union-find
// (nonwetting_trapped_fraction × saturation_nonwetting), voxel for voxel.
// Source: the definitions (file doc; package cluster's connected ganglion)
// and an independent implementation. Seen failing with the opening replaced
// by the drainage's connected invasion (no ganglion was ever trapped) and
// with nw(i) taken from the opening alone instead of its intersection with
// nw(i−1) (brine voxels turned back into gas: 'shrinks' failed).
func TestImbibitionTrapping(t *testing.T) {
	c := smallCampaign(t, &Campaign{Shape: [3]int{96, 96, 96}, Steps: 10, SteadySteps: 2, ImbibitionSteps: 4})
	first := c.imbibitionStart()
	var prevNW, prevTr []bool
	opt := measure.Defaults()
	opt.SkipCurvature, opt.SkipContact = true, true
	var last float64
	for i := first - 1; i < c.Steps; i++ {
		lab, rc, _ := c.Step(i)
		tr := c.Truth(i)
		if tr.Imbibition != (i >= first) || (i >= first && tr.Steady) {
			t.Errorf("step %d: imbibition %v steady %v", i, tr.Imbibition, tr.Steady)
		}
		nw := make([]bool, len(lab.Pix))
		for k, v := range lab.Pix {
			nw[k] = v == c.Codes.Nonwetting
		}
		trapped := c.drain.Trapped(nw)
		st := c.TrappedSaturation(lab)
		r, err := measure.Volume(lab, opt, 48, 2)
		if err != nil {
			t.Fatal(err)
		}
		var fromMeasure float64
		if r.TrappedFraction != nil && r.SatNonwetting != nil {
			fromMeasure = *r.TrappedFraction * *r.SatNonwetting
		}
		t.Logf("step %d r_c %.2f: S_n %.4f, trapped S %.5f (measure %.5f), ganglia %d", i, rc, c.Saturation(lab), st, fromMeasure, r.GangliaCount)
		if d := st - fromMeasure; d > 1e-12 || d < -1e-12 {
			t.Errorf("step %d: trapped saturation %.6f, measure's %.6f", i, st, fromMeasure)
		}
		if prevNW != nil {
			for k := range nw {
				if nw[k] && !prevNW[k] {
					t.Fatalf("step %d: voxel %d turned nonwetting during imbibition", i, k)
				}
				if prevTr[k] && nw[k] && !trapped[k] {
					t.Fatalf("step %d: trapped voxel %d re-joined the connected phase", i, k)
				}
			}
			if !(rc > c.Rc(i-1)) {
				t.Errorf("step %d: r_c %.3f does not rise from %.3f", i, rc, c.Rc(i-1))
			}
		}
		prevNW, prevTr, last = nw, trapped, st
	}
	if !(last > 0) {
		t.Errorf("no trapped nonwetting phase after %d imbibition steps", c.ImbibitionSteps)
	}
}
