package main

import (
	"math"
	"os"
	"path/filepath"
	"testing"

	"sluice/pkg/riglog"
	"sluice/pkg/scenario"
)

// TestDemoRigMassBalance: the demo rig's pump (constant rate from 30 s
// before the first scan) has injected at least the gas the scenario holds
// in the core at every step: S_n·V_p ≤ q·(t + 30 s), S_n from the step's
// labels (the scenario's own truth). Its log reads back with the demo's
// rig_log mapping: the volume injected by each scan time counts from the
// log's first record (the pump's start), q·(t + 30 s), and the rate is q.
func TestDemoRigMassBalance(t *testing.T) {
	sc := &scenario.Campaign{Shape: [3]int{80, 80, 80}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "rig.csv")
	rig, err := newDemoRig(path, sc)
	if err != nil {
		t.Fatal(err)
	}
	last := sc.Truth(sc.Steps - 1).TimeS
	if err := rig.writeUntil(last + sc.Interval); err != nil {
		t.Fatal(err)
	}
	for i := 0; i < sc.Steps; i++ {
		lab, _, ts := sc.Step(i)
		held := sc.Saturation(lab) * rig.pv
		injected := rig.rate * (ts - demoRigOffset)
		t.Logf("step %d: t %.0f s, S_n %.3f, PV injected %.3f", i, ts, held/rig.pv, injected/rig.pv)
		if held > injected {
			t.Errorf("step %d: %.4g m³ of gas in the core, %.4g m³ injected", i, held, injected)
		}
	}
	cfg := demoRigConfig()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	l, err := riglog.Parse(path, b, *cfg)
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < sc.Steps; i++ {
		ts := sc.Truth(i).TimeS
		s := l.At(ts, riglog.Linear)
		// %.6g in the file: 6 significant digits.
		if want := rig.rate * (ts - demoRigOffset); !(math.Abs(s.Volume-want) <= 1e-5*want+1e-15) || !(math.Abs(s.Rate-rig.rate) <= 1e-5*rig.rate) {
			t.Errorf("step %d: log reads V %.6g m³, q %.6g m³/s; the pump gave %.6g, %.6g", i, s.Volume, s.Rate, want, rig.rate)
		}
	}
}
