package segment

import (
	"fmt"
	"math"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/measure"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// capScene is a sessile nonwetting cap on a flat solid plate: a sphere of
// radius r (voxels) cut by the plate plane z = 20.3, its centre placed so
// that the angle through the wetting phase at the contact line is theta
// (degrees), in a 96³ box of brine, rendered by pkg/forward with its
// defaults (μ_n 14000, μ_w 24000, μ_s 40000, PSF σ 0.7 voxel, CNR 5,
// uint16). It returns the grey scan and the labels it was rendered from.
func capScene(theta float64) (*volume.Volume[uint16], *volume.Labels) {
	const n, r, zp = 96, 28.0, 20.3
	c := phase.Default()
	lab := volume.NewShape[uint8](n, n, n, 4e-6)
	zc := zp + r*math.Cos(theta*math.Pi/180)
	ctr := float64(n)/2 + 0.27
	for z := 0; z < n; z++ {
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				fz, fy, fx := float64(z), float64(y), float64(x)
				v := c.Wetting
				if fz < zp {
					v = c.Solid
				} else if (fz-zc)*(fz-zc)+(fy-ctr)*(fy-ctr)+(fx-ctr)*(fx-ctr) < r*r {
					v = c.Nonwetting
				}
				lab.Set(z, y, x, v)
			}
		}
	}
	img, err := forward.Render(lab, forward.Default())
	if err != nil {
		panic(err)
	}
	return forward.Uint16(img), lab
}

// capAngle returns the mean contact angle pkg/measure finds on lab and the
// number of its samples (0 and 0 when there are none).
func capAngle(t *testing.T, lab *volume.Labels) (float64, int64) {
	t.Helper()
	o := measure.Defaults()
	o.SkipCurvature = true
	r, err := measure.Volume(lab, o, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	if r.AngleMean == nil {
		return 0, 0
	}
	return *r.AngleMean, r.AngleSamples
}

// TestContactAngleOnGreyCaps segments forward-model scans of sessile caps
// of 60°, 90° and 120° with the default options (3-class Otsu, watershed
// assignment) and each filter, and compares the mean contact angle with
// that of the labels the scan was rendered from (the same estimator,
// pkg/contact, on the truth: 60.0°, 91.1°, 121.3°; the estimator itself is
// checked against analytic caps in pkg/contact). Before the watershed the
// threshold assignment put a false wetting skin between every nonwetting
// voxel and the plate (the blurred edge passes through the brine grey), so
// there was no contact line: 0 samples on the 60° cap (checked below), and
// 10° and 21° from 11 and 128 samples on the 90° and 120° caps.
//
// The grey angles are still biased low, more so for larger angles and
// with the median or the Gaussian; this misses issue 15's 3° target. The
// bands are twice the errors measured 2026-12-05 (grey mean − label mean,
// floor 3°); on top, each filter must keep the order 60° < 90° < 120°. Why
// the bias: the estimator moves by 12–18° when the first fluid layer on the
// plate loses one voxel at the contact line (measured on the truth labels),
// and that layer is where the PSF mixes all three phases (see the package
// doc, "Contact lines").
func TestContactAngleOnGreyCaps(t *testing.T) {
	// measured[filter][i]: grey mean − label mean, caps 60°, 90°, 120°.
	measured := map[string][3]float64{
		"median":   {-10.3, -23.9, -29.0},
		"gaussian": {-18.2, -40.7, -55.8},
		"nlm":      {-2.7, -12.9, -26.6},
	}
	rows := ""
	prev := map[string]float64{}
	for i, theta := range []float64{60, 90, 120} {
		grey, truth := capScene(theta)
		want, nw := capAngle(t, truth)
		if nw == 0 {
			t.Fatalf("%g° cap: no samples on the truth labels", theta)
		}
		for _, method := range []string{"median", "gaussian", "nlm", "threshold"} {
			p := Defaults()
			p.Filter.NLM.Sigma = forward.Default().NoiseSigma()
			if method == "threshold" {
				p.Assign = AssignThreshold
			} else {
				p.Filter.Method = method
			}
			lab, _ := pipeline(t, grey, p, nil)
			got, n := capAngle(t, lab)
			rows += fmt.Sprintf("%4g° cap  %-9s  %6.1f° (%d samples), labels %.1f° (%d): error %+.1f°\n", theta, method, got, n, want, nw, got-want)
			if method == "threshold" {
				// The defect the watershed removes: no contact line on the
				// 60° cap (a false wetting skin covers the plate).
				if theta == 60 && n != 0 {
					t.Errorf("60° cap, threshold assignment: %d samples, want 0 (the false skin)", n)
				}
				continue
			}
			if n == 0 {
				t.Errorf("%g° cap, %s: no contact-angle samples", theta, method)
				continue
			}
			if tol := math.Max(2*math.Abs(measured[method][i]), 3); math.Abs(got-want) > tol {
				t.Errorf("%g° cap, %s: %.1f° vs %.1f° on the labels (error %+.1f°, tolerance %.1f°)", theta, method, got, want, got-want, tol)
			}
			if a, ok := prev[method]; ok && !(got > a) {
				t.Errorf("%g° cap, %s: %.1f°, not above the smaller cap's %.1f°", theta, method, got, a)
			}
			prev[method] = got
		}
	}
	t.Logf("contact angle on grey caps (default options but the filter):\n%s", rows)
}

// TestContactAngleOnGreyCapsWallGap: the same grey caps, default
// segmentation (median, watershed), measured with contact.Options.WallGap 3
// (measure.contact_wall_gap), against the same estimator on the truth labels.
// The bias above comes from the first voxel layers on the plate, where the
// PSF mixes all three phases; fitting the interface from three voxels out
// and carrying it to the wall removes most of it. Measured 2026-12-05 with
// the gap (grey − labels): 60° −0.9°, 90° −0.1°, 120° −3.5° (without it
// −10.3°, −23.9°, −29.0°); the labels read 57.8°, 90.8°, 121.3° with the gap
// (analytic 60°, 90°, 120°: the estimator with the gap is checked on
// analytic caps in pkg/contact TestWallGapCaps). Band max(2×|measured|, 3°);
// with the gap 0 all three caps fall outside it (seen 2026-12-05).
func TestContactAngleOnGreyCapsWallGap(t *testing.T) {
	measured := [3]float64{-0.9, -0.1, -3.5}
	angle := func(lab *volume.Labels) (float64, int64) {
		o := measure.Defaults()
		o.SkipCurvature = true
		o.Contact.WallGap = 3
		r, err := measure.Volume(lab, o, 0, 0)
		if err != nil {
			t.Fatal(err)
		}
		if r.AngleMean == nil {
			return 0, 0
		}
		return *r.AngleMean, r.AngleSamples
	}
	for i, theta := range []float64{60, 90, 120} {
		grey, truth := capScene(theta)
		want, nw := angle(truth)
		lab, _ := pipeline(t, grey, Defaults(), nil)
		got, n := angle(lab)
		t.Logf("%g° cap, wall gap 3: grey %.1f° (%d samples), labels %.1f° (%d): error %+.1f°", theta, got, n, want, nw, got-want)
		if n == 0 || nw == 0 {
			t.Errorf("%g° cap: no samples (grey %d, labels %d)", theta, n, nw)
			continue
		}
		if tol := math.Max(2*math.Abs(measured[i]), 3); math.Abs(got-want) > tol {
			t.Errorf("%g° cap, wall gap 3: %.1f° vs %.1f° on the labels (error %+.1f°, tolerance %.1f°)", theta, got, want, got-want, tol)
		}
	}
}

// renderCap renders a cap's labels with the given phase levels and noise σ
// (forward defaults otherwise: PSF σ 0.7 voxel), as uint16 grey or as
// float32 values.
func renderCap(t testing.TB, lab *volume.Labels, n, w, s, sigma float64, float bool) volume.Any {
	t.Helper()
	fp := forward.Default()
	fp.Nonwetting, fp.Wetting, fp.Solid = n, w, s
	fp.CNR = math.Abs(w-n) / sigma
	img, err := forward.Render(lab, fp)
	if err != nil {
		t.Fatal(err)
	}
	if float {
		return img
	}
	return forward.Uint16(img)
}

// floatPipeline is pipeline for any dtype: float32 grey first takes its
// histogram range from the filtered grey (MeasureExtent, Extent.Range).
func floatPipeline(t testing.TB, grey volume.Any, p Params) *volume.Labels {
	t.Helper()
	if grey.DType() == volume.Float32 {
		e, err := MeasureExtent(grey, grey.Bounds(), p, nil)
		if err != nil {
			t.Fatal(err)
		}
		p.Range = e.Range(p.Bins)
	}
	lab, _ := pipeline(t, grey, p, nil)
	return lab
}

// TestContactAngleFloatAndDoped: the sessile caps of 60°, 90° and 120°
// rendered as float32 attenuation (gas 0.2, brine 0.9, rock 2.0 cm⁻¹,
// σ 0.14: CNR 5, the gas noise reaching below zero) and with doped brine
// (order nsw, same adjacent contrasts and noise, uint16 and float32),
// segmented with the defaults but the order, and measured as in
// TestContactAngleOnGreyCapsWallGap (measure.contact_wall_gap 3), against
// the same estimator on the labels the scans were rendered from (57.7°,
// 90.6°, 120.3° with the gap).
//
// Measured 2026-12-05, grey − labels with the gap, caps 60°/90°/120°:
// uint16 nws −0.9/+0.8/−3.4°, float32 nws −0.9/+1.6/−3.6°, uint16 nsw
// +2.7/+0.8/−0.4°, float32 nsw +2.5/+1.0/−0.2°. Without the gap the doped
// scans read high (+10.5/+5.8/+8.1° uint16) where the undoped read low
// (−10.3/−24.2/−29.6°). Bands: those of the uint16 test with the gap,
// max(2 × its measured error, 3°) = 3°, 3°, 7°, for every kind; and
// float32 within 3° of uint16 of the same order (measured ≤ 0.8°). Seen
// failing with the doped scan segmented in the undoped order (nws).
func TestContactAngleFloatAndDoped(t *testing.T) {
	kinds := []struct {
		name           string
		order          string
		float          bool
		n, w, s, sigma float64
	}{
		{"uint16 nws", "nws", false, 14000, 24000, 40000, 2000},
		{"float32 nws", "nws", true, 0.2, 0.9, 2.0, 0.14},
		{"uint16 nsw", "nsw", false, 14000, 40000, 24000, 2000},
		{"float32 nsw", "nsw", true, 0.2, 2.0, 0.9, 0.14},
	}
	angle := func(lab *volume.Labels) (float64, int64) {
		o := measure.Defaults()
		o.SkipCurvature = true
		o.Contact.WallGap = 3
		r, err := measure.Volume(lab, o, 0, 0)
		if err != nil {
			t.Fatal(err)
		}
		if r.AngleMean == nil {
			return 0, 0
		}
		return *r.AngleMean, r.AngleSamples
	}
	tol := [3]float64{3, 3, 7}
	for i, theta := range []float64{60, 90, 120} {
		_, truth := capScene(theta)
		want, _ := angle(truth)
		got := map[string]float64{}
		for _, k := range kinds {
			p := Defaults()
			p.Order = k.order
			lab := floatPipeline(t, renderCap(t, truth, k.n, k.w, k.s, k.sigma, k.float), p)
			a, ns := angle(lab)
			got[k.name] = a
			t.Logf("%g° cap %s: %.1f° (%d samples), labels %.1f°: error %+.1f°", theta, k.name, a, ns, want, a-want)
			if ns == 0 || math.Abs(a-want) > tol[i] {
				t.Errorf("%g° cap %s: %.1f° (%d samples) vs %.1f° on the labels, want within %g°", theta, k.name, a, ns, want, tol[i])
			}
		}
		for _, o := range []string{"nws", "nsw"} {
			if d := got["float32 "+o] - got["uint16 "+o]; math.Abs(d) > 3 {
				t.Errorf("%g° cap %s: float32 %.1f° vs uint16 %.1f°, want within 3°", theta, o, got["float32 "+o], got["uint16 "+o])
			}
		}
	}
}
