package morph

import (
	"math"
	"math/rand/v2"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// paddedAndInterior returns the two origin boxes of the package doc.
func paddedAndInterior(whole volume.Box) (padded, interior volume.Box) {
	return TileOrigins(whole, whole)
}

func randomLabels(nz, ny, nx int, p float64, seed uint64) *volume.Labels {
	rng := rand.New(rand.NewPCG(seed, 7))
	lab := volume.New[uint8](volume.Box{Min: [3]int{3, -2, 5}, Max: [3]int{3 + nz, -2 + ny, 5 + nx}}, 1)
	for i := range lab.Pix {
		if rng.Float64() < p {
			lab.Pix[i] = uint8(1 + rng.IntN(2))
		}
	}
	return lab
}

// naiveCells is the definition of Cells, voxel by voxel.
func naiveCells(lab *volume.Labels, s *phase.Set, o volume.Box) [256]int64 {
	var h [256]int64
	for z := o.Min[0]; z < o.Max[0]; z++ {
		for y := o.Min[1]; y < o.Max[1]; y++ {
			for x := o.Min[2]; x < o.Max[2]; x++ {
				c := 0
				for b := 0; b < 8; b++ {
					if s[lab.AtOr(z+b>>2&1, y+b>>1&1, x+b&1, 0)] {
						c |= 1 << b
					}
				}
				h[c]++
			}
		}
	}
	return h
}

// The fast histogram equals its definition, for boxes inside, across and
// outside the label volume. Source: definition (package doc).
func TestCellsMatchesDefinition(t *testing.T) {
	lab := randomLabels(9, 11, 13, 0.45, 1)
	s := phase.Of(2)
	for _, o := range []volume.Box{
		lab.Box,
		lab.Box.Grow(1),
		{Min: [3]int{4, 0, 6}, Max: [3]int{7, 3, 7}},
		{Min: [3]int{-4, -9, -3}, Max: [3]int{5, 0, 6}},
		{Min: [3]int{20, 20, 20}, Max: [3]int{22, 23, 21}},
	} {
		got, want := Cells(lab, s, o), naiveCells(lab, s, o)
		if got != want {
			t.Errorf("origins %v: histogram differs from definition", o)
		}
		var n int64
		for _, v := range got {
			n += v
		}
		if n != int64(o.Voxels()) {
			t.Errorf("origins %v: %d cells counted, want %d", o, n, o.Voxels())
		}
	}
}

// Sums over random uneven tilings equal the whole-volume histograms exactly.
// Source: additivity of cell counts (Ohser & Mücklich 2000, ch. 4; science.md).
func TestTileSumsEqualWhole(t *testing.T) {
	rng := rand.New(rand.NewPCG(42, 42))
	lab := randomLabels(23, 17, 20, 0.5, 3)
	whole := lab.Box
	s := phase.Of(1)
	wp, wi := paddedAndInterior(whole)
	hp, hi := Cells(lab, s, wp), Cells(lab, s, wi)
	for trial := 0; trial < 20; trial++ {
		// Uneven cuts along each axis.
		var cuts [3][]int
		for a := 0; a < 3; a++ {
			cuts[a] = []int{whole.Min[a]}
			for c := whole.Min[a] + 1 + rng.IntN(6); c < whole.Max[a]; c += 1 + rng.IntN(9) {
				cuts[a] = append(cuts[a], c)
			}
			cuts[a] = append(cuts[a], whole.Max[a])
		}
		var sp, si [256]int64
		for iz := 0; iz+1 < len(cuts[0]); iz++ {
			for iy := 0; iy+1 < len(cuts[1]); iy++ {
				for ix := 0; ix+1 < len(cuts[2]); ix++ {
					core := volume.Box{
						Min: [3]int{cuts[0][iz], cuts[1][iy], cuts[2][ix]},
						Max: [3]int{cuts[0][iz+1], cuts[1][iy+1], cuts[2][ix+1]},
					}
					// A worker sees only its core plus a one-voxel high halo.
					read := core
					for a := 0; a < 3; a++ {
						read.Max[a]++
					}
					tile := lab.Crop(read.Intersect(whole), 0)
					p, i := TileOrigins(core, whole)
					tp, ti := Cells(tile, s, p), Cells(tile, s, i)
					for c := range sp {
						sp[c] += tp[c]
						si[c] += ti[c]
					}
				}
			}
		}
		if sp != hp || si != hi {
			t.Fatalf("trial %d: tile sums differ from whole (cuts %v)", trial, cuts)
		}
	}
	if _, _, err := Euler(&hp); err != nil {
		t.Errorf("padded whole histogram: %v", err)
	}
}

// ballLabels draws a ball of radius R whose centre sits at the fraction off
// (each in [0, 1)) past the middle voxel, so that several offsets sample
// different digitisations of the same ball.
func ballLabels(R float64, off [3]float64) *volume.Labels {
	n := int(2*R) + 6
	lab := volume.NewShape[uint8](n, n, n, 1)
	c := float64(n-1) / 2
	synth.Ball(lab, [3]float64{c + off[0], c + off[1], c + off[2]}, R, 1)
	return lab
}

func functionals(lab *volume.Labels, s *phase.Set) (padded, interior Functionals, e6, e26 int64, err error) {
	wp, wi := paddedAndInterior(lab.Box)
	hp, hi := Cells(lab, s, wp), Cells(lab, s, wi)
	e6, e26, err = Euler(&hp)
	return FromHistogram(&hp), FromHistogram(&hi), e6, e26, err
}

// Balls: V = 4πR³/3, S = 4πR², M = 4πR, χ = 1, each at 8 centre offsets
// (fixed seed) per radius, since the digitisation error depends on where
// the centre falls between voxels.
//
// Source: analytic geometry (science.md, "Analytic check values").
// Tolerances: twice the largest |error| measured over 300 random centre
// offsets per radius (60 at R = 40; 2026-12-04). The error falls roughly as
// R^−1…R^−1.5 (lattice-point counting for V, the Crofton discretisation for
// S and M) and has long tails over offsets:
//
//	R      V max   S max   M max
//	8      2.11 %  1.80 %  1.69 %
//	12     1.05 %  1.41 %  0.96 %
//	17.5   0.22 %  0.64 %  1.00 %
//	25     0.19 %  0.30 %  0.62 %
//	40     0.05 %  0.09 %  0.23 %
//
// A single well-placed offset shows only 0.1–0.2 %; the spread over
// offsets is the honest error. χ is exact (6- and 26-connected).
func TestBalls(t *testing.T) {
	s := phase.Of(1)
	rng := rand.New(rand.NewPCG(5, 6))
	for _, c := range []struct{ R, tv, ts, tm float64 }{
		{8, 0.042, 0.036, 0.034},
		{12, 0.021, 0.028, 0.019},
		{17.5, 0.0045, 0.013, 0.020},
		{25, 0.004, 0.006, 0.0125},
		{40, 0.001, 0.0018, 0.0047},
	} {
		R := c.R
		var wv, ws, wm float64
		for k := 0; k < 8; k++ {
			off := [3]float64{rng.Float64(), rng.Float64(), rng.Float64()}
			lab := ballLabels(R, off)
			p, in, e6, e26, err := functionals(lab, s)
			if err != nil {
				t.Fatal(err)
			}
			V, S, M := 4*math.Pi*R*R*R/3, 4*math.Pi*R*R, 4*math.Pi*R
			var nvox float64
			for _, v := range lab.Pix {
				if v == 1 {
					nvox++
				}
			}
			if p.Volume != nvox {
				t.Errorf("R=%g: padded volume %g != voxel count %g", R, p.Volume, nvox)
			}
			ev, es, em := p.Volume/V-1, in.Surface/S-1, in.MeanCurvature/M-1
			wv, ws, wm = math.Max(wv, math.Abs(ev)), math.Max(ws, math.Abs(es)), math.Max(wm, math.Abs(em))
			if math.Abs(ev) > c.tv || math.Abs(es) > c.ts || math.Abs(em) > c.tm {
				t.Errorf("R=%g offset %.3f: V err %+.3f%% (tol %.2f%%), S err %+.3f%% (tol %.2f%%), M err %+.3f%% (tol %.2f%%)",
					R, off, 100*ev, 100*c.tv, 100*es, 100*c.ts, 100*em, 100*c.tm)
			}
			if e6 != 1 || e26 != 1 {
				t.Errorf("R=%g offset %.3f: χ6=%d χ26=%d, want 1", R, off, e6, e26)
			}
		}
		t.Logf("R=%5.1f, 8 offsets: largest |error| V %.3f%%  S %.3f%%  M %.3f%%", R, 100*wv, 100*ws, 100*wm)
	}
}

// Solid torus V = 2π²Rr², S = 4π²Rr, M = 2π²R, χ = 0, at 6 centre offsets;
// hollow ball χ = 2. Source: analytic geometry (science.md).
// Tolerances: twice the largest |error| over 300 random offsets (R = 20,
// r = 7, measured 2026-12-04): V 2.11 %, S 2.49 %, M 3.37 %. M is mostly
// biased low (typically −1.7…−2.2 %, range −2.8…+3.4 %): the 13-direction
// planar-section estimator on a non-convex body; 3 directions would give
// −15 % (science.md).
func TestTorusAndShell(t *testing.T) {
	s := phase.Of(1)
	R, r := 20.0, 7.0
	rng := rand.New(rand.NewPCG(8, 9))
	for k := 0; k < 6; k++ {
		lab := volume.NewShape[uint8](2*int(r)+8, 2*int(R+r)+8, 2*int(R+r)+8, 1)
		sz := lab.Box.Size()
		synth.Torus(lab, [3]float64{float64(sz[0]-1)/2 + rng.Float64(), float64(sz[1]-1)/2 + rng.Float64(), float64(sz[2]-1)/2 + rng.Float64()}, R, r, 1)
		p, in, e6, e26, err := functionals(lab, s)
		if err != nil {
			t.Fatal(err)
		}
		ev := p.Volume/(2*math.Pi*math.Pi*R*r*r) - 1
		es := in.Surface/(4*math.Pi*math.Pi*R*r) - 1
		em := in.MeanCurvature/(2*math.Pi*math.Pi*R) - 1
		t.Logf("torus R=%g r=%g: V err %+.3f%%  S err %+.3f%%  M err %+.3f%%  χ6=%d χ26=%d", R, r, 100*ev, 100*es, 100*em, e6, e26)
		if e6 != 0 || e26 != 0 {
			t.Errorf("torus χ6=%d χ26=%d, want 0", e6, e26)
		}
		if math.Abs(ev) > 0.042 || math.Abs(es) > 0.05 || math.Abs(em) > 0.067 {
			t.Errorf("torus: V err %.2f%% (tol 4.2%%), S err %.2f%% (tol 5%%), M err %.2f%% (tol 6.7%%)", 100*ev, 100*es, 100*em)
		}
	}

	lab := volume.NewShape[uint8](50, 50, 50, 1)
	synth.Shell(lab, [3]float64{24.6, 24.3, 24.8}, 10, 20, 1)
	_, _, e6, e26, err := functionals(lab, s)
	if err != nil {
		t.Fatal(err)
	}
	if e6 != 2 || e26 != 2 {
		t.Errorf("hollow ball χ6=%d χ26=%d, want 2", e6, e26)
	}
}

// Capsules (all points within r of a segment of length h: a cylinder with
// hemispherical ends) at 6 random axis orientations and centre offsets per
// size: V = πr²h + 4πr³/3, S = 2πrh + 4πr², M = πh + 4πr (mean breadth
// h/2 + 2r), χ = 1. Source: analytic geometry (Steiner formula of the
// Minkowski sum of a segment and a ball).
//
// Tolerances twice the largest |error| over 60 orientations per size
// (2026-12-04; S also over the 40 of mesh.TestCroftonAnalyticAreas):
//
//	r, h     V max   S max   M max
//	6, 30    1.04 %  1.43 %  1.88 %
//	10, 40   0.22 %  1.01 %  2.66 %
//	16, 48   0.20 %  1.01 %  2.44 %
//
// M on the cylindrical part is the least accurate functional (the lattice
// sections of a tilted cylinder are digitised ellipses).
func TestCapsules(t *testing.T) {
	s := phase.Of(1)
	rng := rand.New(rand.NewPCG(31, 32))
	for _, c := range []struct{ r, h, tv, ts, tm float64 }{
		{6, 30, 0.021, 0.029, 0.038},
		{10, 40, 0.0045, 0.02, 0.053},
		{16, 48, 0.0041, 0.02, 0.049},
	} {
		r, h := c.r, c.h
		for k := 0; k < 6; k++ {
			u := unit([3]float64{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()})
			n := int(h+2*r) + 8
			lab := volume.NewShape[uint8](n, n, n, 1)
			o := [3]float64{float64(n-1)/2 + rng.Float64(), float64(n-1)/2 + rng.Float64(), float64(n-1)/2 + rng.Float64()}
			synth.Fill(lab, 1, func(z, y, x float64) bool {
				p := [3]float64{z - o[0], y - o[1], x - o[2]}
				d := math.Max(-h/2, math.Min(h/2, p[0]*u[0]+p[1]*u[1]+p[2]*u[2]))
				q := [3]float64{p[0] - d*u[0], p[1] - d*u[1], p[2] - d*u[2]}
				return q[0]*q[0]+q[1]*q[1]+q[2]*q[2] <= r*r
			})
			p, in, e6, e26, err := functionals(lab, s)
			if err != nil {
				t.Fatal(err)
			}
			V := math.Pi*r*r*h + 4*math.Pi*r*r*r/3
			S := 2*math.Pi*r*h + 4*math.Pi*r*r
			M := math.Pi*h + 4*math.Pi*r
			ev, es, em := p.Volume/V-1, in.Surface/S-1, in.MeanCurvature/M-1
			t.Logf("capsule r=%g h=%g axis %.3f: V err %+.3f%%  S err %+.3f%%  M err %+.3f%%  χ6=%d χ26=%d", r, h, u, 100*ev, 100*es, 100*em, e6, e26)
			if math.Abs(ev) > c.tv || math.Abs(es) > c.ts || math.Abs(em) > c.tm {
				t.Errorf("capsule r=%g h=%g axis %.3f: V err %+.3f%% (tol %.2f%%), S err %+.3f%% (tol %.1f%%), M err %+.3f%% (tol %.1f%%)",
					r, h, u, 100*ev, 100*c.tv, 100*es, 100*c.ts, 100*em, 100*c.tm)
			}
			if e6 != 1 || e26 != 1 {
				t.Errorf("capsule r=%g h=%g axis %.3f: χ6=%d χ26=%d, want 1", r, h, u, e6, e26)
			}
		}
	}
}

// randomFrame returns a random orthonormal frame (Gram–Schmidt on Gaussian
// vectors).
func randomFrame(rng *rand.Rand) [3][3]float64 {
	var e [3][3]float64
	for i := 0; i < 3; i++ {
		for {
			v := [3]float64{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}
			for j := 0; j < i; j++ {
				d := v[0]*e[j][0] + v[1]*e[j][1] + v[2]*e[j][2]
				for k := range v {
					v[k] -= d * e[j][k]
				}
			}
			if l := math.Sqrt(v[0]*v[0] + v[1]*v[1] + v[2]*v[2]); l > 1e-3 {
				e[i] = [3]float64{v[0] / l, v[1] / l, v[2] / l}
				break
			}
		}
	}
	return e
}

// Rectangular boxes a×b×c at 6 random orientations and centre offsets per
// size: V = abc, M = π(a+b+c) (the edges carry all of M: ½·length·π/2 per
// edge; mean breadth (a+b+c)/2), χ26 = 1. Source: analytic geometry.
// (S of the same boxes is checked in mesh.TestCroftonAnalyticAreas.)
//
// Tolerances twice the largest |error| over 40 orientations (2026-12-04):
//
//	box        V max   M max (range)
//	8×12×20    1.04 %  6.5 % (−6.5…+4.2 %)
//	16×24×30   0.61 %  6.1 % (−6.1…+5.9 %)
//	30×40×50   0.10 %  7.6 % (−3.7…+7.6 %)
//
// M of sharp edges depends on the edge orientation and does not shrink with
// size (as at concave creases, TestTwoBallCreases). χ6 is not checked: a
// digitised sharp corner can leave a voxel joined to the box by an edge or
// a vertex only, a second 6-component (seen in 2 of 120 boxes).
func TestBoxes(t *testing.T) {
	s := phase.Of(1)
	rng := rand.New(rand.NewPCG(41, 42))
	for _, c := range []struct {
		a      [3]float64
		tv, tm float64
	}{
		{[3]float64{8, 12, 20}, 0.021, 0.13},
		{[3]float64{16, 24, 30}, 0.012, 0.123},
		{[3]float64{30, 40, 50}, 0.002, 0.15},
	} {
		a := c.a
		for k := 0; k < 6; k++ {
			e := randomFrame(rng)
			n := int(math.Sqrt(a[0]*a[0]+a[1]*a[1]+a[2]*a[2])) + 6
			lab := volume.NewShape[uint8](n, n, n, 1)
			o := [3]float64{float64(n-1)/2 + rng.Float64(), float64(n-1)/2 + rng.Float64(), float64(n-1)/2 + rng.Float64()}
			synth.Fill(lab, 1, func(z, y, x float64) bool {
				p := [3]float64{z - o[0], y - o[1], x - o[2]}
				for i := 0; i < 3; i++ {
					if math.Abs(p[0]*e[i][0]+p[1]*e[i][1]+p[2]*e[i][2]) > a[i]/2 {
						return false
					}
				}
				return true
			})
			p, in, e6, e26, err := functionals(lab, s)
			if err != nil {
				t.Fatal(err)
			}
			ev := p.Volume/(a[0]*a[1]*a[2]) - 1
			em := in.MeanCurvature/(math.Pi*(a[0]+a[1]+a[2])) - 1
			t.Logf("box %g×%g×%g, orientation %d: V err %+.3f%%  M err %+.2f%%  χ6=%d χ26=%d", a[0], a[1], a[2], k, 100*ev, 100*em, e6, e26)
			if math.Abs(ev) > c.tv || math.Abs(em) > c.tm || e26 != 1 {
				t.Errorf("box %g×%g×%g, orientation %d: V err %+.3f%% (tol %.1f%%), M err %+.2f%% (tol %.1f%%), χ26=%d (want 1)",
					a[0], a[1], a[2], k, 100*ev, 100*c.tv, 100*em, 100*c.tm, e26)
			}
		}
	}
}

// Small digital objects with known topology, where 6- and 26-connectivity
// differ. Source: digital topology (Kong & Rosenfeld 1989, Comput. Vision
// Graph. Image Process. 48:357), from memory.
func TestDigitalTopology(t *testing.T) {
	s := phase.Of(1)
	mk := func(pts ...[3]int) *volume.Labels {
		lab := volume.NewShape[uint8](4, 4, 4, 1)
		for _, p := range pts {
			lab.Set(p[0], p[1], p[2], 1)
		}
		return lab
	}
	for _, c := range []struct {
		name    string
		lab     *volume.Labels
		e6, e26 int64
	}{
		{"single voxel", mk([3]int{1, 1, 1}), 1, 1},
		{"two diagonal voxels", mk([3]int{1, 1, 1}, [3]int{2, 2, 2}), 2, 1},
		{"face-diagonal pair", mk([3]int{1, 1, 1}, [3]int{1, 2, 2}), 2, 1},
		{"ring of 8 around a hole", mk([3]int{1, 0, 0}, [3]int{1, 0, 1}, [3]int{1, 0, 2}, [3]int{1, 1, 2}, [3]int{1, 2, 2}, [3]int{1, 2, 1}, [3]int{1, 2, 0}, [3]int{1, 1, 0}), 0, 0},
		{"diagonal ring of 4", mk([3]int{1, 0, 1}, [3]int{1, 1, 2}, [3]int{1, 2, 1}, [3]int{1, 1, 0}), 4, 0},
	} {
		wp, _ := paddedAndInterior(c.lab.Box)
		h := Cells(c.lab, s, wp)
		e6, e26, err := Euler(&h)
		if err != nil || e6 != c.e6 || e26 != c.e26 {
			t.Errorf("%s: χ6=%d χ26=%d (%v), want %d, %d", c.name, e6, e26, err, c.e6, c.e26)
		}
	}
}

// The 13-direction Crofton weights are the spherical Voronoi areas of the
// 26 lattice directions (Legland et al. 2007): recomputed by quadrature on a
// Fibonacci sphere lattice. Source: Legland, Kiêu & Devaux 2007.
func TestCroftonWeightsAreVoronoiAreas(t *testing.T) {
	var dirs [][3]float64
	var class []int
	for z := -1; z <= 1; z++ {
		for y := -1; y <= 1; y++ {
			for x := -1; x <= 1; x++ {
				n := abs(z) + abs(y) + abs(x)
				if n == 0 {
					continue
				}
				l := math.Sqrt(float64(n))
				dirs = append(dirs, [3]float64{float64(z) / l, float64(y) / l, float64(x) / l})
				class = append(class, n)
			}
		}
	}
	const N = 400000
	var count [4]float64
	golden := math.Pi * (3 - math.Sqrt(5))
	for i := 0; i < N; i++ {
		zz := 1 - (2*float64(i)+1)/N
		r := math.Sqrt(1 - zz*zz)
		ph := golden * float64(i)
		p := [3]float64{zz, r * math.Cos(ph), r * math.Sin(ph)}
		best, bi := -2.0, 0
		for j, d := range dirs {
			if v := d[0]*p[0] + d[1]*p[1] + d[2]*p[2]; v > best {
				best, bi = v, j
			}
		}
		count[class[bi]]++
	}
	// Fraction of the sphere per direction, times 2 (13 directions sum to 1).
	got := [4]float64{0, 2 * count[1] / N / 6, 2 * count[2] / N / 12, 2 * count[3] / N / 8}
	want := [4]float64{0, WeightAxis, WeightFaceDiagonal, WeightBodyDiagonal}
	for k := 1; k <= 3; k++ {
		t.Logf("class %d: quadrature %.7f, Legland %.7f", k, got[k], want[k])
		if math.Abs(got[k]/want[k]-1) > 2e-4 {
			t.Errorf("direction class %d: Voronoi weight %.7f, table %.7f", k, got[k], want[k])
		}
	}
}

// Planes tilted against the grid: the 13-direction surface estimate must lie
// in the −7 %…+2 % band (science.md, Legland et al. 2007; the exact extremes
// of the weights' response are −7.34 % for axis normals and about +2.2 %,
// so the band is widened by 0.5 %) and match the
// estimator's own directional response 2Σ c_i|n·d_i| (derived from the
// Crofton discretisation) within 0.5 %. The analytic area is that of the
// plane inside the cube spanned by the interior cells, [0, L]³ with L = n−1,
// from the derivative of the cube–half-space volume (inclusion–exclusion
// over the cube's vertices).
func TestTiltedPlanes(t *testing.T) {
	const n = 72
	L := float64(n - 1)
	s := phase.Of(1)
	dirs, cw := directions()
	normals := [][3]float64{{1, 0, 0}, {1, 1, 0}, {1, 1, 1}, {1, 2, 3}, {3, 1, 0.2}, {0.35, 0.8, 0.49}, {2, 0.3, 0.9}}
	rng := rand.New(rand.NewPCG(11, 13))
	for i := 0; i < 5; i++ {
		normals = append(normals, [3]float64{rng.Float64() + 0.05, rng.Float64() + 0.05, rng.Float64() + 0.05})
	}
	for _, nv := range normals {
		u := unit(nv)
		// Plane through the cube centre, offset by an irrational fraction.
		t0 := (u[0]+u[1]+u[2])*L/2 + 0.137
		lab := volume.NewShape[uint8](n, n, n, 1)
		synth.Fill(lab, 1, func(z, y, x float64) bool { return u[0]*z+u[1]*y+u[2]*x < t0 })
		_, in, _, _, _ := functionals(lab, s)
		area := planeAreaInCube(u, t0, L)
		var resp float64
		for k, d := range dirs {
			l := math.Sqrt(float64(d[0]*d[0] + d[1]*d[1] + d[2]*d[2]))
			resp += 2 * cw[k] * math.Abs(u[0]*float64(d[0])+u[1]*float64(d[1])+u[2]*float64(d[2])) / l
		}
		rel := in.Surface/area - 1
		t.Logf("normal %.3f: surface err %+.2f%%, predicted %+.2f%%", u, 100*rel, 100*(resp-1))
		if rel < -0.075 || rel > 0.025 {
			t.Errorf("normal %v: surface error %.2f%% outside −7…+2 %%", u, 100*rel)
		}
		if math.Abs(in.Surface/(area*resp)-1) > 0.005 {
			t.Errorf("normal %v: surface %.1f vs predicted %.1f", u, in.Surface, area*resp)
		}
	}
}

func unit(v [3]float64) [3]float64 {
	l := math.Sqrt(v[0]*v[0] + v[1]*v[1] + v[2]*v[2])
	return [3]float64{v[0] / l, v[1] / l, v[2] / l}
}

// planeAreaInCube returns the area of {p: u·p = t} ∩ [0,L]³ for a unit
// normal u, via A = dV/dt with
// V(t) = Σ_v (−1)^{k(v)} max(0, t − u·v)³ / (6 u0 u1 u2) over the cube
// vertices v (k = number of coordinates equal to L). Zero components are
// handled by extruding: the area is then L times the 2-D section length, or
// L² for an axis-aligned plane.
func planeAreaInCube(u [3]float64, t, L float64) float64 {
	var nz []float64
	for _, c := range u {
		if c != 0 {
			nz = append(nz, math.Abs(c))
		}
	}
	switch len(nz) {
	case 1:
		return L * L
	case 2:
		// Segment length of a·y + b·x = t in [0,L]² times L:
		// len = dA/dt with A(t) = Σ (−1)^k max(0, t − n·v)² / (2ab), scaled by
		// 1 (unit normal).
		a, b := nz[0], nz[1]
		var s float64
		for _, v := range [][2]float64{{0, 0}, {L, 0}, {0, L}, {L, L}} {
			k := 0
			for _, c := range v {
				if c == L {
					k++
				}
			}
			if d := t - a*v[0] - b*v[1]; d > 0 {
				s += math.Pow(-1, float64(k)) * d
			}
		}
		return L * s / (a * b)
	}
	var s float64
	for v := 0; v < 8; v++ {
		k := 0
		var dot float64
		for a := 0; a < 3; a++ {
			if v>>a&1 == 1 {
				k++
				dot += nz[a] * L
			}
		}
		if d := t - dot; d > 0 {
			s += math.Pow(-1, float64(k)) * d * d
		}
	}
	return s / (2 * nz[0] * nz[1] * nz[2])
}

// Complement symmetries of the derived tables: surface weights are the same
// for a phase and its complement, mean-curvature weights change sign (the
// self-dual planar Euler choice, package doc), uniform cells weigh nothing.
// Source: derivation in the package doc.
func TestWeightSymmetries(t *testing.T) {
	_, S, M, _ := Weights()
	for c := 0; c < 256; c++ {
		if math.Abs(M[c]+M[255-c]) > 1e-12 {
			t.Fatalf("M weights not antisymmetric at %d: %g, %g", c, M[c], M[255-c])
		}
		if math.Abs(S[c]-S[255-c]) > 1e-12 {
			t.Fatalf("S weights not symmetric at %d", c)
		}
	}
	if S[0] != 0 || S[255] != 0 || M[0] != 0 || M[255] != 0 {
		t.Errorf("uniform cells carry weight: S %g %g, M %g %g", S[0], S[255], M[0], M[255])
	}
}

// Unions of two balls (radius r, centre distance d): S and M by additivity,
// M(A∪B) = M(A) + M(B) − M(A∩B), with the lens A∩B of half-angle α,
// cos α = d/2r: two caps 2πr(1−cos α) each plus the edge term
// ½(π−2α)·2πr sin α. Source: analytic geometry (Steiner/edge formula for
// M = ∫H dS, common practice).
//
// This documents a limitation of the planar-section M estimator: lattice
// sections of the sharp concave crease where the balls meet show spurious
// one-pixel holes, so M is too low by an amount proportional to the crease
// length that does not vanish with resolution (measured −1.2…−1.5 % at
// d/r = 1.5 and −4.3…−5.2 % at d/r = 1.9 for r = 20…40; the continuous
// 13-direction quadrature itself is within 0.1 %). Checks: S within 1 %,
// M within −7 %…+1 %, averaged over random orientations (fixed seed).
func TestTwoBallCreases(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	s := phase.Of(1)
	const r = 20.0
	for _, q := range []float64{1.0, 1.5, 1.9} {
		d := q * r
		var es, em float64
		const k = 4
		for i := 0; i < k; i++ {
			u := unit([3]float64{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()})
			n := int(2*r+d) + 8
			lab := volume.NewShape[uint8](n, n, n, 1)
			c := float64(n-1)/2 + rng.Float64()
			c1 := [3]float64{c - u[0]*d/2, c - u[1]*d/2, c - u[2]*d/2}
			synth.Ball(lab, c1, r, 1)
			synth.Ball(lab, [3]float64{c1[0] + d*u[0], c1[1] + d*u[1], c1[2] + d*u[2]}, r, 1)
			_, in, _, _, _ := functionals(lab, s)
			ca := d / 2 / r
			al := math.Acos(ca)
			M := 8*math.Pi*r - (4*math.Pi*r*(1-ca) + 0.5*(math.Pi-2*al)*2*math.Pi*r*math.Sin(al))
			S := 8*math.Pi*r*r - 4*math.Pi*r*r*(1-ca)
			es += (in.Surface/S - 1) / k
			em += (in.MeanCurvature/M - 1) / k
		}
		t.Logf("two balls d/r=%.1f: S err %+.2f%%, M err %+.2f%%", q, 100*es, 100*em)
		if math.Abs(es) > 0.01 || em < -0.07 || em > 0.01 {
			t.Errorf("two balls d/r=%.1f: S err %.2f%%, M err %.2f%%", q, 100*es, 100*em)
		}
	}
}
