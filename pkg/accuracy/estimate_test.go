package accuracy

import (
	"math"
	"math/rand/v2"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// edgeScan draws a grey scan whose solid is the half-space n·(p − c) > 0
// (tilted plane) or a ball, blurred analytically: the grey at p is
// μ_f + (μ_s − μ_f)·Φ(d(p)/b) + noise, d the signed distance to the true
// surface (+ in the solid). For a plane this is exactly the Gaussian blur
// of the step (the convolution of a half-space indicator with a Gaussian
// of σ b is Φ(d/b)); for a ball of radius R ≫ b it holds to O(b²/R).
// Labels: solid where d > 0 at the voxel centre, wetting elsewhere.
func edgeScan(n int, ball bool, b, sigma float64, seed uint64) (*volume.Volume[float32], *volume.Labels) {
	const muS, muW = 40000.0, 24000.0
	box := volume.BoxOf(n, n, n)
	g := volume.New[float32](box, 1e-6)
	lab := volume.New[uint8](box, 1e-6)
	rng := rand.New(rand.NewPCG(seed, 7))
	nrm := [3]float64{1 / math.Sqrt(14), 2 / math.Sqrt(14), 3 / math.Sqrt(14)}
	c := float64(n-1) / 2
	i := 0
	for z := 0; z < n; z++ {
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				p := [3]float64{float64(z) - c, float64(y) - c, float64(x) - c}
				var d float64
				if ball {
					d = 0.35*float64(n) - math.Sqrt(p[0]*p[0]+p[1]*p[1]+p[2]*p[2])
				} else {
					d = nrm[0]*p[0] + nrm[1]*p[1] + nrm[2]*p[2] + 0.3
				}
				f := 0.0
				switch {
				case b > 0:
					f = 0.5 * math.Erfc(-d/(b*math.Sqrt2))
				case d > 0:
					f = 1
				}
				g.Pix[i] = float32(muW + (muS-muW)*f + sigma*rng.NormFloat64())
				if d > 0 {
					lab.Pix[i] = 0
				} else {
					lab.Pix[i] = 1
				}
				i++
			}
		}
	}
	return g, lab
}

// TestEstimateAnalyticEdges: the estimator against scans whose blur and
// noise are known exactly — a tilted plane and a ball, blurred
// analytically (Φ(d/b), the Gaussian blur of a half-space) with white
// Gaussian noise σ 800.
//
// Measured (2026-12-05): blur plane +0.10/+0.07/−0.07/−0.22 voxels and ball
// +0.12/+0.09/−0.05/−0.18 at b 0/0.5/1/2 (the voxel-centre distance to the
// mask's surface is off by a fraction of a voxel on oblique surfaces); noise
// within 0.1 % (plane) and 1.4 % (ball, b 2); levels within 20 grey.
// Tolerances: blur 0.2 + 0.12·b voxels, noise 3 %, levels 50 grey.
func TestEstimateAnalyticEdges(t *testing.T) {
	for _, ball := range []bool{false, true} {
		for _, b := range []float64{0, 0.5, 1, 2} {
			g, lab := edgeScan(64, ball, b, 800, 1)
			e, err := Estimate(g, lab, phase.Default())
			if err != nil {
				t.Fatal(err)
			}
			t.Logf("ball %v, blur %.1f: estimated %.3f (edge offset %.3f, rms %.4f, %d voxels); noise %.1f of 800; levels %.0f, %.0f",
				ball, b, e.Blur, e.EdgeOffset, e.EdgeRMS, e.EdgeVoxels, e.Noise, e.Solid, e.Wetting)
			if math.Abs(e.Blur-b) > 0.2+0.12*b {
				t.Errorf("ball %v: blur %.3f estimated as %.3f (tolerance %.2f)", ball, b, e.Blur, 0.2+0.12*b)
			}
			if math.Abs(e.Noise/800-1) > 0.03 {
				t.Errorf("ball %v, blur %g: noise 800 estimated as %.1f", ball, b, e.Noise)
			}
			if math.Abs(e.Solid-40000) > 50 || math.Abs(e.Wetting-24000) > 50 {
				t.Errorf("ball %v, blur %g: levels %.0f, %.0f, want 40000, 24000", ball, b, e.Solid, e.Wetting)
			}
		}
	}
}

// TestEstimateForwardModel: the estimator on scans of the forward model
// (pkg/forward: a Boolean grain pack with nonwetting ganglia, Gaussian blur
// of known σ, white noise σ = |μ_w − μ_n|/CNR), both fluids present.
// Tolerances as in TestEstimateAnalyticEdges.
func TestEstimateForwardModel(t *testing.T) {
	for _, c := range []struct{ blur, cnr float64 }{{0.7, 5}, {1.2, 10}, {0, 8}} {
		lab := volume.New[uint8](volume.BoxOf(80, 80, 80), 2e-6)
		forward.Rock{GrainRadius: 12, Porosity: 0.35, BlobRadius: 9, BlobFrac: 0.4, Seed: 3}.Draw(lab, phase.Default())
		p := forward.Default()
		p.Blur, p.CNR = c.blur, c.cnr
		img, err := forward.Render(lab, p)
		if err != nil {
			t.Fatal(err)
		}
		e, err := Estimate(forward.Uint16(img), lab, phase.Default())
		if err != nil {
			t.Fatal(err)
		}
		sig := p.NoiseSigma()
		t.Logf("blur %.1f, CNR %g: estimated blur %.3f (%d voxels), noise %.1f of %.1f (wetting %.1f, nonwetting %.1f), levels %.0f/%.0f/%.0f",
			c.blur, c.cnr, e.Blur, e.EdgeVoxels, e.Noise, sig, *e.NoiseWetting, *e.NoiseNonwetting, e.Nonwetting, e.Wetting, e.Solid)
		if math.Abs(e.Blur-c.blur) > 0.2+0.12*c.blur {
			t.Errorf("blur %.1f estimated as %.3f", c.blur, e.Blur)
		}
		if math.Abs(e.Noise/sig-1) > 0.03 {
			t.Errorf("noise %.1f estimated as %.1f", sig, e.Noise)
		}
		if math.Abs(e.Solid-p.Solid) > 50 || math.Abs(e.Wetting-p.Wetting) > 50 || math.Abs(e.Nonwetting-p.Nonwetting) > 50 {
			t.Errorf("levels %.0f/%.0f/%.0f, want %.0f/%.0f/%.0f", e.Nonwetting, e.Wetting, e.Solid, p.Nonwetting, p.Wetting, p.Solid)
		}
	}
}
