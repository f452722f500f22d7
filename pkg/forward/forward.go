// Package forward turns a known label volume (solid, wetting, nonwetting)
// into a synthetic grey-scale reconstruction with the defects of a fast
// synchrotron scan, so that segmentation can be scored against the truth.
//
// The image model, in this order (common practice for simulated micro-CT;
// the steps follow the usual description of attenuation images: piecewise
// constant attenuation, blurred by the system point-spread function, plus
// reconstruction noise):
//
//  1. ideal image: each voxel gets the mean grey level of its phase; inside a
//     cylindrical sample (axis along z) the phases, in the annulus of the cell
//     wall the wall level, outside it the air level;
//  2. point-spread blur: a Gaussian of standard deviation Blur voxels
//     (pkg/filter.Gaussian, mode 'nearest', truncate 4) — this makes the
//     partial-volume voxels at every interface; with a Shift (the sample
//     drifted in the scanner) the Gaussian is centred Shift voxels away,
//     so the blurred image is that of the sample moved by Shift: the scan
//     shows at p what the unshifted one shows at p − Shift (the kernel is
//     sampled at the voxel offsets k − Shift, |k − Shift| ≤ ⌈4·Blur⌉ + 1,
//     normalised to sum 1, source indices clamped as in mode 'nearest');
//  3. slow intensity drift along z: a gain 1 + Drift·(z − z_mid)/NZ;
//  4. ring-like streaks: an offset Rings·g_k added to every voxel whose
//     distance from the rotation axis lies in [k, k+1), g_k independent
//     standard normal values (one per integer radius, fixed by the seed);
//  5. additive white Gaussian noise of standard deviation
//     σ_noise = |μ_w − μ_n| / CNR.
//
// Contrast-to-noise ratio. CNR = |μ_w − μ_n| / σ_noise, where μ_w and μ_n are
// the mean grey levels of the wetting and the nonwetting phase (the pair the
// segmentation must separate, and the lowest contrast in a scan) and σ_noise
// the standard deviation of the additive noise. The noise is added after
// the blur (it is reconstruction noise, not blurred by the PSF), so in the
// bulk of each phase the measured CNR equals the set one
// (TestCNRAsDefined).
//
// Everything is deterministic for a given Seed: noise comes from one
// PCG stream per z-slice (seeded with Seed and z), so the result does not
// depend on GOMAXPROCS.
package forward

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"sync"

	"sluice/pkg/filter"
	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// Cylinder is the sample: a cylinder with axis along z through (Y, X)
// (global voxel coordinates), radius Radius voxels, held in a cell whose wall
// occupies radii (Radius, Radius+Wall].
type Cylinder struct {
	Y, X   float64
	Radius float64
	Wall   float64
}

// Inside reports whether voxel centre (y, x) lies in the sample.
func (c Cylinder) Inside(y, x int) bool {
	dy, dx := float64(y)-c.Y, float64(x)-c.X
	return dy*dy+dx*dx <= c.Radius*c.Radius
}

// Params describes the scan.
type Params struct {
	// Codes are the label codes of the input.
	Codes phase.Codes
	// Mean grey levels of the phases, the cell wall and the air outside.
	Solid, Wetting, Nonwetting, Wall, Air float64
	// Blur is the standard deviation of the Gaussian point-spread function in
	// voxels (0 = none).
	Blur float64
	// CNR is |μ_w − μ_n| / σ_noise (0 = no noise).
	CNR float64
	// Sample, when not nil, is the cylinder; voxels outside it are wall or
	// air whatever their label.
	Sample *Cylinder
	// Drift is the relative gain change from the bottom to the top slice.
	Drift float64
	// Rings is the standard deviation of the ring offsets in grey units.
	Rings float64
	// Seed fixes noise and rings.
	Seed uint64
	// Shift moves the sample (phases, cell wall, air) by (z, y, x) voxels
	// against the scanner's grid: thermal or mechanical drift between
	// scans. Noise, rings and the intensity drift stay with the scanner. A
	// sub-voxel shift needs Blur > 0 (the shifted PSF makes it).
	Shift [3]float64
}

// Default returns a uint16-scaled scan of a gas/oil–brine experiment:
// nonwetting darkest, brine in the middle, rock brightest, CNR 5, blur 0.7
// voxel, no sample mask, no drift, no rings.
func Default() Params {
	return Params{
		Codes:      phase.Default(),
		Nonwetting: 14000, Wetting: 24000, Solid: 40000,
		Wall: 30000, Air: 6000,
		Blur: 0.7, CNR: 5, Seed: 1,
	}
}

// DopedBrine returns Default with the brine doped (e.g. with a iodide salt)
// so that it is the brightest phase: nonwetting < solid < wetting.
func DopedBrine() Params {
	p := Default()
	p.Nonwetting, p.Solid, p.Wetting = 14000, 30000, 44000
	return p
}

// NoiseSigma returns σ_noise = |μ_w − μ_n| / CNR (0 when CNR is 0).
func (p Params) NoiseSigma() float64 {
	if p.CNR == 0 {
		return 0
	}
	return math.Abs(p.Wetting-p.Nonwetting) / p.CNR
}

// Validate reports unusable parameters.
func (p Params) Validate() error {
	if err := p.Codes.Validate(); err != nil {
		return fmt.Errorf("forward: %w", err)
	}
	for _, v := range []float64{p.Solid, p.Wetting, p.Nonwetting, p.Wall, p.Air, p.Blur, p.CNR, p.Drift, p.Rings} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("forward: parameters must be finite")
		}
	}
	if p.Blur < 0 || p.CNR < 0 || p.Rings < 0 {
		return fmt.Errorf("forward: blur %g, CNR %g and rings %g must be >= 0", p.Blur, p.CNR, p.Rings)
	}
	if p.CNR > 0 && p.Wetting == p.Nonwetting {
		return fmt.Errorf("forward: CNR needs different wetting and nonwetting levels")
	}
	for _, d := range p.Shift {
		if math.IsNaN(d) || math.IsInf(d, 0) {
			return fmt.Errorf("forward: shift %v must be finite", p.Shift)
		}
		if p.Blur == 0 && d != math.Trunc(d) {
			return fmt.Errorf("forward: a sub-voxel shift %v needs blur > 0", p.Shift)
		}
	}
	if p.Sample != nil && !(p.Sample.Radius > 0 && p.Sample.Wall >= 0) {
		return fmt.Errorf("forward: sample radius %g must be > 0 and wall %g >= 0", p.Sample.Radius, p.Sample.Wall)
	}
	return nil
}

// Render returns the grey image of lab (float32, same Box).
func Render(lab *volume.Labels, p Params) (*volume.Volume[float32], error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	if err := lab.Validate(); err != nil {
		return nil, fmt.Errorf("forward: labels: %w", err)
	}
	var level [256]float32
	for i := range level {
		level[i] = float32(p.Air)
	}
	level[p.Codes.Solid] = float32(p.Solid)
	level[p.Codes.Wetting] = float32(p.Wetting)
	level[p.Codes.Nonwetting] = float32(p.Nonwetting)
	b := lab.Box
	img := volume.New[float32](b, lab.VoxelSize)
	i := 0
	for z := b.Min[0]; z < b.Max[0]; z++ {
		for y := b.Min[1]; y < b.Max[1]; y++ {
			for x := b.Min[2]; x < b.Max[2]; x++ {
				v := level[lab.Pix[i]]
				if c := p.Sample; c != nil {
					r := math.Hypot(float64(y)-c.Y, float64(x)-c.X)
					switch {
					case r > c.Radius+c.Wall:
						v = float32(p.Air)
					case r > c.Radius:
						v = float32(p.Wall)
					}
				}
				img.Pix[i] = v
				i++
			}
		}
	}
	switch {
	case p.Shift != [3]float64{}:
		img = shiftedBlur(img, p.Blur, filter.DefaultTruncate, p.Shift)
	case p.Blur > 0:
		var err error
		if img, err = filter.Gaussian(img, b, p.Blur, filter.DefaultTruncate); err != nil {
			return nil, fmt.Errorf("forward: %w", err)
		}
	}
	// Ring offsets per integer radius from the axis (the sample axis, or the
	// centre of the slice without a sample).
	cy, cx := float64(b.Min[1]+b.Max[1]-1)/2, float64(b.Min[2]+b.Max[2]-1)/2
	if p.Sample != nil {
		cy, cx = p.Sample.Y, p.Sample.X
	}
	var rings []float32
	if p.Rings > 0 {
		rng := rand.New(rand.NewPCG(p.Seed, 0x72696e6773))
		s := b.Size()
		n := int(math.Hypot(float64(s[1]), float64(s[2]))+math.Abs(cy)+math.Abs(cx)) + 2
		rings = make([]float32, n)
		for k := range rings {
			rings[k] = float32(p.Rings * rng.NormFloat64())
		}
	}
	sigma := p.NoiseSigma()
	s := b.Size()
	zmid := float64(b.Min[0]+b.Max[0]-1) / 2
	var wg sync.WaitGroup
	next := make(chan int, s[0])
	for z := b.Min[0]; z < b.Max[0]; z++ {
		next <- z
	}
	close(next)
	for w := 0; w < runtime.GOMAXPROCS(0); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for z := range next {
				rng := rand.New(rand.NewPCG(p.Seed, uint64(int64(z))^0x6e6f697365))
				gain := 1 + p.Drift*(float64(z)-zmid)/float64(s[0])
				o := img.Index(z, b.Min[1], b.Min[2])
				for y := b.Min[1]; y < b.Max[1]; y++ {
					for x := b.Min[2]; x < b.Max[2]; x++ {
						v := float64(img.Pix[o]) * gain
						if rings != nil {
							k := int(math.Hypot(float64(y)-cy, float64(x)-cx))
							if k < len(rings) {
								v += float64(rings[k])
							}
						}
						if sigma > 0 {
							v += sigma * rng.NormFloat64()
						}
						img.Pix[o] = float32(v)
						o++
					}
				}
			}
		}()
	}
	wg.Wait()
	return img, nil
}

// shiftedBlur returns img convolved with a Gaussian of standard deviation
// sigma centred at d (voxels, z, y, x), axis by axis: out(p) =
// Σ_k w(k) img(p − k) with w(k) ∝ exp(−(k − d)²/2σ²) over |k − d| ≤
// ⌈truncate·σ⌉ + 1, normalised to sum 1, img's indices clamped to its box
// (mode 'nearest'). sigma 0 (integer d only, checked by Validate) is a pure
// index shift.
func shiftedBlur(img *volume.Volume[float32], sigma, truncate float64, d [3]float64) *volume.Volume[float32] {
	b := img.Box
	s := b.Size()
	cur := make([]float64, len(img.Pix))
	for i, v := range img.Pix {
		cur[i] = float64(v)
	}
	stride := [3]int{s[1] * s[2], s[2], 1}
	for a := 0; a < 3; a++ {
		// Taps k = k0 … k0+len(w)−1.
		var w []float64
		var k0 int
		if sigma == 0 {
			w, k0 = []float64{1}, int(d[a])
		} else {
			r := math.Ceil(truncate*sigma) + 1
			k0 = int(math.Ceil(d[a] - r))
			k1 := int(math.Floor(d[a] + r))
			var sum float64
			for k := k0; k <= k1; k++ {
				u := (float64(k) - d[a]) / sigma
				w = append(w, math.Exp(-u*u/2))
				sum += w[len(w)-1]
			}
			for i := range w {
				w[i] /= sum
			}
		}
		next := make([]float64, len(cur))
		n := s[a]
		parallel(len(cur)/n, func(lo, hi int) {
			for line := lo; line < hi; line++ {
				// The line's first voxel: line enumerates the other two axes.
				var start int
				switch a {
				case 0:
					start = line
				case 1:
					start = (line/s[2])*s[1]*s[2] + line%s[2]
				case 2:
					start = line * s[2]
				}
				for p := 0; p < n; p++ {
					var v float64
					for j, wj := range w {
						q := min(max(p-(k0+j), 0), n-1)
						v += wj * cur[start+q*stride[a]]
					}
					next[start+p*stride[a]] = v
				}
			}
		})
		cur = next
	}
	out := volume.New[float32](b, img.VoxelSize)
	for i, v := range cur {
		out.Pix[i] = float32(v)
	}
	return out
}

// parallel runs f over [0, n) cut into one range per CPU.
func parallel(n int, f func(lo, hi int)) {
	w := max(1, min(runtime.GOMAXPROCS(0), n))
	var wg sync.WaitGroup
	for i := 0; i < w; i++ {
		lo, hi := i*n/w, (i+1)*n/w
		wg.Add(1)
		go func() {
			defer wg.Done()
			f(lo, hi)
		}()
	}
	wg.Wait()
}

// Uint16 rounds a rendered image to uint16, clipping to [0, 65535].
func Uint16(img *volume.Volume[float32]) *volume.Volume[uint16] {
	out := volume.New[uint16](img.Box, img.VoxelSize)
	for i, v := range img.Pix {
		switch {
		case !(v > 0):
			out.Pix[i] = 0
		case v >= 65535:
			out.Pix[i] = 65535
		default:
			out.Pix[i] = uint16(math.Round(float64(v)))
		}
	}
	return out
}

// Truth returns a copy of lab with every voxel outside the sample set to
// phase.Outside: the labels a perfect segmentation of the rendered scan
// would give.
func Truth(lab *volume.Labels, p Params) *volume.Labels {
	out := lab.Clone()
	if p.Sample == nil {
		return out
	}
	b := lab.Box
	i := 0
	for z := b.Min[0]; z < b.Max[0]; z++ {
		for y := b.Min[1]; y < b.Max[1]; y++ {
			for x := b.Min[2]; x < b.Max[2]; x++ {
				if !p.Sample.Inside(y, x) {
					out.Pix[i] = phase.Outside
				}
				i++
			}
		}
	}
	return out
}

// Rock describes a synthetic two-phase rock: solid grains from a Boolean
// model of balls (synth.Boolean) and nonwetting ganglia from a second Boolean
// model of balls, kept only in the pore space; the rest of the pore space is
// wetting.
type Rock struct {
	GrainRadius float64 // voxels
	Porosity    float64 // expected pore fraction e^{−η}
	BlobRadius  float64 // radius of the balls that make the ganglia, voxels
	BlobFrac    float64 // expected fraction of pore space in ganglia
	Seed        uint64
}

// Draw fills lab with the rock, using codes c.
func (r Rock) Draw(lab *volume.Labels, c phase.Codes) {
	for i := range lab.Pix {
		lab.Pix[i] = c.Wetting
	}
	blobs := volume.New[uint8](lab.Box, lab.VoxelSize)
	synth.Boolean(blobs, synth.BooleanIntensity(-math.Log(1-r.BlobFrac), r.BlobRadius), r.BlobRadius, 1, r.Seed^0xb10b)
	for i, b := range blobs.Pix {
		if b == 1 {
			lab.Pix[i] = c.Nonwetting
		}
	}
	grains := blobs
	clear(grains.Pix)
	synth.Boolean(grains, synth.BooleanIntensity(-math.Log(r.Porosity), r.GrainRadius), r.GrainRadius, 1, r.Seed)
	for i, g := range grains.Pix {
		if g == 1 {
			lab.Pix[i] = c.Solid
		}
	}
}
