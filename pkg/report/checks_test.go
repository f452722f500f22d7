package report

import (
	"encoding/json"
	"strings"
	"testing"

	"sluice/pkg/measure"
	"sluice/pkg/series"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// Every check of PhysicalChecks is driven into each of its three states by
// rows measured with pkg/measure on synthetic label volumes whose geometry
// is known (a spherical cap on a flat wall: curvature 2/R, contact line
// where the cap meets the wall), not by rows written by hand. Where no real
// measurement can violate a rule (S_w + S_n = 1 holds by construction), a
// measured row is spoiled, as a broken or hand-edited series.json would be.

const hVox = 2e-6 // voxel edge, m

// capStep measures a nonwetting drop (spherical cap of radius r voxels, 90°
// through the drop) on a solid wall at z = wall, in wetting fluid.
func capStep(t *testing.T, name string, tm float64, wall, r float64, opt measure.Options) series.Row {
	t.Helper()
	box := volume.BoxOf(32, 36, 36)
	lab := volume.New[uint8](box, hVox)
	synth.CapScene{Wall: wall, R: r, DropAngle: 90, Centre: [2]float64{18, 18}}.Draw(lab, 0, 2, 1)
	return measured(t, name, tm, lab, opt)
}

// fill measures a volume holding one label everywhere above z = wall (solid
// below).
func fill(t *testing.T, name string, code uint8, wall float64) series.Row {
	t.Helper()
	lab := volume.New[uint8](volume.BoxOf(20, 20, 20), hVox)
	synth.Fill(lab, code, func(z, y, x float64) bool { return true })
	synth.Fill(lab, 0, func(z, y, x float64) bool { return z < wall })
	return measured(t, name, 0, lab, measure.Defaults())
}

func measured(t *testing.T, name string, tm float64, lab *volume.Labels, opt measure.Options) series.Row {
	t.Helper()
	res, err := measure.Volume(lab, opt, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(res)
	if err != nil {
		t.Fatal(err)
	}
	row, err := series.FromResult(name, tm, b)
	if err != nil {
		t.Fatal(err)
	}
	return row
}

func withIFT(s float64) measure.Options {
	o := measure.Defaults()
	o.IFT = s
	return o
}

func checkNamed(t *testing.T, cs []Check, prefix string) Check {
	t.Helper()
	for _, c := range cs {
		if strings.HasPrefix(c.Name, prefix) {
			return c
		}
	}
	t.Fatalf("no check %q in %v", prefix, cs)
	return Check{}
}

func TestPhysicalChecksThreeStates(t *testing.T) {
	const sigma = 0.035 // N/m
	ift := func(v float64) *float64 { return &v }
	// Drop radius 14 voxels: R/h = 14 ≥ 10. Drop radius 6: R/h = 6 < 10.
	big := capStep(t, "s000", 0, 8, 14, withIFT(sigma))
	big2 := capStep(t, "s001", 60, 8, 14, withIFT(sigma))
	small := capStep(t, "s002", 120, 8, 6, withIFT(sigma))
	wetOnly := fill(t, "w000", 1, 8)
	rock := fill(t, "r000", 0, 100) // all solid: no pore space
	if wetOnly.SatWetting == nil || *wetOnly.SatWetting != 1 || rock.SatWetting != nil {
		t.Fatalf("scenes not as intended: wetting-only S_w %v, all-rock S_w %v", wetOnly.SatWetting, rock.SatWetting)
	}
	noAngles := measure.Defaults()
	noAngles.IFT = sigma
	noAngles.SkipContact = true
	spoiled := big2
	sw := *spoiled.SatWetting - 0.1
	spoiled.SatWetting = &sw

	cases := []struct {
		check string
		rows  []series.Row
		ift   *float64
		want  Status
		// detail must contain this text
		detail string
	}{
		// Porosity: same wall → same porosity; another wall height → a
		// different rock fraction (z < 8 vs z < 12 of 32: φ 0.75 vs 0.625).
		{"porosity", []series.Row{big, big2}, nil, Passed, "0.00 %"},
		{"porosity", []series.Row{big, capStep(t, "s003", 180, 12, 14, measure.Defaults())}, nil, Failed, "limit 1 %"},
		{"porosity", []series.Row{big}, nil, NotEvaluated, "needs two steps with a porosity, the series has 1"},
		{"S_w + S_n", []series.Row{big, wetOnly}, nil, Passed, "0 of 2 steps"},
		{"S_w + S_n", []series.Row{big, spoiled}, nil, Failed, "1 of 2 steps"},
		{"S_w + S_n", []series.Row{rock}, nil, NotEvaluated, "no step has both saturations"},
		{"interface radius", []series.Row{big, big2, wetOnly}, nil, Passed, "2 of 2 steps"},
		{"interface radius", []series.Row{big, small}, nil, Failed, "1 of 2 steps"},
		{"interface radius", []series.Row{wetOnly, rock}, nil, NotEvaluated, "no step has a w–n interface"},
		{"contact angles", []series.Row{big, small, wetOnly}, nil, Passed, "2 of 2 steps"},
		{"contact angles", []series.Row{big, capStep(t, "s004", 240, 8, 14, noAngles)}, nil, Failed, "1 of 2 steps"},
		{"contact angles", []series.Row{wetOnly, rock}, nil, NotEvaluated, "no step has both fluids touching the rock"},
		{"capillary pressure", []series.Row{big, small, wetOnly}, ift(sigma), Passed, "0 of 2 steps"},
		// σ changed in the campaign after the steps were measured.
		{"capillary pressure", []series.Row{big, small}, ift(0.030), Failed, "2 of 2 steps"},
		{"capillary pressure", []series.Row{big, capStep(t, "s005", 300, 8, 14, measure.Defaults())}, ift(sigma), Failed, "1 of 2 steps"},
		{"capillary pressure", []series.Row{big, small}, nil, NotEvaluated, "no interfacial tension σ given"},
		{"capillary pressure", []series.Row{wetOnly}, ift(sigma), NotEvaluated, "no step has a w–n interface"},
	}
	for _, c := range cases {
		got := checkNamed(t, PhysicalChecks(c.rows, c.ift), map[string]string{
			"porosity": "porosity", "S_w + S_n": "S_w + S_n", "interface radius": "interface radius",
			"contact angles": "contact angles", "capillary pressure": "capillary pressure"}[c.check])
		if got.Status != c.want || !strings.Contains(got.Detail, c.detail) {
			t.Errorf("%s on %d rows: %s — %q; want %s with %q", c.check, len(c.rows), got.Status, got.Detail, c.want, c.detail)
		}
	}
}

// TestReportShowsNotEvaluated: a campaign of one-fluid steps (the first
// scans of a drainage) renders "not evaluated" with the reason, never
// FAILED and never "0 of 0".
func TestReportShowsNotEvaluated(t *testing.T) {
	rows := []series.Row{fill(t, "s000", 1, 6), fill(t, "s001", 1, 6)}
	rows[1].Time = 60
	page := string(render(t, Input{Params: Params{Campaign: "brine-only"}, Rows: rows, Checks: PhysicalChecks(rows, nil)}))
	for _, want := range []string{"5 checks: 2 passed, 0 failed, 3 not evaluated",
		`data-status="not evaluated"`, "not evaluated: interface radius of curvature ≥ 10 voxels — no step has a w–n interface",
		"not evaluated: capillary pressure Pc = σ·κ with the campaign&#39;s σ (Young–Laplace) — no interfacial tension σ given"} {
		if !strings.Contains(page, want) {
			t.Errorf("report lacks %q", want)
		}
	}
	if strings.Contains(page, "FAILED") || strings.Contains(page, "0 of 0") {
		t.Errorf("a one-fluid campaign shows FAILED or 0 of 0")
	}
}
