// Package register aligns a scan with a reference scan of the same sample
// by a rigid translation, for a sample that creeps between scans (thermal
// drift, pressure changes in the cell).
//
// Estimate (Phase): phase correlation (Kuglin & Hines 1975, Proc. IEEE Int.
// Conf. on Cybernetics and Society, pp. 163–165) of one central box of
// both scans, whose edge along each axis is the largest power of two up to
// the configured region (default 128) — mean removed, a Hann window along
// each axis so that the box edges do not correlate, the normalised
// cross-power spectrum weighted by a Gaussian low-pass (LowPass) against
// the noise beyond the scanner's blur — gives the integer peak. The
// peak is then refined by evaluating the inverse DFT of the normalised
// cross-power spectrum on a fine grid around it by matrix multiplication
// (Guizar-Sicairos, Thurman & Fienup 2008, Opt. Lett. 33:156), in two
// stages: 1/10 voxel over ±0.7 voxel, then 1/100 voxel over ±0.07. The 3-D
// transforms are passes of gonum's complex FFT along each axis.
//
// Convention: Shift s is the displacement of the scan's content against the
// reference, in voxels (z, y, x): the scan shows at p what the reference
// shows at p − s.
//
// Resample puts a scan back onto the reference grid, out(p) = scan(p + s):
// an integer shift is an index shift (voxel values copied exactly), a
// sub-voxel one cubic convolution (Keys 1981, a = −½) over the 4×4×4
// neighbours, in separable passes (integer scans are rounded back to their
// type, an error of at most half a grey unit). Trilinear interpolation was
// tried first: its smoothing widened the blur that segmentation's
// partial-volume correction assumes and moved S_w by up to 0.011 on a
// forward-model campaign; cubic convolution moves it by ≤ 0.0004
// (pkg/scan TestRegistrationCampaign). Where p + s lies outside the scan the
// source index is clamped to its edge; Covered and MarkUncovered tell which
// voxels those are, so that callers leave them out of measurement. Every
// voxel is computed from the same source voxels by the same arithmetic
// whatever box it is asked for, so tiles resampled one by one equal the
// whole scan resampled at once, bit for bit.
//
// Known limits: a translation only (no rotation, no scaling); the central
// box must hold structure that does not change between scans (the rock);
// a shift beyond half the box is taken modulo the box.
package register

import (
	"errors"
	"fmt"
	"math"
	"math/cmplx"
	"runtime"
	"sync"

	"gonum.org/v1/gonum/dsp/fourier"

	"sluice/pkg/volume"
)

// Shift is a displacement in voxels, indexed z, y, x.
type Shift [3]float64

// IsZero reports whether s moves nothing.
func (s Shift) IsZero() bool { return s == Shift{} }

// Norm returns the Euclidean length of s in voxels.
func (s Shift) Norm() float64 { return math.Sqrt(s[0]*s[0] + s[1]*s[1] + s[2]*s[2]) }

// Max returns the largest component magnitude of s in voxels.
func (s Shift) Max() float64 { return max(math.Abs(s[0]), math.Abs(s[1]), math.Abs(s[2])) }

// DefaultRegion is the default edge of the central box (voxels).
const DefaultRegion = 128

// MinRegion is the smallest edge of the central box along any axis.
const MinRegion = 16

// Estimate is the outcome of Phase.
type Estimate struct {
	// Shift is the displacement of the scan against the reference, to
	// 1/100 voxel.
	Shift Shift `json:"shift_zyx_voxels"`
	// Peak is the height of the refined phase-correlation peak relative to
	// its largest possible value, 1 (two scans equal up to a translation by
	// whole voxels, without noise): the sum of the spectral weights. Noise, a changed fluid distribution and
	// a sub-voxel shift lower it; a peak near 1/√(voxels of the box) is no
	// peak at all.
	Peak float64 `json:"peak"`
	// Region is the box both scans were compared on.
	Region volume.Box `json:"region"`
}

// Region returns the central box of whole over which Phase compares two
// scans: along each axis the largest power of two not above min(edge,
// extent), centred. It is an error when an axis is shorter than MinRegion.
func Region(whole volume.Box, edge int) (volume.Box, error) {
	if edge <= 0 {
		edge = DefaultRegion
	}
	s := whole.Size()
	var b volume.Box
	for a := 0; a < 3; a++ {
		n := 1
		for n*2 <= min(edge, s[a]) {
			n *= 2
		}
		if n < MinRegion {
			return b, fmt.Errorf("register: the scan is %d voxels along %s and the region at most %d; registration needs at least %d", s[a], "zyx"[a:a+1], edge, MinRegion)
		}
		b.Min[a] = whole.Min[a] + (s[a]-n)/2
		b.Max[a] = b.Min[a] + n
	}
	return b, nil
}

// LowPass is f_c, the standard deviation (cycles per voxel) of the
// Gaussian weight of the cross-power spectrum. Measured on forward-model
// scans (96³, region 64³, blur 0.7 voxel, step at CNR 5, six shifts):
// largest error 0.07 voxel without the weight, 0.04 with f_c 0.2, 0.05
// with 0.15 (reference scan at CNR 20); at CNR 5 for both scans 0.13,
// 0.05 and 0.06. The weight is common practice for noisy phase
// correlation, its width our choice.
const LowPass = 0.2

// Phase estimates the shift of scan against ref over region; both volumes
// must cover region.
func Phase(ref, scan volume.Any, region volume.Box) (Estimate, error) {
	return correlate(ref, scan, region, LowPass)
}

// correlate is Phase with the low-pass width cut (0: no weight, plain phase
// correlation).
func correlate(ref, scan volume.Any, region volume.Box, cut float64) (Estimate, error) {
	est := Estimate{Region: region}
	n := region.Size()
	if region.Empty() {
		return est, errors.New("register: empty region")
	}
	fr, err := windowed(ref, region)
	if err != nil {
		return est, fmt.Errorf("register: reference: %w", err)
	}
	fm, err := windowed(scan, region)
	if err != nil {
		return est, fmt.Errorf("register: scan: %w", err)
	}
	fft3(fr, n, false)
	fft3(fm, n, false)
	// Normalised cross-power spectrum F_scan · conj(F_ref) / |…|: for
	// scan(x) = ref(x − s) it is e^{−2πi k·s/N}, whose inverse transform
	// peaks at x = s.
	// Each frequency is weighted by a Gaussian low-pass g(f) =
	// exp(−|f|²/2f_c²), f in cycles per voxel: real and symmetric, so it
	// does not move the peak of a translation, while it keeps out the
	// frequencies beyond the scanner's blur, where the unit-magnitude
	// spectrum is noise alone.
	cps := fm
	var wsum float64
	for i, c := range fm {
		c *= cmplx.Conj(fr[i])
		if a := cmplx.Abs(c); a > 0 {
			c /= complex(a, 0)
		} else {
			c = 0
		}
		w := 1.0
		if cut > 0 {
			k := [3]int{i / (n[1] * n[2]), i / n[2] % n[1], i % n[2]}
			var f2 float64
			for a := 0; a < 3; a++ {
				f := freq(k[a], n[a]) / float64(n[a])
				f2 += f * f
			}
			w = math.Exp(-f2 / (2 * cut * cut))
		}
		wsum += w
		cps[i] = c * complex(w, 0)
	}
	corr := make([]complex128, len(cps))
	copy(corr, cps)
	fft3(corr, n, true)
	best, bi := -1.0, 0
	for i, c := range corr {
		if a := cmplx.Abs(c); a > best {
			best, bi = a, i
		}
	}
	var peak [3]float64
	idx := [3]int{bi / (n[1] * n[2]), bi / n[2] % n[1], bi % n[2]}
	for a := 0; a < 3; a++ {
		k := idx[a]
		if k > n[a]/2 {
			k -= n[a]
		}
		peak[a] = float64(k)
	}
	// Two refinement stages of 15 points per axis: ±0.7 voxel at 1/10,
	// then ±0.07 at 1/100 around the best point of the first.
	pos, _ := refine(cps, n, peak, 0.1, 15)
	pos, h := refine(cps, n, pos, 0.01, 15)
	for a := range pos {
		est.Shift[a] = math.Round(pos[a]*100) / 100
		if est.Shift[a] == 0 {
			est.Shift[a] = 0 // no −0 in the output
		}
	}
	est.Peak = h / wsum
	return est, nil
}

// hann returns the Hann window of n points sampled at voxel centres,
// sin²(π(i + ½)/n): zero at the box faces, 1 in the middle.
func hann(n int) []float64 {
	w := make([]float64, n)
	for i := range w {
		s := math.Sin(math.Pi * (float64(i) + 0.5) / float64(n))
		w[i] = s * s
	}
	return w
}

// windowed returns the voxels of a inside box, mean removed and multiplied
// by the separable Hann window, as complex values in C order.
func windowed(a volume.Any, box volume.Box) ([]complex128, error) {
	if a == nil {
		return nil, errors.New("no volume")
	}
	if !a.Bounds().ContainsBox(box) {
		return nil, fmt.Errorf("volume %v does not cover the region %v", a.Bounds(), box)
	}
	f := volume.Float(a)
	n := box.Size()
	var sum float64
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			for _, v := range f.Pix[f.Index(z, y, box.Min[2]):][:n[2]] {
				sum += float64(v)
			}
		}
	}
	mean := sum / float64(box.Voxels())
	wz, wy, wx := hann(n[0]), hann(n[1]), hann(n[2])
	out := make([]complex128, box.Voxels())
	i := 0
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			w := wz[z-box.Min[0]] * wy[y-box.Min[1]]
			for x, v := range f.Pix[f.Index(z, y, box.Min[2]):][:n[2]] {
				out[i] = complex((float64(v)-mean)*w*wx[x], 0)
				i++
			}
		}
	}
	return out, nil
}

// fft3 transforms data (shape n, C order) in place, one pass of gonum's
// complex FFT along each axis: forward, Σ x e^{−2πi k·j/N}, or backward,
// Σ X e^{+2πi k·j/N} (unnormalised).
func fft3(data []complex128, n [3]int, backward bool) {
	for axis := 2; axis >= 0; axis-- {
		fftAxis(data, n, axis, backward)
	}
}

func fftAxis(data []complex128, n [3]int, axis int, backward bool) {
	length := n[axis]
	if length == 1 {
		return
	}
	stride := 1
	for a := axis + 1; a < 3; a++ {
		stride *= n[a]
	}
	lines := len(data) / length
	parallel(lines, func(lo, hi int) {
		t := fourier.NewCmplxFFT(length)
		buf := make([]complex128, length)
		for j := lo; j < hi; j++ {
			start := (j/stride)*length*stride + j%stride
			for k := range buf {
				buf[k] = data[start+k*stride]
			}
			if backward {
				t.Sequence(buf, buf)
			} else {
				t.Coefficients(buf, buf)
			}
			for k, v := range buf {
				data[start+k*stride] = v
			}
		}
	})
}

// parallel runs f over [0, n) cut into one range per CPU.
func parallel(n int, f func(lo, hi int)) {
	w := min(runtime.GOMAXPROCS(0), n)
	if w <= 1 {
		f(0, n)
		return
	}
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

// freq returns the signed frequency of DFT index k of n (as numpy's
// fftfreq: n/2 counts as −n/2 for even n).
func freq(k, n int) float64 {
	if k < (n+1)/2 {
		return float64(k)
	}
	return float64(k - n)
}

// refine evaluates c(x) = Σ_k cps[k] e^{+2πi k·x/N} on the grid of m points
// per axis spaced by step and centred on centre, by three matrix products
// (one per axis), and returns the grid point of largest |c| and |c| there.
func refine(cps []complex128, n [3]int, centre [3]float64, step float64, m int) ([3]float64, float64) {
	var pos [3][]float64
	var e [3][]complex128 // e[a][j*n[a]+k] = e^{+2πi f(k) x_j / n}
	for a := 0; a < 3; a++ {
		pos[a] = make([]float64, m)
		e[a] = make([]complex128, m*n[a])
		for j := 0; j < m; j++ {
			x := centre[a] + float64(j-m/2)*step
			pos[a][j] = x
			for k := 0; k < n[a]; k++ {
				s, c := math.Sincos(2 * math.Pi * freq(k, n[a]) * x / float64(n[a]))
				e[a][j*n[a]+k] = complex(c, s)
			}
		}
	}
	// Along x: t2[k0][k1][j2].
	t2 := make([]complex128, n[0]*n[1]*m)
	parallel(n[0]*n[1], func(lo, hi int) {
		for r := lo; r < hi; r++ {
			row := cps[r*n[2] : (r+1)*n[2]]
			for j := 0; j < m; j++ {
				ej := e[2][j*n[2] : (j+1)*n[2]]
				var s complex128
				for k, v := range row {
					s += v * ej[k]
				}
				t2[r*m+j] = s
			}
		}
	})
	// Along y: t1[k0][j1][j2].
	t1 := make([]complex128, n[0]*m*m)
	parallel(n[0], func(lo, hi int) {
		for k0 := lo; k0 < hi; k0++ {
			for j1 := 0; j1 < m; j1++ {
				ej := e[1][j1*n[1] : (j1+1)*n[1]]
				for j2 := 0; j2 < m; j2++ {
					var s complex128
					for k1 := 0; k1 < n[1]; k1++ {
						s += t2[(k0*n[1]+k1)*m+j2] * ej[k1]
					}
					t1[(k0*m+j1)*m+j2] = s
				}
			}
		}
	})
	// Along z, keeping the largest magnitude.
	best, bj := -1.0, [3]int{}
	for j0 := 0; j0 < m; j0++ {
		ej := e[0][j0*n[0] : (j0+1)*n[0]]
		for j1 := 0; j1 < m; j1++ {
			for j2 := 0; j2 < m; j2++ {
				var s complex128
				for k0 := 0; k0 < n[0]; k0++ {
					s += t1[(k0*m+j1)*m+j2] * ej[k0]
				}
				if a := cmplx.Abs(s); a > best {
					best, bj = a, [3]int{j0, j1, j2}
				}
			}
		}
	}
	return [3]float64{pos[0][bj[0]], pos[1][bj[1]], pos[2][bj[2]]}, best
}
