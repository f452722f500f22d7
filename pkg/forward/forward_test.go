package forward

import (
	"math"
	"runtime"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// halves: wetting for x < nx/2, nonwetting above.
func halves(n int) *volume.Labels {
	lab := volume.NewShape[uint8](n, n, n, 1e-6)
	c := phase.Default()
	synth.Fill(lab, c.Wetting, func(z, y, x float64) bool { return x < float64(n)/2 })
	synth.Fill(lab, c.Nonwetting, func(z, y, x float64) bool { return x >= float64(n)/2 })
	return lab
}

func TestCNRAsDefined(t *testing.T) {
	for _, cnr := range []float64{3, 5, 10} {
		p := Default()
		p.Blur, p.CNR = 0, cnr
		img, err := Render(halves(32), p)
		if err != nil {
			t.Fatal(err)
		}
		var sw, sn, qw, qn, nw, nn float64
		for z := 0; z < 32; z++ {
			for y := 0; y < 32; y++ {
				for x := 0; x < 32; x++ {
					v := float64(img.At(z, y, x))
					if x < 16 {
						sw, qw, nw = sw+v, qw+v*v, nw+1
					} else {
						sn, qn, nn = sn+v, qn+v*v, nn+1
					}
				}
			}
		}
		mw, mn := sw/nw, sn/nn
		sd := math.Sqrt((qw/nw - mw*mw + qn/nn - mn*mn) / 2)
		got := math.Abs(mw-mn) / sd
		// Source: definition in the package doc, CNR = |μw − μn| / σ_noise; 16384 samples per class → ~1 % sampling error.
		if math.Abs(got-cnr) > 0.03*cnr {
			t.Errorf("CNR %g: measured %.3f", cnr, got)
		}
		t.Logf("CNR %g: measured %.3f", cnr, got)
	}
}

// TestBlurIsGaussianPSF checks the partial-volume profile across a plane
// interface against the error function: a step blurred by a Gaussian of
// standard deviation s has the profile a + (b−a)Φ((x − x0)/s).
func TestBlurIsGaussianPSF(t *testing.T) {
	p := Default()
	p.CNR, p.Blur = 0, 1.2
	img, err := Render(halves(24), p)
	if err != nil {
		t.Fatal(err)
	}
	x0 := 11.5 // wetting for x <= 11, nonwetting from 12
	for x := 6; x < 18; x++ {
		want := p.Wetting + (p.Nonwetting-p.Wetting)*0.5*math.Erfc(-(float64(x)-x0)/(p.Blur*math.Sqrt2))
		got := float64(img.At(12, 12, x))
		// Source: Gaussian PSF convolved with a step = erf profile (analytic); the sampled
		// kernel differs from the continuous one by < 1 % of the contrast at s = 1.2.
		if math.Abs(got-want) > 0.01*math.Abs(p.Wetting-p.Nonwetting) {
			t.Errorf("x=%d: %.1f, erf profile %.1f", x, got, want)
		}
	}
}

func TestSampleDriftRings(t *testing.T) {
	n := 40
	lab := volume.NewShape[uint8](n, n, n, 1e-6)
	for i := range lab.Pix {
		lab.Pix[i] = phase.Default().Wetting
	}
	p := Default()
	p.CNR, p.Blur = 0, 0
	p.Sample = &Cylinder{Y: 19.5, X: 19.5, Radius: 14, Wall: 3}
	p.Drift = 0.1
	img, err := Render(lab, p)
	if err != nil {
		t.Fatal(err)
	}
	// Outside the wall: air; in the wall: wall level; inside: wetting; gain
	// 1 + Drift·(z − z_mid)/NZ. Source: the model in the package doc (exact, no noise).
	for _, c := range []struct {
		y, x int
		want float64
	}{{0, 0, p.Air}, {19, 36, p.Wall}, {19, 19, p.Wetting}} {
		for _, z := range []int{0, 20, 39} {
			g := 1 + p.Drift*(float64(z)-19.5)/float64(n)
			if got := float64(img.At(z, c.y, c.x)); math.Abs(got-g*c.want) > 1e-3*c.want {
				t.Errorf("(%d,%d,%d) = %.1f, want %.1f", z, c.y, c.x, got, g*c.want)
			}
		}
	}
	tr := Truth(lab, p)
	if tr.At(0, 0, 0) != phase.Outside || tr.At(5, 19, 19) != phase.Default().Wetting {
		t.Error("Truth does not mark the outside")
	}
	// Rings: an offset constant on each integer radius, the same at every z,
	// reproducible with the seed and different with another seed.
	p.Drift, p.Rings = 0, 500
	a, _ := Render(lab, p)
	b, _ := Render(lab, p)
	p.Seed++
	c, _ := Render(lab, p)
	same, differ := true, false
	for i := range a.Pix {
		same = same && a.Pix[i] == b.Pix[i]
		differ = differ || a.Pix[i] != c.Pix[i]
	}
	if !same || !differ {
		t.Errorf("rings: same seed identical %v, other seed differs %v", same, differ)
	}
	if a.At(3, 19+10, 19) != a.At(30, 19+10, 19) || a.At(3, 19, 19+10) != a.At(3, 19+10, 19) {
		t.Error("ring offset is not a function of the radius alone")
	}
}

func TestDeterministicAcrossThreads(t *testing.T) {
	lab := volume.NewShape[uint8](24, 24, 24, 1e-6)
	Rock{GrainRadius: 4, Porosity: 0.4, BlobRadius: 4, BlobFrac: 0.5, Seed: 3}.Draw(lab, phase.Default())
	p := Default()
	p.Rings, p.Drift = 100, 0.05
	prev := runtime.GOMAXPROCS(1)
	a, err := Render(lab, p)
	runtime.GOMAXPROCS(prev)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := Render(lab, p)
	for i := range a.Pix {
		if a.Pix[i] != b.Pix[i] {
			t.Fatalf("voxel %d differs between 1 and %d threads", i, prev)
		}
	}
	u := Uint16(a)
	if u.Pix[0] != uint16(math.Round(float64(a.Pix[0]))) {
		t.Error("Uint16 does not round")
	}
}

func TestRockFractions(t *testing.T) {
	lab := volume.NewShape[uint8](64, 64, 64, 1e-6)
	r := Rock{GrainRadius: 6, Porosity: 0.35, BlobRadius: 6, BlobFrac: 0.5, Seed: 9}
	c := phase.Default()
	r.Draw(lab, c)
	var n [3]float64
	for _, v := range lab.Pix {
		n[v]++
	}
	phi := (n[1] + n[2]) / float64(len(lab.Pix))
	sn := n[2] / (n[1] + n[2])
	// Source: Boolean model, V_V = 1 − e^{−η} (Mecke & Wagner 1991); independent
	// models, so the ganglia fill the pore space in the same expected fraction.
	if math.Abs(phi-r.Porosity) > 0.04 || math.Abs(sn-r.BlobFrac) > 0.08 {
		t.Errorf("porosity %.3f (want %.2f), S_n %.3f (want %.2f)", phi, r.Porosity, sn, r.BlobFrac)
	}
}

func TestValidate(t *testing.T) {
	p := Default()
	p.CNR = -1
	if _, err := Render(halves(4), p); err == nil {
		t.Error("negative CNR accepted")
	}
	p = Default()
	p.Sample = &Cylinder{Radius: 0}
	if p.Validate() == nil {
		t.Error("zero radius accepted")
	}
}

// A Shift moves the PSF: the image of one solid voxel in brine, without
// noise, has its grey-weighted centroid at the voxel plus Shift. Source:
// the mean of a Gaussian is its centre (analytic); the sampled, truncated
// and renormalised kernel keeps it to ~exp(−2π²σ²) (Poisson summation,
// from memory). Measured 2026-12-05: largest deviation 2.6e-5 voxel (the
// float32 image summed); band 5e-5.
func TestShiftMovesPSFCentroid(t *testing.T) {
	const n = 32
	c := phase.Default()
	lab := volume.NewShape[uint8](n, n, n, 1e-6)
	for i := range lab.Pix {
		lab.Pix[i] = c.Wetting
	}
	at := [3]float64{16, 15, 17}
	lab.Set(16, 15, 17, c.Solid)
	for _, d := range [][3]float64{{0.3, -1.45, 2.7}, {-0.5, 0.5, 0}, {2, 0, -1}} {
		p := Default()
		p.CNR, p.Blur, p.Shift = 0, 0.8, d
		img, err := Render(lab, p)
		if err != nil {
			t.Fatal(err)
		}
		var m [3]float64
		var sum float64
		for z := 0; z < n; z++ {
			for y := 0; y < n; y++ {
				for x := 0; x < n; x++ {
					w := float64(img.At(z, y, x)) - p.Wetting
					sum += w
					m[0], m[1], m[2] = m[0]+w*float64(z), m[1]+w*float64(y), m[2]+w*float64(x)
				}
			}
		}
		for a := 0; a < 3; a++ {
			got := m[a] / sum
			t.Logf("shift %v axis %d: centroid error %.2g", d, a, got-(at[a]+d[a]))
			if e := math.Abs(got - (at[a] + d[a])); e > 5e-5 {
				t.Errorf("shift %v: centroid along axis %d at %.6f, want %.6f (error %.2g)", d, a, got, at[a]+d[a], e)
			}
		}
		if math.Abs(sum-(p.Solid-p.Wetting)) > 0.5 { // float32 voxels summed: measured ≤ 0.08
			t.Errorf("shift %v: the blurred voxel holds %g grey, want %g", d, sum, p.Solid-p.Wetting)
		}
	}
}

// Shifts that differ by whole voxels give images that differ by an index
// shift (noise-free, away from the clamped faces). Source: the definition
// of a translation on the grid; float32 rounding of ~4e4 grey: band 0.02.
func TestShiftWholeVoxelsIsIndexShift(t *testing.T) {
	r := Rock{GrainRadius: 5, Porosity: 0.4, BlobRadius: 3, BlobFrac: 0.3, Seed: 3}
	lab := volume.NewShape[uint8](28, 28, 28, 1e-6)
	r.Draw(lab, phase.Default())
	p := Default()
	p.CNR = 0
	p.Shift = [3]float64{0.3, 0.6, -0.2}
	a, err := Render(lab, p)
	if err != nil {
		t.Fatal(err)
	}
	p.Shift = [3]float64{2.3, 0.6, 0.8}
	b, err := Render(lab, p)
	if err != nil {
		t.Fatal(err)
	}
	var worst float64
	for z := 8; z < 20; z++ {
		for y := 8; y < 20; y++ {
			for x := 8; x < 20; x++ {
				worst = math.Max(worst, math.Abs(float64(b.At(z, y, x)-a.At(z-2, y, x-1))))
			}
		}
	}
	if worst > 0.02 {
		t.Errorf("images 2 and 1 voxels apart differ by up to %g grey after the index shift", worst)
	}
	p.Blur = 0
	p.Shift = [3]float64{0.5, 0, 0}
	if _, err := Render(lab, p); err == nil {
		t.Error("a sub-voxel shift without blur was accepted")
	}
}
