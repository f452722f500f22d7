package plots

import (
	"image/color"
	"math"
)

// Palette is sluice's line palette, chosen for this project:
//
//	Ink      #1C4A8C  dark blue         (primary series)
//	Amber    #DB8E1A  orange-yellow     (second series)
//	Sky      #78C0EC  light blue        (third series)
//	Umber    #6A3D0C  dark brown        (fourth series)
//	Slate    #8A8A8A  neutral grey      (reference lines)
//
// Why they stay apart for protanopes and deuteranopes: these dichromats
// lose the red–green opponent axis but keep the blue–yellow axis and
// lightness. The five colours sit at distinct places on the remaining two
// axes: Ink is dark and blue, Sky light and blue, Amber light and yellow,
// Umber dark and yellow, Slate mid-lightness and neutral. No two rely on a
// red–green difference. TestPaletteDichromatSeparation checks this
// numerically: after simulating protanopia and deuteranopia (Machado,
// Oliveira & Fernandes 2009) every pair stays at least MinSeparation apart
// in CIELAB (ΔE*ab, CIE 1976). Series are also told apart by dash pattern
// and glyph shape, so nothing relies on colour alone.
var Palette = struct {
	Ink, Amber, Sky, Umber, Slate color.NRGBA
}{
	Ink:   color.NRGBA{0x1C, 0x4A, 0x8C, 0xFF},
	Amber: color.NRGBA{0xDB, 0x8E, 0x1A, 0xFF},
	Sky:   color.NRGBA{0x78, 0xC0, 0xEC, 0xFF},
	Umber: color.NRGBA{0x6A, 0x3D, 0x0C, 0xFF},
	Slate: color.NRGBA{0x8A, 0x8A, 0x8A, 0xFF},
}

// MinSeparation is the smallest CIELAB distance (ΔE*ab) between any two
// palette colours that the palette is designed to keep for normal vision,
// protanopia and deuteranopia. ΔE ≈ 2.3 is a just-noticeable difference
// (Sharma 2003, Digital Color Imaging Handbook); 30 makes lines easy to
// tell apart at a glance (common practice, not a standard).
const MinSeparation = 30

// Dichromacy names a colour-vision deficiency to simulate: the two
// red–green dichromacies, which together affect about 2 % of men (common
// practice figure).
type Dichromacy int

// The simulated deficiencies (severity 1, full dichromacy).
const (
	Protanopia Dichromacy = iota
	Deuteranopia
)

// machado holds the linear-RGB simulation matrices of Machado, Oliveira &
// Fernandes 2009 (IEEE TVCG 15(6):1291–1298, severity 1.0). Values from
// memory of the paper's table; each row sums to 1, so greys map to
// themselves (checked in the tests).
var machado = [2][3][3]float64{
	Protanopia: {
		{0.152286, 1.052583, -0.204868},
		{0.114503, 0.786281, 0.099216},
		{-0.003882, -0.048116, 1.051998},
	},
	Deuteranopia: {
		{0.367322, 0.860646, -0.227968},
		{0.280085, 0.672501, 0.047413},
		{-0.011820, 0.042940, 0.968881},
	},
}

// Simulate returns how c appears with dichromacy d: c is linearised (sRGB
// transfer function, IEC 61966-2-1), multiplied by the Machado matrix,
// clipped and re-encoded.
func Simulate(c color.Color, d Dichromacy) color.NRGBA {
	n := color.NRGBAModel.Convert(c).(color.NRGBA)
	lin := [3]float64{srgbToLinear(n.R), srgbToLinear(n.G), srgbToLinear(n.B)}
	m := machado[d]
	var out [3]uint8
	for i := 0; i < 3; i++ {
		v := m[i][0]*lin[0] + m[i][1]*lin[1] + m[i][2]*lin[2]
		out[i] = linearToSRGB(v)
	}
	return color.NRGBA{out[0], out[1], out[2], n.A}
}

// DeltaE returns the CIE 1976 colour difference ΔE*ab between a and b
// (sRGB, D65 white; CIE 15:2004 formulas).
func DeltaE(a, b color.Color) float64 {
	la, aa, ba := lab(a)
	lb, ab, bb := lab(b)
	return math.Sqrt((la-lb)*(la-lb) + (aa-ab)*(aa-ab) + (ba-bb)*(ba-bb))
}

func srgbToLinear(v uint8) float64 {
	c := float64(v) / 255
	if c <= 0.04045 {
		return c / 12.92
	}
	return math.Pow((c+0.055)/1.055, 2.4)
}

func linearToSRGB(v float64) uint8 {
	v = math.Max(0, math.Min(1, v))
	var c float64
	if v <= 0.0031308 {
		c = 12.92 * v
	} else {
		c = 1.055*math.Pow(v, 1/2.4) - 0.055
	}
	return uint8(math.Round(255 * c))
}

func lab(c color.Color) (l, a, b float64) {
	n := color.NRGBAModel.Convert(c).(color.NRGBA)
	r, g, bl := srgbToLinear(n.R), srgbToLinear(n.G), srgbToLinear(n.B)
	// sRGB (D65) to XYZ, IEC 61966-2-1.
	x := 0.4124*r + 0.3576*g + 0.1805*bl
	y := 0.2126*r + 0.7152*g + 0.0722*bl
	z := 0.0193*r + 0.1192*g + 0.9505*bl
	const xn, yn, zn = 0.95047, 1.0, 1.08883
	f := func(t float64) float64 {
		const d = 6.0 / 29
		if t > d*d*d {
			return math.Cbrt(t)
		}
		return t/(3*d*d) + 4.0/29
	}
	fx, fy, fz := f(x/xn), f(y/yn), f(z/zn)
	return 116*fy - 16, 500 * (fx - fy), 200 * (fy - fz)
}
