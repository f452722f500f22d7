package main

import (
	"bytes"
	"strings"
	"testing"

	"sluice/pkg/measure"
)

// TestMeasureTableUncertainty: the table of `sluice measure` shows the
// standard errors, the connected and trapped Pc and the trapped ganglia's
// own Pc when the result has them, and leaves the SE out when it is null.
func TestMeasureTableUncertainty(t *testing.T) {
	v := func(x float64) *float64 { return &x }
	r := &measure.Result{Shape: [3]int{1, 1, 1}, VoxelSize: 2e-6, BlockEdge: 64e-6,
		Pc: v(2514.6), PcSE: v(183.7), PcConnected: v(2370.3), PcConnectedSE: v(223.1), PcTrapped: v(2772.6),
		AngleMean: v(66.71), AngleMeanSE: v(2.87),
		TrappedGanglia: &measure.GangliaCurvature{MinArea: 1e-9, Count: 3, Below: 2, PcP10: v(2600), PcMedian: v(2700), PcP90: v(2900)}}
	var b bytes.Buffer
	printTable(&b, "x.raw", r, false)
	out := b.String()
	for _, want := range []string{"2.515 ± 0.1837", "blocks of 64 µm", "2.37 ± 0.2231 / 2.773  ", "2.6 / 2.7 / 2.9", "3 ganglia with ≥ 1000 µm²", "66.7 ± 2.9"} {
		if !strings.Contains(out, want) {
			t.Errorf("table lacks %q:\n%s", want, out)
		}
	}
}
