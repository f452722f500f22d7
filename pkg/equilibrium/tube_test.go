package equilibrium

import (
	"math"
	"testing"
)

// coneTube is a straight circular tube along z in a solid block, radius
// R(z) = R0 − z·tan α (z from the inlet face, voxel centres), open to the
// nonwetting reservoir at z = 0 and to the wetting reservoir at the far end.
type coneTube struct {
	R0, Alpha float64 // voxels, degrees
	NZ        int
}

func (c coneTube) radius(z float64) float64 { return c.R0 - z*math.Tan(c.Alpha*math.Pi/180) }

func (c coneTube) shape() [3]int {
	n := int(2*c.R0) + 6
	return [3]int{c.NZ, n, n}
}

func (c coneTube) axis() (float64, float64) {
	s := c.shape()
	return float64(s[1]-1) / 2, float64(s[2]-1) / 2
}

func (c coneTube) pore() []bool {
	s := c.shape()
	cy, cx := c.axis()
	m := make([]bool, s[0]*s[1]*s[2])
	i := 0
	for z := 0; z < s[0]; z++ {
		r := c.radius(float64(z))
		for y := 0; y < s[1]; y++ {
			for x := 0; x < s[2]; x++ {
				m[i] = sq(float64(y)-cy)+sq(float64(x)-cx) < r*r
				i++
			}
		}
	}
	return m
}

// slab returns a nonwetting mask of the pore voxels with z < h.
func slab(pore []bool, shape [3]int, h int) []bool {
	m := make([]bool, len(pore))
	for i := range m {
		m[i] = pore[i] && i/(shape[1]*shape[2]) < h
	}
	return m
}

// zeroCrossings returns the points where φ changes sign between two pore
// voxels along z, linearly interpolated: (z, y, x).
func zeroCrossings(s *Solver, keep func(z, y, x float64) bool) [][3]float64 {
	var pts [][3]float64
	n := s.shape
	for y := 0; y < n[1]; y++ {
		for x := 0; x < n[2]; x++ {
			for z := 0; z+1 < n[0]; z++ {
				p, q := s.idx(z, y, x), s.idx(z+1, y, x)
				if s.kind[p] != kPore || s.kind[q] != kPore {
					continue
				}
				a, b := s.phi[p], s.phi[q]
				if (a < 0) == (b < 0) {
					continue
				}
				t := a / (a - b)
				pt := [3]float64{float64(z) + t, float64(y), float64(x)}
				if keep(pt[0], pt[1], pt[2]) {
					pts = append(pts, pt)
				}
			}
		}
	}
	return pts
}

// fitSphere fits |p − c|² = ρ² by linear least squares (algebraic fit).
func fitSphere(pts [][3]float64) (c [3]float64, rho float64) {
	// Unknowns D (3), G: |p|² + D·p + G = 0.
	var m [4][5]float64
	for _, p := range pts {
		row := [4]float64{p[0], p[1], p[2], 1}
		rhs := -(p[0]*p[0] + p[1]*p[1] + p[2]*p[2])
		for i := 0; i < 4; i++ {
			for j := 0; j < 4; j++ {
				m[i][j] += row[i] * row[j]
			}
			m[i][4] += row[i] * rhs
		}
	}
	for i := 0; i < 4; i++ {
		piv := i
		for r := i + 1; r < 4; r++ {
			if math.Abs(m[r][i]) > math.Abs(m[piv][i]) {
				piv = r
			}
		}
		m[i], m[piv] = m[piv], m[i]
		for r := 0; r < 4; r++ {
			if r != i {
				f := m[r][i] / m[i][i]
				for k := i; k < 5; k++ {
					m[r][k] -= f * m[i][k]
				}
			}
		}
	}
	var sol [4]float64
	for i := range sol {
		sol[i] = m[i][4] / m[i][i]
	}
	c = [3]float64{-sol[0] / 2, -sol[1] / 2, -sol[2] / 2}
	rho = math.Sqrt(c[0]*c[0] + c[1]*c[1] + c[2]*c[2] - sol[3])
	return c, rho
}

// coneMeniscus relaxes a meniscus in the tapered tube c at the pressure
// whose equilibrium contact line sits at radius rcl, and returns the total
// curvature 2/ρ of the sphere fitted to the interface (points more than
// one voxel from the wall), P, and the contact angle implied by the fit:
// the sphere meets the cone r = R(z) where cos(θ + α) = R_cl/ρ.
func coneMeniscus(t *testing.T, c coneTube, theta, rcl float64) (kappa, P, thetaFit float64) {
	t.Helper()
	sh := c.shape()
	pore := c.pore()
	s, err := New(pore, sh, Options{Theta: theta})
	if err != nil {
		t.Fatal(err)
	}
	// Start a few voxels inside the tube: the mouth's edge pins a meniscus
	// (Gibbs' inequality), which is not what this check is about.
	if err := s.SetNonwetting(slab(pore, sh, 4)); err != nil {
		t.Fatal(err)
	}
	P = 2 * math.Cos((theta+c.Alpha)*math.Pi/180) / rcl
	st, err := s.Relax(P)
	if err != nil || !st.Converged {
		t.Fatalf("relaxation: %+v, %v", st, err)
	}
	cy, cx := c.axis()
	pts := zeroCrossings(s, func(z, y, x float64) bool { return math.Hypot(y-cy, x-cx) < c.radius(z)-1 })
	if len(pts) < 50 {
		t.Fatalf("%d interface points", len(pts))
	}
	ctr, rho := fitSphere(pts)
	lo, hi := ctr[0], float64(sh[0])
	for k := 0; k < 60; k++ {
		m := (lo + hi) / 2
		if sq(m-ctr[0])+sq(c.radius(m)) < rho*rho {
			lo = m
		} else {
			hi = m
		}
	}
	r := c.radius(lo)
	thetaFit = math.Acos(r/rho)*180/math.Pi - c.Alpha
	t.Logf("θ %g°: %d steps, t %.0f; %d points, ρ %.2f, κ 2/ρ %.4f vs P %.4f (%+.1f %%); R_cl %.2f (want %.2f); θ from the fit %.1f°",
		theta, st.Steps, st.Time, len(pts), rho, 2/rho, P, 100*(2/rho/P-1), r, rcl, thetaFit)
	return 2 / rho, P, thetaFit
}

// TestJurinTaperedTube: in a tube narrowing by a half-angle α the
// equilibrium meniscus is a spherical cap that meets the wall at θ, so its
// total curvature is 2 cos(θ+α)/R_cl where it touches the wall at radius
// R_cl (Young–Laplace with Jurin's geometry, de Gennes, Brochard-Wyart &
// Quéré 2004, ch. 1; α = 0 is Jurin's law κ = 2 cos θ/R; the α term is
// plane geometry, our derivation: sphere normal and cone normal at the
// contact line). A straight tube holds no meniscus at P ≠ 2 cos θ/R, the
// taper gives each P one stable position.
//
// Measured (2026-12-05, R0 14, α 8°, R_cl 10, start 4 voxels in): θ 30° →
// κ −1.7 %, θ from the fit 26.0° (−4.0°); θ 60° → κ −0.3 %, 52.7° (−7.3°).
// The solver holds the curvature; the angle on this staircase wall is the
// known limit of the package doc.
func TestJurinTaperedTube(t *testing.T) {
	angles := []float64{30, 60}
	if testing.Short() {
		angles = []float64{60}
	}
	for _, th := range angles {
		k, P, thFit := coneMeniscus(t, coneTube{R0: 14, Alpha: 8, NZ: 42}, th, 10)
		// Constant curvature equal to the prescribed Pc/σ: tolerance 4 %
		// (2× the measured 1.7 %).
		if math.Abs(k/P-1) > 0.04 {
			t.Errorf("θ %g°: meniscus curvature %.4f, prescribed %.4f", th, k, P)
		}
		// Contact angle: tolerance 15° (2× the measured 7.3°).
		if math.Abs(thFit-th) > 15 {
			t.Errorf("θ %g°: contact angle from the cap %.1f°", th, thFit)
		}
	}
}

// reaches reports whether the nonwetting phase of s reaches slice z.
func reaches(s *Solver, z int) bool {
	n := s.Shape()
	for y := 0; y < n[1]; y++ {
		for x := 0; x < n[2]; x++ {
			p := s.idx(z, y, x)
			if s.kind[p] == kPore && s.phi[p] < 0 {
				return true
			}
		}
	}
	return false
}

// TestJurinEntry: a meniscus enters a straight capillary tube of radius R
// only when Pc/σ exceeds 2 cos θ/R (Young–Laplace, Jurin; de Gennes et al.
// 2004, ch. 1). Below, it holds near the mouth; above, it runs through
// (still moving when the time limit ends, or out at the far end).
//
// Measured (2026-12-05, R 10, θ 45°): holds at 0.85× and 0.95×, still
// moving at the time limit at 1.05× (slowly), 1.1× and 1.2×: the entry lies
// within ±5 % of 2 cos θ/R. The check brackets it by 0.9× and 1.1× (2× the
// measured bracket).
func TestJurinEntry(t *testing.T) {
	const R, th = 10.0, 45.0
	entry := 2 * math.Cos(th*math.Pi/180) / R
	c := coneTube{R0: R, NZ: 24}
	sh := c.shape()
	pore := c.pore()
	for _, f := range []float64{0.9, 1.1} {
		s, err := New(pore, sh, Options{Theta: th, MaxTime: 600})
		if err != nil {
			t.Fatal(err)
		}
		s.SetNonwetting(slab(pore, sh, 4))
		st, _ := s.Relax(f * entry)
		passed := reaches(s, sh[0]-1) || !st.Converged
		deep := reaches(s, 12)
		t.Logf("P = %.2f × 2cosθ/R: %+v; reaches z 12 %v, outlet %v", f, st, deep, reaches(s, sh[0]-1))
		if f < 1 && (deep || !st.Converged) {
			t.Errorf("P = %.2f × entry: the meniscus entered the tube", f)
		}
		if f > 1 && !passed {
			t.Errorf("P = %.2f × entry: the meniscus did not pass the tube", f)
		}
	}
}
