package equilibrium

import (
	"flag"
	"math"
	"testing"
)

// polygonTube is a straight tube along z whose cross-section is a regular
// polygon of nc sides (3 or 4) with inscribed radius R (voxels), in solid.
// The square's walls lie on voxel faces; the triangle's are staircases.
type polygonTube struct {
	Sides int
	R     float64
	NZ    int
}

// beta is the corner half-angle.
func (t polygonTube) beta() float64 { return math.Pi/2 - math.Pi/float64(t.Sides) }

func (t polygonTube) shape() [3]int {
	n := int(2*t.R) + 8
	if t.Sides == 3 {
		n = int(4*t.R) + 8 // circumradius 2R
	}
	return [3]int{t.NZ, n, n}
}

// centre of the cross-section (y, x): for the square, walls at
// centre ± R fall on voxel faces.
func (t polygonTube) centre() (float64, float64) {
	s := t.shape()
	c := float64(s[1]) / 2
	if t.Sides == 4 {
		return c - 0.5, c - 0.5
	}
	return c, c
}

// inside reports whether (y, x) lies in the cross-section.
func (t polygonTube) inside(y, x float64) bool {
	cy, cx := t.centre()
	for k := 0; k < t.Sides; k++ {
		a := 2*math.Pi*float64(k)/float64(t.Sides) + math.Pi/2
		if (y-cy)*math.Sin(a)+(x-cx)*math.Cos(a) > t.R {
			return false
		}
	}
	return true
}

// pore is the tube; its first slice is a plate with a central hole of
// radius R/2 (the inlet), so that no corner touches the reservoir.
func (t polygonTube) pore() []bool {
	s := t.shape()
	cy, cx := t.centre()
	m := make([]bool, s[0]*s[1]*s[2])
	i := 0
	for z := 0; z < s[0]; z++ {
		for y := 0; y < s[1]; y++ {
			for x := 0; x < s[2]; x++ {
				m[i] = t.inside(float64(y), float64(x))
				if z == 0 && math.Hypot(float64(y)-cy, float64(x)-cx) > t.R/2 {
					m[i] = false
				}
				i++
			}
		}
	}
	return m
}

// cornerArea is the wetting area held in one corner of half-angle β by an
// arc meniscus of radius r meeting both walls at θ (radians):
// A = r²[cos θ cos(θ+β)/sin β − (π/2 − θ − β)].
// Source: Mason & Morrow 1991, J. Colloid Interface Sci. 141:262 (the
// corner-area expression, from memory), derived again here: the kite of
// apex, contact points and arc centre (centre at r cos θ/sin β from the
// apex, contact points at b = r cos(θ+β)/sin β) less the sector of angle
// π − 2β − 2θ.
func cornerArea(r, th, beta float64) float64 {
	return r * r * (math.Cos(th)*math.Cos(th+beta)/math.Sin(beta) - (math.Pi/2 - th - beta))
}

// entryRadius solves the Mayer–Stowe–Princen force balance for the
// terminal meniscus of a regular polygonal tube of nc corners, inscribed
// radius R, contact angle θ: A_n/r = L_nw + L_ns cos θ, with A_n the
// nonwetting area, L_nw the arc length and L_ns the nonwetting–solid
// perimeter, r = σ/Pc the arc radius. Source: Mason & Morrow 1991,
// J. Colloid Interface Sci. 141:262; Ma, Mason & Morrow 1996, Colloids
// Surf. A 117:273 (MS-P method; the closed forms here are our derivation).
// Check: square, θ = 0 gives r = R/(1 + √π/2) (Mason & Morrow's square-tube
// result, from memory).
func entryRadius(nc int, R, th float64) float64 {
	beta := math.Pi/2 - math.Pi/float64(nc)
	n := float64(nc)
	area := n * R * R / math.Tan(beta)
	perim := 2 * n * R / math.Tan(beta)
	f := func(r float64) float64 {
		an := area - n*cornerArea(r, th, beta)
		lnw := n * r * (math.Pi - 2*beta - 2*th)
		lns := perim - 2*n*r*math.Cos(th+beta)/math.Sin(beta)
		return an/r - lnw - lns*math.Cos(th)
	}
	lo, hi := 1e-6*R, R
	for k := 0; k < 100; k++ {
		m := (lo + hi) / 2
		if f(m) > 0 {
			lo = m
		} else {
			hi = m
		}
	}
	return (lo + hi) / 2
}

func TestEntryRadiusSquare(t *testing.T) {
	// Source: Mason & Morrow 1991 (square tube, θ = 0): r/R = 1/(1+√π/2).
	got := entryRadius(4, 1, 0)
	want := 1 / (1 + math.Sqrt(math.Pi)/2)
	if math.Abs(got-want) > 1e-9 {
		t.Fatalf("square entry radius %g, want %g", got, want)
	}
}

// sliceCrossings returns the zero crossings of φ between pore voxels along
// y and x in slice z, as (y, x).
func sliceCrossings(s *Solver, z int) [][2]float64 {
	var pts [][2]float64
	n := s.Shape()
	for y := 0; y < n[1]; y++ {
		for x := 0; x < n[2]; x++ {
			p := s.idx(z, y, x)
			if s.kind[p] != kPore {
				continue
			}
			for _, d := range [2][2]int{{1, 0}, {0, 1}} {
				if y+d[0] >= n[1] || x+d[1] >= n[2] {
					continue
				}
				q := s.idx(z, y+d[0], x+d[1])
				if s.kind[q] != kPore || (s.phi[p] < 0) == (s.phi[q] < 0) {
					continue
				}
				t := s.phi[p] / (s.phi[p] - s.phi[q])
				pts = append(pts, [2]float64{float64(y) + t*float64(d[0]), float64(x) + t*float64(d[1])})
			}
		}
	}
	return pts
}

// fitCircle fits |p − c|² = r² to 2-D points by linear least squares.
func fitCircle(pts [][2]float64) float64 {
	var m [3][4]float64
	for _, p := range pts {
		row := [3]float64{p[0], p[1], 1}
		rhs := -(p[0]*p[0] + p[1]*p[1])
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				m[i][j] += row[i] * row[j]
			}
			m[i][3] += row[i] * rhs
		}
	}
	for i := 0; i < 3; i++ {
		piv := i
		for r := i + 1; r < 3; r++ {
			if math.Abs(m[r][i]) > math.Abs(m[piv][i]) {
				piv = r
			}
		}
		m[i], m[piv] = m[piv], m[i]
		for r := 0; r < 3; r++ {
			if r != i {
				f := m[r][i] / m[i][i]
				for k := i; k < 4; k++ {
					m[r][k] -= f * m[i][k]
				}
			}
		}
	}
	d, e, g := m[0][3]/m[0][0], m[1][3]/m[1][1], m[2][3]/m[2][2]
	return math.Sqrt(d*d/4 + e*e/4 - g)
}

// cornerState relaxes the polygonal tube tb, started with a nonwetting
// cylinder of radius 0.9 R along its whole length, at P = f/r_entry, and
// returns the mean fitted arc radius over the corners, the wetting area of
// the middle cross-section (sub-voxel, from φ) and P.
func cornerState(t *testing.T, tb polygonTube, theta, f float64) (arc, wet, P float64) {
	t.Helper()
	sh := tb.shape()
	pore := tb.pore()
	s, err := New(pore, sh, Options{Theta: theta, ClosedOutlet: true})
	if err != nil {
		t.Fatal(err)
	}
	cy, cx := tb.centre()
	nw := make([]bool, len(pore))
	for i := range nw {
		y, x := (i/sh[2])%sh[1], i%sh[2]
		nw[i] = pore[i] && math.Hypot(float64(y)-cy, float64(x)-cx) < 0.9*tb.R
	}
	s.SetNonwetting(nw)
	re := entryRadius(tb.Sides, tb.R, theta*math.Pi/180)
	P = f / re
	st, err := s.Relax(P)
	if err != nil || !st.Converged {
		t.Fatalf("relaxation: %+v, %v", st, err)
	}
	z := sh[0] / 2
	for y := 0; y < sh[1]; y++ {
		for x := 0; x < sh[2]; x++ {
			p := s.idx(z, y, x)
			if s.kind[p] == kPore {
				wet += math.Max(0, math.Min(1, 0.5+s.phi[p]))
			}
		}
	}
	// Arc radius per corner: crossings nearer that corner than any other,
	// more than half a voxel from both walls.
	pts := sliceCrossings(s, z)
	beta := tb.beta()
	sum, n := 0.0, 0
	for k := 0; k < tb.Sides; k++ {
		// Corner k lies between walls k and k+1, along the bisector.
		a := 2*math.Pi*(float64(k)+0.5)/float64(tb.Sides) + math.Pi/2
		dist := tb.R / math.Sin(beta) // centre to corner
		ky, kx := cy+dist*math.Sin(a), cx+dist*math.Cos(a)
		var mine [][2]float64
		for _, p := range pts {
			if math.Hypot(p[0]-ky, p[1]-kx) > dist*math.Sin(math.Pi/float64(tb.Sides)) {
				continue
			}
			ok := true
			for _, w := range []int{k, k + 1} {
				aw := 2*math.Pi*float64(w)/float64(tb.Sides) + math.Pi/2
				if tb.R-((p[0]-cy)*math.Sin(aw)+(p[1]-cx)*math.Cos(aw)) < 0.5 {
					ok = false
				}
			}
			if ok {
				mine = append(mine, p)
			}
		}
		if len(mine) >= 4 {
			sum += fitCircle(mine)
			n++
		}
	}
	if n == 0 {
		t.Errorf("no corner arc to fit (%d crossings in slice %d; wetting area %.1f vs %.1f)", len(pts), z, wet,
			float64(tb.Sides)*cornerArea(1/P, theta*math.Pi/180, beta))
		return 0, wet, P
	}
	arc = sum / float64(n)
	want := float64(tb.Sides) * cornerArea(1/P, theta*math.Pi/180, beta)
	t.Logf("%d-gon R %g θ %g°, P = %.2f/r_entry = %.4f (arc radius %.2f): %d steps; fitted arc %.2f (%+.1f %%) over %d corners; wetting area %.1f vs %.1f (%+.1f %%)",
		tb.Sides, tb.R, theta, f, P, 1/P, st.Steps, arc, 100*(arc*P-1), n, wet, want, 100*(wet/want-1))
	return arc, wet, P
}

var cornerTable = flag.Bool("cornertable", false, "log the corner-meniscus table (arc radius and wetting area against Mason & Morrow)")

// TestCornerTable logs, with -cornertable, the arc radius and the wetting
// area of the corner menisci in square and triangular tubes against the
// analytic values (r = σ/Pc, cornerArea). It is a measurement, not a check:
// the solver misses these (measured 2026-12-05: square R 18, P 1.3/r_entry,
// θ 0°: wetting area −10 %, fitted arc +50 %; θ 30°: area +11 %, too few
// crossings to fit an arc; triangle R 12, P 1.6/r_entry, θ 0°: area −26 %,
// arc +18 %), which the package doc states. The arc fits use the few
// crossings more than half a voxel from both walls and are themselves
// rough.
func TestCornerTable(t *testing.T) {
	if !*cornerTable {
		t.Skip("run with -cornertable")
	}
	cornerState(t, polygonTube{Sides: 4, R: 18, NZ: 32}, 0, 1.3)
	cornerState(t, polygonTube{Sides: 4, R: 18, NZ: 32}, 30, 1.3)
	cornerState(t, polygonTube{Sides: 3, R: 12, NZ: 32}, 0, 1.6)
}
