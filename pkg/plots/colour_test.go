package plots

import (
	"image/color"
	"math"
	"testing"
)

func TestPaletteDichromatSeparation(t *testing.T) {
	cs := []color.NRGBA{Palette.Ink, Palette.Amber, Palette.Sky, Palette.Umber, Palette.Slate}
	for _, v := range []struct {
		name string
		d    Dichromacy
		sim  bool
	}{{"normal vision", 0, false}, {"protanopia", Protanopia, true}, {"deuteranopia", Deuteranopia, true}} {
		min := math.Inf(1)
		for i := range cs {
			for j := i + 1; j < len(cs); j++ {
				a, b := color.Color(cs[i]), color.Color(cs[j])
				if v.sim {
					a, b = Simulate(a, v.d), Simulate(b, v.d)
				}
				e := DeltaE(a, b)
				min = math.Min(min, e)
				if e < MinSeparation {
					t.Errorf("%s: colours %d and %d only ΔE %.1f apart", v.name, i, j, e)
				}
			}
		}
		t.Logf("%s: smallest pairwise ΔE*ab = %.1f", v.name, min)
	}
}

func TestSimulationAndLab(t *testing.T) {
	// Full dichromacy keeps greys (rows sum to 1) and loses one dimension
	// (the matrix is singular up to the table's rounding).
	// Source: Machado, Oliveira & Fernandes 2009, severity-1 matrices (from memory).
	for d, m := range machado {
		for i, r := range m {
			if s := r[0] + r[1] + r[2]; math.Abs(s-1) > 2e-6 {
				t.Errorf("dichromacy %d row %d sums to %v", d, i, s)
			}
		}
		det := m[0][0]*(m[1][1]*m[2][2]-m[1][2]*m[2][1]) - m[0][1]*(m[1][0]*m[2][2]-m[1][2]*m[2][0]) + m[0][2]*(m[1][0]*m[2][1]-m[1][1]*m[2][0])
		if math.Abs(det) > 0.02 {
			t.Errorf("dichromacy %d: det %v, want ≈ 0 (projection)", d, det)
		}
		g := color.NRGBA{0x80, 0x80, 0x80, 0xFF}
		if s := Simulate(g, Dichromacy(d)); s != g {
			t.Errorf("grey became %v", s)
		}
	}
	// Red and green, far apart for normal vision, nearly merge for a
	// deuteranope relative to their normal distance.
	red, green := color.NRGBA{0xD0, 0x30, 0x30, 0xFF}, color.NRGBA{0x50, 0x90, 0x30, 0xFF}
	if n, d := DeltaE(red, green), DeltaE(Simulate(red, Deuteranopia), Simulate(green, Deuteranopia)); d > n/2 {
		t.Errorf("red–green ΔE normal %.1f, deuteranopia %.1f: simulation does not merge them", n, d)
	}
	// sRGB red is L* 53.24, a* 80.09, b* 67.20 (D65).
	// Source: Lindbloom's colour calculator values, from memory.
	l, a, b := lab(color.NRGBA{255, 0, 0, 255})
	if math.Abs(l-53.24) > 0.05 || math.Abs(a-80.09) > 0.1 || math.Abs(b-67.20) > 0.1 {
		t.Errorf("Lab(red) = %.2f %.2f %.2f", l, a, b)
	}
	if e := DeltaE(color.White, color.Black); math.Abs(e-100) > 1e-6 {
		t.Errorf("ΔE(white, black) = %v", e)
	}
}
