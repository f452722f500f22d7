package series

import (
	"encoding/json"
	"math"
)

// ThermodynamicAngles sets each row's thermodynamic contact angle from the
// row before it (rows sorted by time; Sort calls it), the contact angle that
// makes the energy balance of the change between two equilibrium steps hold
// (Blunt, Lin, Akai & Bijeljic 2019, J. Colloid Interface Sci. 552:59):
//
//	cos θ_t = (Pc·ΔV_n/σ − ΔA_wn) / ΔA_ns
//
// θ_t is measured through the wetting phase, like contact_angle_*_deg.
// The relation as derived here: the work Pc·ΔV_n done in displacing
// wetting by nonwetting fluid at capillary pressure Pc = p_n − p_w goes
// into the interfaces, σ·ΔA_wn for the w–n interface and
// (σ_ns − σ_ws)·ΔA_ns for nonwetting fluid replacing wetting fluid on the
// solid (A_ws + A_ns is the fixed solid surface); Young's equation
// σ_ns − σ_ws = σ·cos θ_w turns the second term into σ·cos θ·ΔA_ns.
// Swapping the two steps changes the sign of numerator and denominator
// alike, so the order of the rows does not matter. Checked on a spherical
// cap growing at a fixed angle: the relation returns the cap's angle
// exactly in the limit of small steps (wettability_test.go).
//
// The terms, each a difference of the two steps' results:
//
//	ΔV_n   voxels_nonwetting × voxel_size_m³ (exact voxel counts)
//	ΔA_wn  area_wn_m2, ΔA_ns area_ns_m2 (13-direction Crofton, pkg/morph)
//	Pc     the mean of the two steps' capillary_pressure_connected_pa
//	σ      ift_n_per_m (both steps must have the same)
//
// Pc is that of the connected nonwetting phase, the interfaces of the
// ganglia touching the inlet or the outlet face: the energy balance is
// that of the fluid the pumps push, which is at the pressure the
// boundary imposes, while trapped ganglia keep the curvature they had
// when they were cut off (Armstrong, Porter & Wildenschild 2012, Adv.
// Water Resour. 46:55). Without a connected Pc in both steps there is
// no angle. Taking the mean of the two Pc is the trapezoidal rule for
// ∫Pc dV_n over the step; on a cap growing by 20 % in radius it
// overestimates that integral by 0.3 % (wettability_test.go).
//
// The standard error carries only the capillary pressure's: with s_a,
// s_b the two steps' capillary_pressure_connected_se_pa, the mean's SE
// is ½√(s_a² + s_b²) and
//
//	SE(cos θ_t) = |ΔV_n| / (σ·|ΔA_ns|) · SE(Pc),  SE(θ_t) = SE(cos θ_t) / sin θ_t
//
// (first-order propagation; in degrees). Area errors are not in it.
//
// contact_angle_thermodynamic_cos is null for the first row, when a term is
// missing in either row, or when ΔA_ns is less than MinAreaChange of A_ns; contact_angle_thermodynamic_deg
// is null besides when |cos θ_t| > 1 (no angle satisfies the balance: the
// steps were not at equilibrium, or ΔA_ns is small against the errors of
// the areas), and its SE is null when there is no SE of Pc in either row.
// Values stored earlier are always replaced.
func ThermodynamicAngles(rows []Row) {
	for i := range rows {
		b := &rows[i]
		b.AngleThermo, b.AngleThermoSE, b.AngleThermoCos = nil, nil, nil
		if i == 0 {
			continue
		}
		a := &rows[i-1]
		t, ok := thermodynamicAngle(a, b)
		if !ok {
			continue
		}
		b.AngleThermoCos = fin(t.cos)
		if math.Abs(t.cos) <= 1 {
			b.AngleThermo = fin(t.deg)
			b.AngleThermoSE = fin(t.seDeg)
		}
	}
}

// MinAreaChange is the least change of A_ns between two steps, as a
// fraction of the larger A_ns, for a thermodynamic angle: below it the
// change is segmentation noise and the ratio means nothing. Between steps
// of the demo campaign at rest (no displacement) A_ns changed by at most
// 0.36 % and A_wn by 0.40 %, and the ratio came out anywhere (cos θ_t from
// −8.9 to 6.4, and once 0.73 with a standard error of 0.9°, which carries
// the Pc error only); steps that displaced fluid changed A_ns by 8–76 %.
// 1 % is about 2.5 times the noise seen.
const MinAreaChange = 0.01

// thermo is the thermodynamic angle between two steps.
type thermo struct {
	cos, deg, seDeg float64 // seDeg NaN when unknown
}

func thermodynamicAngle(a, b *Row) (thermo, bool) {
	va, oka := a.NonwettingVolume()
	vb, okb := b.NonwettingVolume()
	if !oka || !okb || a.AreaWN == nil || b.AreaWN == nil || a.AreaNS == nil || b.AreaNS == nil ||
		a.PcConnected == nil || b.PcConnected == nil || a.IFT == nil || b.IFT == nil {
		return thermo{}, false
	}
	sigma := *b.IFT
	if !(sigma > 0) || math.Abs(*a.IFT-sigma) > 1e-9*sigma {
		return thermo{}, false
	}
	dV := vb - va
	dWN := *b.AreaWN - *a.AreaWN
	dNS := *b.AreaNS - *a.AreaNS
	if !(math.Abs(dNS) >= MinAreaChange*math.Max(math.Abs(*a.AreaNS), math.Abs(*b.AreaNS))) {
		return thermo{}, false
	}
	pc := (*a.PcConnected + *b.PcConnected) / 2
	t := thermo{cos: (pc*dV/sigma - dWN) / dNS, seDeg: math.NaN()}
	if math.IsNaN(t.cos) || math.IsInf(t.cos, 0) {
		return thermo{}, false
	}
	t.deg = math.Acos(math.Max(-1, math.Min(1, t.cos))) * 180 / math.Pi
	if a.PcConnectedSE != nil && b.PcConnectedSE != nil {
		se := math.Hypot(*a.PcConnectedSE, *b.PcConnectedSE) / 2
		seCos := math.Abs(dV) / (sigma * math.Abs(dNS)) * se
		if s := math.Sqrt(1 - t.cos*t.cos); s > 0 {
			t.seDeg = seCos / s * 180 / math.Pi
		}
	}
	return t, true
}

// NonwettingVolume returns the row's nonwetting volume (m³): its
// voxels_nonwetting (kept in Extra) times the voxel volume. ok is false
// without either.
func (r *Row) NonwettingVolume() (v float64, ok bool) {
	raw, has := r.Extra["voxels_nonwetting"]
	if !has || r.VoxelSize == nil {
		return 0, false
	}
	var n int64
	if json.Unmarshal(raw, &n) != nil || n < 0 {
		return 0, false
	}
	h := *r.VoxelSize
	return float64(n) * h * h * h, true
}

func fin(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}
