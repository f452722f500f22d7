package main

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/riglog"
	"sluice/pkg/scenario"
	"sluice/pkg/series"
	"sluice/pkg/store"
)

// The demo's flow rig, our own invention: a pump injecting the gas at a
// constant rate and a differential-pressure transducer across the core,
// with pore pressure, confining pressure and temperature, logged every
// demoRigEvery seconds on the rig's own clock, which started 30 s before
// the first scan (t_scan = t_rig + demoRigOffset).
const (
	demoRigOffset = -30.0 // s
	demoRigEvery  = 5.0   // s
	// demoGasViscosity is the injected fluid's viscosity: 0.06 mPa·s, of
	// the order of CO2 at 10 MPa and 40 °C (from memory; the demo needs
	// only a plausible value, not a property of a real fluid).
	demoGasViscosity = 6e-5 // Pa·s
)

// demoRigConfig is the rig_log section that reads the demo rig's CSV.
func demoRigConfig() *riglog.Config {
	return &riglog.Config{
		Columns: riglog.Columns{
			Time:                 riglog.Column{Column: "elapsed_s", Unit: "s"},
			InjectedVolume:       &riglog.Column{Column: "pump_volume_ml", Unit: "ml"},
			Rate:                 &riglog.Column{Column: "pump_rate_ml_min", Unit: "ml/min"},
			DifferentialPressure: &riglog.Column{Column: "dp_kpa", Unit: "kPa"},
			PorePressure:         &riglog.Column{Column: "p_pore_bar", Unit: "bar"},
			ConfiningPressure:    &riglog.Column{Column: "p_confining_bar", Unit: "bar"},
			Temperature:          &riglog.Column{Column: "temp_c", Unit: "degC"},
		},
		ClockOffsetS:  demoRigOffset,
		Interpolation: riglog.Linear,
		ViscosityPaS:  demoGasViscosity,
	}
}

// demoRig writes the demo rig's log as the experiment runs.
//
// Consistent with the scenario's saturation path: the pump starts with
// the log, 30 s before the first scan, at the constant rate that keeps the
// volume injected at or above the gas the scenario holds in the core at
// every step, S_n·V_p (V_p the pore volume of the rock as drawn, S_n from
// each step's labels), with 2 % to spare: q = 1.02·max_i S_n,i·V_p/(t_i +
// 30 s). What is not held has left through the outlet
// (TestDemoRigMassBalance checks the balance). The transducer reads the capillary pressure
// the scenario imposes, 2σ/r_c (linear in time between scans, as 1/r_c
// is), plus 1 % noise: the viscous pressure drop at this rate is left out.
type demoRig struct {
	path  string
	rate  float64 // m³/s
	pv    float64 // m³
	times []float64
	pcs   []float64
	next  float64 // scans' clock time of the next record
	rng   *rand.Rand
}

// newDemoRig writes the header of the demo rig's log at path.
func newDemoRig(path string, sc *scenario.Campaign) (*demoRig, error) {
	rock, _ := sc.RockLabels()
	pore := 0
	for _, v := range rock.Pix {
		if v != sc.Codes.Solid && v != 255 { // 255: phase.Outside
			pore++
		}
	}
	pv := float64(pore) * math.Pow(sc.VoxelSize, 3)
	r := &demoRig{path: path, pv: pv, next: demoRigOffset, rng: rand.New(rand.NewPCG(7, 11))}
	for i := 0; i < sc.Steps; i++ {
		tr := sc.Truth(i)
		r.times, r.pcs = append(r.times, tr.TimeS), append(r.pcs, tr.Pc)
		lab, _, _ := sc.Step(i)
		r.rate = math.Max(r.rate, 1.02*sc.Saturation(lab)*pv/(tr.TimeS-demoRigOffset))
	}
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return nil, err
	}
	head := "# demo flow rig (sluice's own invention): gas pump at constant rate, differential-pressure transducer across the core\n" +
		"elapsed_s,pump_volume_ml,pump_rate_ml_min,dp_kpa,p_pore_bar,p_confining_bar,temp_c\n"
	return r, os.WriteFile(path, []byte(head), 0o644)
}

// pc is the imposed capillary pressure at scans' clock time t: linear
// between the steps, held outside them.
func (r *demoRig) pc(t float64) float64 {
	n := len(r.times)
	switch {
	case t <= r.times[0]:
		return r.pcs[0]
	case t >= r.times[n-1]:
		return r.pcs[n-1]
	}
	i := 1
	for r.times[i] < t {
		i++
	}
	w := (t - r.times[i-1]) / (r.times[i] - r.times[i-1])
	return r.pcs[i-1] + w*(r.pcs[i]-r.pcs[i-1])
}

// writeUntil appends the records up to scans' clock time t.
func (r *demoRig) writeUntil(t float64) error {
	f, err := os.OpenFile(r.path, os.O_APPEND|os.O_WRONLY, 0)
	if err != nil {
		return err
	}
	for ; r.next <= t; r.next += demoRigEvery {
		ts := r.next
		q := r.rate
		v := r.rate * (ts - demoRigOffset)
		dp := r.pc(ts) * (1 + 0.01*r.rng.NormFloat64())
		_, err = fmt.Fprintf(f, "%g,%.6g,%.6g,%.4f,%.3f,%.3f,%.2f\n", ts-demoRigOffset, v*1e6, q*6e7, dp/1e3,
			100+0.02*r.rng.NormFloat64(), 150.0, 40+0.05*r.rng.NormFloat64())
		if err != nil {
			break
		}
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	return err
}

// settleDemoRig stores the demo rig's log as it ends and sets the series'
// experiment-log columns from it once more, after the last step: the
// aggregator applied the log at each step's completion, when the records
// after the last step may not have been stored yet. No step is being
// completed any more, so the series has no other writer.
func settleDemoRig(ctx context.Context, st store.Store, name, path string) error {
	c, err := layout.NewCampaign(name)
	if err != nil {
		return err
	}
	cfg, err := rigConfig(ctx, st, c)
	if err != nil {
		return err
	}
	if err := (&rigTail{path: path, st: st, c: c, cfg: cfg}).poll(ctx); err != nil {
		return err
	}
	rows, err := series.Load(ctx, st, name)
	if err != nil {
		return err
	}
	if err := campaign.ApplyRigLog(ctx, st, c, &cfg, rows); err != nil {
		return err
	}
	return series.Save(ctx, st, name, rows)
}
