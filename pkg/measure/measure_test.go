package measure

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"testing"

	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// scene returns a small three-phase volume with every feature the
// measurements look at: a grain pack (solid), a nonwetting phase made of a
// few overlapping balls that touch the solid (contact lines, curved
// interfaces, several ganglia) and wetting elsewhere.
func scene(n int, seed uint64) *volume.Labels {
	lab := volume.NewShape[uint8](n, n+3, n-5, 2e-6)
	synth.Fill(lab, 1, func(z, y, x float64) bool { return true })
	synth.Boolean(lab, synth.BooleanIntensity(0.4, 7), 7, 0, seed)
	rng := rand.New(rand.NewPCG(seed, 7))
	for i := 0; i < 6; i++ {
		c := [3]float64{rng.Float64() * float64(n), rng.Float64() * float64(n), rng.Float64() * float64(n-5)}
		r := 5 + 6*rng.Float64()
		// nonwetting fills only pore voxels
		tmp := volume.New[uint8](lab.Box, 1)
		synth.Ball(tmp, c, r, 1)
		for j, v := range tmp.Pix {
			if v == 1 && lab.Pix[j] != 0 {
				lab.Pix[j] = 2
			}
		}
	}
	return lab
}

func relClose(a, b, tol float64) bool {
	if a == b {
		return true
	}
	return math.Abs(a-b) <= tol*math.Max(math.Abs(a), math.Abs(b))
}

func fp(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// TestTilingInvariance checks the central promise of the design
// (architecture.md): whatever the tiling, the step result equals the
// whole-volume result — exactly for counts, Euler characteristics and
// cluster numbers, to rounding (1e-9 relative) for sums.
func TestTilingInvariance(t *testing.T) {
	lab := scene(48, 3)
	opt := Defaults()
	opt.IFT = 0.07275
	whole, err := Volume(lab, opt, 1000, 1)
	if err != nil {
		t.Fatal(err)
	}
	if whole.GangliaCount == 0 || whole.AreaWN == 0 || whole.AngleSamples == 0 {
		t.Fatalf("scene too simple: %d ganglia, A_wn %g, %d angle samples", whole.GangliaCount, whole.AreaWN, whole.AngleSamples)
	}
	for _, tile := range [][3]int{{24, 26, 22}, {16, 16, 16}, {13, 11, 17}, {48, 7, 43}} {
		tl := volume.Tiling{Whole: lab.Box, Tile: tile}
		parts, err := MeasureTiling(lab, tl, opt, 2)
		if err != nil {
			t.Fatal(err)
		}
		got, err := Combine(parts, lab.Box, lab.VoxelSize, opt)
		if err != nil {
			t.Fatal(err)
		}
		// Exact quantities.
		if got.VoxelsSolid != whole.VoxelsSolid || got.VoxelsWetting != whole.VoxelsWetting || got.VoxelsNonwetting != whole.VoxelsNonwetting {
			t.Errorf("tile %v: counts differ", tile)
		}
		if got.EulerNonwetting != whole.EulerNonwetting || got.EulerWetting != whole.EulerWetting || got.EulerSolid != whole.EulerSolid {
			t.Errorf("tile %v: Euler differs: %d/%d/%d vs %d/%d/%d", tile, got.EulerNonwetting, got.EulerWetting, got.EulerSolid,
				whole.EulerNonwetting, whole.EulerWetting, whole.EulerSolid)
		}
		if got.GangliaCount != whole.GangliaCount || got.Percolates != whole.Percolates || fp(got.LargestFraction) != fp(whole.LargestFraction) {
			t.Errorf("tile %v: clusters differ: %d vs %d", tile, got.GangliaCount, whole.GangliaCount)
		}
		if got.AngleSamples != whole.AngleSamples {
			t.Errorf("tile %v: %d angle samples vs %d", tile, got.AngleSamples, whole.AngleSamples)
		}
		// The saturation profile is made of exact counts.
		if a, b := mustJSON(got.SatProfile), mustJSON(whole.SatProfile); a != b || got.SatProfile == nil || fp(got.FrontPosition) != fp(whole.FrontPosition) {
			t.Errorf("tile %v: saturation profile or front differs", tile)
		}
		// Sums.
		for name, pair := range map[string][2]float64{
			"area_wn": {got.AreaWN, whole.AreaWN}, "area_ws": {got.AreaWS, whole.AreaWS}, "area_ns": {got.AreaNS, whole.AreaNS},
			"curvature_mean": {fp(got.CurvMean), fp(whole.CurvMean)}, "curvature_median": {fp(got.CurvMedian), fp(whole.CurvMedian)},
			"pc": {fp(got.Pc), fp(whole.Pc)},
		} {
			if !relClose(pair[0], pair[1], 1e-9) {
				t.Errorf("tile %v: %s = %.12g, whole volume %.12g", tile, name, pair[0], pair[1])
			}
		}
		// Contact-angle fits accumulate neighbourhood sums whose order
		// depends on the tile box; the smoothed fields are float32, so
		// angles agree to float32 rounding rather than float64.
		for name, pair := range map[string][2]float64{
			"angle_mean": {fp(got.AngleMean), fp(whole.AngleMean)}, "angle_std": {fp(got.AngleStd), fp(whole.AngleStd)},
		} {
			if !relClose(pair[0], pair[1], 1e-6) {
				t.Errorf("tile %v: %s = %.12g, whole volume %.12g", tile, name, pair[0], pair[1])
			}
		}
	}
}

// TestJSONKeys checks the contract of `sluice measure --json`.
func TestJSONKeys(t *testing.T) {
	lab := scene(24, 5)
	r, err := Volume(lab, Defaults(), 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := json.Marshal(r)
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"voxels", "voxel_size_m", "porosity", "saturation_wetting", "saturation_nonwetting",
		"area_wn_m2", "area_ws_m2", "area_ns_m2", "specific_area_wn_per_m",
		"curvature_wn_mean_per_m", "curvature_wn_median_per_m", "capillary_pressure_pa",
		"contact_angle_mean_deg", "contact_angle_median_deg", "contact_angle_std_deg",
		"contact_angle_samples", "euler_nonwetting", "euler_wetting", "euler_solid", "ganglia_count",
		"ganglion_largest_fraction", "nonwetting_percolates", "connectivity"} {
		if _, ok := m[k]; !ok {
			t.Errorf("key %q missing", k)
		}
	}
	if m["capillary_pressure_pa"] != nil {
		t.Errorf("capillary pressure without σ: %v", m["capillary_pressure_pa"])
	}
	// Porosity and saturations are exact voxel ratios.
	var pore, in int64
	for _, v := range lab.Pix {
		if v != 0 {
			pore++
		}
		in++
	}
	if got, want := *r.Porosity, float64(pore)/float64(in); got != want {
		t.Errorf("porosity %g, want %g", got, want)
	}
	if s := *r.SatWetting + *r.SatNonwetting; math.Abs(s-1) > 1e-15 {
		t.Errorf("saturations add to %g", s)
	}
}

func mustJSON(v any) string {
	b, err := json.Marshal(v)
	if err != nil {
		panic(err)
	}
	return string(b)
}
