package series

import (
	"encoding/json"
	"fmt"
	"math"
	"testing"

	"sluice/pkg/measure"
	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// capState is a spherical cap of radius r (m) on a flat solid, angle alpha
// (degrees) through the cap. Source: analytic geometry (science.md,
// spherical cap): V = (πr³/3)(1−cos α)²(2+cos α), cap area 2πr²(1−cos α),
// base area π(r sin α)², and Young–Laplace Pc = 2σ/r for the cap's phase
// inside.
type capState struct{ v, cap, base float64 }

func capAt(r, alpha float64) capState {
	c := math.Cos(alpha * math.Pi / 180)
	s := math.Sin(alpha * math.Pi / 180)
	return capState{v: math.Pi * r * r * r / 3 * (1 - c) * (1 - c) * (2 + c), cap: 2 * math.Pi * r * r * (1 - c), base: math.Pi * r * r * s * s}
}

// analyticRow is the row of a nonwetting cap of radius r (voxels of h m)
// and angle 180° − thetaW through the cap: nonwetting volume as a voxel
// count, A_wn the cap, A_ns the base, Pc = 2σ/r for the connected phase.
func analyticRow(step string, time, r, thetaW, h, sigma float64, pcSE *float64) Row {
	c := capAt(r*h, 180-thetaW)
	n := int64(math.Round(c.v / (h * h * h)))
	pc := 2 * sigma / (r * h)
	raw, _ := json.Marshal(n)
	return Row{Step: step, Time: time, VoxelSize: &h, AreaWN: &c.cap, AreaNS: &c.base, PcConnected: &pc,
		PcConnectedSE: pcSE, IFT: &sigma, Extra: map[string]json.RawMessage{"voxels_nonwetting": raw}}
}

// TestThermodynamicAngleAnalytic: for a nonwetting cap growing at a fixed
// contact angle on a plane, the energy balance returns that angle.
// Source: analytic geometry of the cap and Young–Laplace (capAt); for an
// infinitesimal step the relation is exact (our own algebra: with
// c = cos α, (2/R·dV − dA_cap)/dA_base = −c, and θ_w = 180° − α). The
// finite step takes the mean of the two Pc (trapezoidal rule for ∫Pc dV):
// measured at a 1 % growth in radius, |θ_t − θ_w| = 0.060° (30°), 0.010°
// (60°), 0.004° (90°), 0.002° (120°); tolerance 0.12°. At 20 % growth
// the same rule gives 88.73° for 90° and 56.63° for 60°, and at 30° no
// angle (cos θ_t = 1.042): logged, the reason steps must be small.
func TestThermodynamicAngleAnalytic(t *testing.T) {
	const h, sigma, r1 = 1e-6, 0.05, 1000.0
	for _, th := range []float64{30, 60, 90, 120} {
		se := 20.0 // Pa
		rows := []Row{analyticRow("s1", 0, r1, th, h, sigma, &se), analyticRow("s2", 60, r1*1.01, th, h, sigma, &se)}
		Sort(rows)
		if rows[0].AngleThermo != nil || rows[0].AngleThermoCos != nil {
			t.Errorf("θ %v: first row has a thermodynamic angle", th)
		}
		got := F(rows[1].AngleThermo)
		t.Logf("θ_w %v°: θ_t %.4f° (cos %.6f) ± %.3f° SE", th, got, F(rows[1].AngleThermoCos), F(rows[1].AngleThermoSE))
		if !(math.Abs(got-th) <= 0.12) {
			t.Errorf("θ_w %v°: thermodynamic angle %v°, want within 0.12°", th, got)
		}
		// SE by hand: SE(Pc mean) = ½√(20² + 20²) Pa; SE(cos) =
		// |ΔV|/(σ|ΔA_ns|)·SE(Pc); SE(θ) = SE(cos)/sin θ.
		a, b := capAt(r1*h, 180-th), capAt(r1*1.01*h, 180-th)
		seCos := math.Abs(b.v-a.v) / (sigma * math.Abs(b.base-a.base)) * math.Hypot(se, se) / 2
		want := seCos / math.Sin(got*math.Pi/180) * 180 / math.Pi
		if g := F(rows[1].AngleThermoSE); !(math.Abs(g-want) <= 1e-6*want) {
			t.Errorf("θ_w %v°: SE %v°, want %v°", th, g, want)
		}
		// The order of the steps does not matter: receding gives the same.
		back := []Row{analyticRow("s1", 0, r1*1.01, th, h, sigma, nil), analyticRow("s2", 60, r1, th, h, sigma, nil)}
		Sort(back)
		if g := F(back[1].AngleThermo); !(math.Abs(g-got) < 1e-6) || back[1].AngleThermoSE != nil {
			t.Errorf("θ_w %v°: receding cap gives %v° (SE %v), advancing %v°", th, g, back[1].AngleThermoSE, got)
		}
		big := []Row{analyticRow("s1", 0, r1, th, h, sigma, nil), analyticRow("s2", 60, r1*1.2, th, h, sigma, nil)}
		Sort(big)
		t.Logf("θ_w %v°, 20 %% growth: θ_t %v° (cos %.4f)", th, F(big[1].AngleThermo), F(big[1].AngleThermoCos))
	}
	// Missing terms give no angle: no connected Pc, no σ, different σ,
	// no nonwetting voxel count, no change of A_ns.
	for name, spoil := range map[string]func(r *Row){
		"no connected Pc": func(r *Row) { r.PcConnected = nil },
		"no σ":            func(r *Row) { r.IFT = nil },
		"other σ":         func(r *Row) { s := 0.07; r.IFT = &s },
		"no voxel count":  func(r *Row) { delete(r.Extra, "voxels_nonwetting") },
		"same A_ns":       func(r *Row) { v := 0.0; r.AreaNS = &v },
		// Below MinAreaChange: A_ns 0.5 % apart (the step grows it by 2 %).
		"A_ns change 0.5 %": func(r *Row) { v := *r.AreaNS * 1.015; r.AreaNS = &v },
	} {
		rows := []Row{analyticRow("s1", 0, r1, 60, h, sigma, nil), analyticRow("s2", 60, r1*1.01, 60, h, sigma, nil)}
		spoil(&rows[0])
		if name == "same A_ns" {
			spoil(&rows[1])
		}
		Sort(rows)
		if rows[1].AngleThermo != nil || rows[1].AngleThermoCos != nil {
			t.Errorf("%s: thermodynamic angle %v", name, F(rows[1].AngleThermo))
		}
	}
	// |cos| > 1 keeps the cosine and gives no angle.
	rows := []Row{analyticRow("s1", 0, r1, 30, h, sigma, nil), analyticRow("s2", 60, r1*1.2, 30, h, sigma, nil)}
	Sort(rows)
	if rows[1].AngleThermo != nil || !(F(rows[1].AngleThermoCos) > 1) {
		t.Errorf("cos > 1: angle %v, cos %v", F(rows[1].AngleThermo), F(rows[1].AngleThermoCos))
	}
}

// drawDrop renders a wetting drop of radius r (voxels) and angle thetaW
// through the drop on a solid wall, surrounded by nonwetting fluid that
// reaches the top face of the scan (the outlet along z): the nonwetting
// phase is connected and its interface is the drop's cap, so the scene
// checks the connected Pc the relation uses. Box n×n in y, x, tall
// enough for the larger drop.
func drawDrop(r, thetaW float64, n, nz int, h float64) *volume.Labels {
	codes := phase.Default()
	c := synth.CapScene{Wall: 6.3, R: r, DropAngle: thetaW, Centre: [2]float64{float64(n)/2 + 0.21, float64(n)/2 - 0.37}}
	lab := volume.NewShape[uint8](nz, n, n, 0)
	c.Draw(lab, codes.Solid, codes.Wetting, codes.Nonwetting)
	lab.VoxelSize = h
	return lab
}

// TestThermodynamicAngleRendered: two label volumes of a wetting drop
// growing at a fixed angle on a wall (radius 20 → 24 voxels), measured by
// sluice (measure.Volume: voxel counts, Crofton areas, connected Pc from
// the level-set curvature), give through the series the thermodynamic
// angle the analytic values of the same two states give. Source: the
// analytic cap (capAt; the drop is wetting, so ΔV_n = −ΔV_drop, ΔA_ns =
// −Δ(base), Pc = −2σ/R) and the relation of ThermodynamicAngles. The
// analytic values of this 20 % step already differ from θ_w by the
// finite-step error of the mean Pc (60.61°, 91.27°, 123.37° for θ_w 60°,
// 90°, 120°); the check is on the measurement, against the analytic value
// of the same step. Measured 2026-12-05 (one placement each): −2.58°,
// −1.30°, +1.07° (against θ_w itself 58.03°, 89.97°, 124.44°; the
// measured A_wn is 2–5 % low, the connected Pc 0.7–1.5 % low); tolerances
// twice those.
func TestThermodynamicAngleRendered(t *testing.T) {
	if testing.Short() {
		t.Skip("measures six label volumes")
	}
	const h, sigma, r1, r2 = 2e-6, 0.05, 20.0, 24.0
	n, nz := int(2*r2)+20, 66
	for _, c := range []struct{ th, tol float64 }{{60, 5.2}, {90, 2.6}, {120, 2.2}} {
		var rows []Row
		for i, r := range []float64{r1, r2} {
			opt := measure.Defaults()
			opt.IFT = sigma
			opt.SkipContact = true // the geometric angle takes no part
			res, err := measure.Volume(drawDrop(r, c.th, n, nz, h), opt, 0, 0)
			if err != nil {
				t.Fatal(err)
			}
			b, err := json.Marshal(res)
			if err != nil {
				t.Fatal(err)
			}
			row, err := FromResult(fmt.Sprintf("s%d", i), float64(60*i), b)
			if err != nil {
				t.Fatal(err)
			}
			a := capAt(r*h, c.th)
			t.Logf("θ_w %v° R %v: Pc connected %.1f Pa (analytic %.1f), A_wn %.4g m² (%.4g), A_ns %.4g m², V_drop %.4g m³ (%.4g)",
				c.th, r, F(row.PcConnected), -2*sigma/(r*h), F(row.AreaWN), a.cap, F(row.AreaNS), float64(res.VoxelsWetting)*h*h*h, a.v)
			rows = append(rows, row)
		}
		Sort(rows)
		a, b := capAt(r1*h, c.th), capAt(r2*h, c.th)
		pc := (-2*sigma/(r1*h) - 2*sigma/(r2*h)) / 2
		cosA := (pc*-(b.v-a.v)/sigma - (b.cap - a.cap)) / -(b.base - a.base)
		want := math.Acos(cosA) * 180 / math.Pi
		got := F(rows[1].AngleThermo)
		t.Logf("θ_w %v°: measured θ_t %.2f° ± %.2f° SE (cos %.4f), analytic same step %.2f° (cos %.4f): error %+.2f°",
			c.th, got, F(rows[1].AngleThermoSE), F(rows[1].AngleThermoCos), want, cosA, got-want)
		if !(math.Abs(got-want) <= c.tol) {
			t.Errorf("θ_w %v°: measured thermodynamic angle %.2f°, analytic %.2f°, tolerance %.1f°", c.th, got, want, c.tol)
		}
	}
}

// drawTube renders a capillary tube of radius r (voxels) along z in solid,
// nonwetting fluid from the inlet face z = 0 up to a spherical meniscus of
// radius r/|cos θ_w| whose apex is at z = apex, wetting fluid beyond it:
// the meniscus meets the wall at θ_w through the wetting phase (science.md,
// capillary tube). Box n×n in y, x and nz along z.
func drawTube(r, thetaW, apex float64, n, nz int, h float64) *volume.Labels {
	codes := phase.Default()
	c := math.Cos(thetaW * math.Pi / 180)
	cy, cx := float64(n)/2+0.23, float64(n)/2-0.31
	lab := volume.NewShape[uint8](nz, n, n, h)
	synth.Fill(lab, codes.Solid, func(z, y, x float64) bool { return true })
	synth.Fill(lab, codes.Wetting, func(z, y, x float64) bool { return math.Hypot(y-cy, x-cx) < r })
	synth.Fill(lab, codes.Nonwetting, func(z, y, x float64) bool {
		q := math.Hypot(y-cy, x-cx)
		if q >= r {
			return false
		}
		front := apex
		if math.Abs(c) > 1e-12 {
			rm := r / math.Abs(c)
			// water-wet (c > 0): the nonwetting phase bulges ahead, the
			// wall line lags the apex; oil-wet: the reverse.
			front = apex - math.Copysign(rm-math.Sqrt(rm*rm-q*q), c)
		}
		return z <= front
	})
	return lab
}

// TestThermodynamicAngleTube: a meniscus moving along a capillary tube at a
// fixed angle changes neither its shape nor A_wn, so the energy balance is
// cos θ_t = Pc·ΔV_n / (σ·ΔA_ns) with ΔV_n = πR²Δz, ΔA_ns = 2πRΔz and the
// Jurin/Young–Laplace Pc = 2σ cos θ_w / R (science.md, capillary tube):
// exact for any step, as the analytic rows show (θ_w 30°, 60°, 90°, 120°
// within 0.01°, the rounding of the voxel count). Rendered tubes of radius 14 voxels whose meniscus moves by
// 8 voxels, measured by sluice, give the angles within the errors given at
// the tolerances (one placement).
func TestThermodynamicAngleTube(t *testing.T) {
	const h, sigma, r = 2e-6, 0.05, 14.0
	for _, c := range []struct{ th, tol float64 }{{30, tolTube30}, {60, tolTube60}, {90, tolTube90}, {120, tolTube120}} {
		// Analytic rows: a nonwetting column of length L behind the
		// meniscus (its cap volume and area are constant and cancel).
		var rows []Row
		for i, L := range []float64{300, 340} {
			pc := 2 * sigma * math.Cos(c.th*math.Pi/180) / (r * h)
			v := math.Pi * r * r * L // voxels
			ans := 2 * math.Pi * r * L * h * h
			awn := 7e-10
			n := int64(math.Round(v))
			raw, _ := json.Marshal(n)
			hh, s := h, sigma
			rows = append(rows, Row{Step: fmt.Sprintf("a%d", i), Time: float64(i), VoxelSize: &hh, AreaWN: &awn, AreaNS: &ans,
				PcConnected: &pc, IFT: &s, Extra: map[string]json.RawMessage{"voxels_nonwetting": raw}})
		}
		Sort(rows)
		// The voxel count is rounded: |ΔV| error ≤ 1 voxel of 24630.
		if g := F(rows[1].AngleThermo); !(math.Abs(g-c.th) < 0.01) {
			t.Errorf("analytic tube θ_w %v°: %v°", c.th, g)
		}
		rows = nil
		for i, apex := range []float64{30, 38} {
			opt := measure.Defaults()
			opt.IFT = sigma
			opt.SkipContact = true
			res, err := measure.Volume(drawTube(r, c.th, apex, 40, 64, h), opt, 0, 0)
			if err != nil {
				t.Fatal(err)
			}
			b, _ := json.Marshal(res)
			row, err := FromResult(fmt.Sprintf("s%d", i), float64(60*i), b)
			if err != nil {
				t.Fatal(err)
			}
			rows = append(rows, row)
		}
		Sort(rows)
		got := F(rows[1].AngleThermo)
		pc := 2 * sigma * math.Cos(c.th*math.Pi/180) / (r * h)
		t.Logf("tube θ_w %v°: θ_t %.2f° (cos %.4f; error %+.2f°); Pc connected %.1f, %.1f Pa (Jurin %.1f); ΔA_ns %.4g m² (2πRΔz %.4g), ΔA_wn %.3g m²",
			c.th, got, F(rows[1].AngleThermoCos), got-c.th, F(rows[0].PcConnected), F(rows[1].PcConnected), pc,
			F(rows[1].AreaNS)-F(rows[0].AreaNS), 2*math.Pi*r*8*h*h, F(rows[1].AreaWN)-F(rows[0].AreaWN))
		if !(math.Abs(got-c.th) <= c.tol) {
			t.Errorf("tube θ_w %v°: thermodynamic angle %.2f°, tolerance %.1f°", c.th, got, c.tol)
		}
	}
}

// Tolerances of TestThermodynamicAngleTube, twice the errors measured on
// 2026-12-05: −1.25° (30°), −1.31° (60°), 0.00° (90°: flat meniscus, Pc 0
// exactly), +1.38° (120°); the connected Pc reads −1.2 %, +1.4 %, +1.6 %
// off Jurin's, ΔA_ns −2.1 % off 2πRΔz, ΔA_wn 0.
const tolTube30, tolTube60, tolTube90, tolTube120 = 2.5, 2.6, 0.05, 2.8
