package curvature_test

import (
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"sluice/pkg/curvature"
	"sluice/pkg/measure"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// cornerScene is a straight tube along z, spanning the whole image (open
// ends: the scene does not change along z, so there are no end menisci and
// nothing to close), whose cross-section is a regular polygon of Sides
// sides (4: square, 3: equilateral triangle) with inscribed radius R
// (voxels), cut in solid. The nonwetting phase fills the centre; the
// wetting phase fills each corner up to an arc meniscus of radius Arc
// meeting both walls at the contact angle Theta (degrees, through the
// wetting phase). Off shifts the cross-section (y, x) by sub-voxel
// amounts. With Off zero the square's walls lie on voxel faces; the
// triangle has one wall on a lattice plane and two staircase walls (±60°).
//
// Geometry (Mason & Morrow 1991, J. Colloid Interface Sci. 141:262; the
// placement below is our own derivation, checked numerically in
// TestCornerArcGeometry): corner half-angle β = π/2 − π/N (45° square, 30°
// triangle). A circle of radius r whose centre lies at distance h from a
// wall crosses it at the angle φ with cos φ = h/r between its radius and
// the wall normal, which is the angle between the circle and the wall, so
// h = r cos θ: the centre lies on the corner bisector at d = r cos θ/sin β
// from the apex, the contact points on the walls at b = d cos β − r sin θ
// = r cos(θ+β)/sin β from the apex, and the arc between them (on the
// apex side of the chord) spans π − 2β − 2θ. The corner holds a wetting
// layer only for θ + β < π/2. The meniscus is a cylinder of radius r:
// κ = 1/r (Young–Laplace, Pc = σ/r); its area per corner is
// r(π − 2β − 2θ)·L.
type cornerScene struct {
	Sides      int
	R, Arc     float64
	Theta      float64
	Off        [2]float64
	NZ         int
	drawnShape [3]int
}

// cornerTube returns the scene for arc radius r: the inscribed radius R is
// chosen so that, at θ = 0 (the widest corners), the contact points of
// neighbouring corners are at least 16 voxels apart on each wall (twice
// the default wall-fit radius plus the exclusion), and the same R is used
// for every θ. The tube is 24 voxels long.
func cornerTube(sides int, r, theta float64, off [2]float64) cornerScene {
	s := cornerScene{Sides: sides, Arc: r, Theta: theta, Off: off, NZ: 24}
	beta := s.beta()
	// side 2R·tan(π/N) ≥ 2·r·cot β + 16.
	s.R = math.Ceil((2*r/math.Tan(beta) + 16) / (2 * math.Tan(math.Pi/float64(sides))))
	return s
}

func (s cornerScene) beta() float64 { return math.Pi/2 - math.Pi/float64(s.Sides) }
func (s cornerScene) th() float64   { return s.Theta * math.Pi / 180 }

// kappa is the exact total curvature 1/r of the cylindrical menisci
// (1/voxel).
func (s cornerScene) kappa() float64 { return 1 / s.Arc }

// arcAngle is the angle π − 2β − 2θ the arc spans.
func (s cornerScene) arcAngle() float64 { return math.Pi - 2*s.beta() - 2*s.th() }

// arcArea is the exact w–n area of all corners over the length the
// product's Crofton areas cover: cells lie inside the image, so the tube
// of NZ slices is NZ − 1 voxels long (package measure, interiorOrigins).
func (s cornerScene) arcArea() float64 {
	return float64(s.Sides) * s.Arc * s.arcAngle() * float64(s.NZ-1)
}

// wetSection is the exact wetting cross-section of all corners.
func (s cornerScene) wetSection() float64 {
	return float64(s.Sides) * cornerArea(s.Arc, s.th(), s.beta())
}

// cornerArea is the wetting area held in one corner of half-angle β by an
// arc of radius r meeting both walls at θ (radians):
// r²[cos θ cos(θ+β)/sin β + θ + β − π/2]. Source: Mason & Morrow 1991,
// J. Colloid Interface Sci. 141:262 (the formula of
// pkg/equilibrium/corner_test.go cornerArea, there from memory and
// derived again: the kite of apex, contact points and arc centre less the
// sector of angle π − 2β − 2θ); checked here by sampling the drawn
// region (TestCornerArcGeometry).
func cornerArea(r, th, beta float64) float64 {
	return r * r * (math.Cos(th)*math.Cos(th+beta)/math.Sin(beta) + th + beta - math.Pi/2)
}

// gap is the largest distance of the arc from the walls, at its middle:
// (d − r) sin β = r(cos θ − sin β). Band voxels whose foot lies within
// the exclusion (3 voxels by default) of the solid are left out, so an
// arc with gap ≲ 3 has nothing left to measure.
func (s cornerScene) gap() float64 { return s.Arc * (math.Cos(s.th()) - math.Sin(s.beta())) }

// shape returns the image size and the centre of the cross-section (y, x).
func (s cornerScene) shape() (nz, ny, nx int, cy, cx float64) {
	if s.Sides == 4 {
		// Walls at c ± R; c half-integer puts them on voxel faces.
		n := 2*int(s.R) + 10
		c := float64(n)/2 - 0.5
		return s.NZ, n, n, c + s.Off[0], c + s.Off[1]
	}
	// Triangle: wall y = cy + R, apex at y = cy − 2R, x within ±√3 R.
	ny = 3*int(s.R) + 10
	nx = int(2*math.Sqrt(3)*s.R) + 10
	return s.NZ, ny, nx, 2*s.R + 5 + s.Off[0], float64(nx)/2 - 0.5 + s.Off[1]
}

// normal is the outward unit normal (y, x) of wall k.
func (s cornerScene) normal(k int) [2]float64 {
	a := 2*math.Pi*float64(k)/float64(s.Sides) + math.Pi/2
	return [2]float64{math.Sin(a), math.Cos(a)}
}

// corner is the geometry of the corner between walls k and k+1: apex A,
// inward unit bisector u, arc centre C, contact points P1 (on wall k) and
// P2 (on wall k+1), all (y, x).
type corner struct{ A, u, C, P1, P2 [2]float64 }

func (s cornerScene) corner(k int) corner {
	_, _, _, cy, cx := s.shape()
	n := float64(s.Sides)
	m := 2*math.Pi*float64(k)/n + math.Pi/2 + math.Pi/n
	rv := s.R / math.Cos(math.Pi/n)
	var c corner
	c.A = [2]float64{cy + rv*math.Sin(m), cx + rv*math.Cos(m)}
	c.u = [2]float64{-math.Sin(m), -math.Cos(m)}
	beta, th, r := s.beta(), s.th(), s.Arc
	d := r * math.Cos(th) / math.Sin(beta)
	b := r * math.Cos(th+beta) / math.Sin(beta)
	c.C = [2]float64{c.A[0] + d*c.u[0], c.A[1] + d*c.u[1]}
	for i, w := range []int{k, (k + 1) % s.Sides} {
		nv := s.normal(w)
		t := [2]float64{nv[1], -nv[0]} // along the wall
		if t[0]*c.u[0]+t[1]*c.u[1] < 0 {
			t = [2]float64{-t[0], -t[1]}
		}
		p := [2]float64{c.A[0] + b*t[0], c.A[1] + b*t[1]}
		if i == 0 {
			c.P1 = p
		} else {
			c.P2 = p
		}
	}
	return c
}

// phaseAt returns the label of the point (y, x) of the cross-section.
func (s cornerScene) phaseAt(y, x float64, cs []corner) uint8 {
	_, _, _, cy, cx := s.shape()
	for k := 0; k < s.Sides; k++ {
		nv := s.normal(k)
		if (y-cy)*nv[0]+(x-cx)*nv[1] > s.R {
			return cornerCodes.Solid
		}
	}
	chord := s.Arc * math.Cos(s.th()+s.beta()) / math.Sin(s.beta()) * math.Cos(s.beta())
	for _, c := range cs {
		// Wetting: apex side of the chord P1P2 and outside the arc's circle.
		t := (y-c.A[0])*c.u[0] + (x-c.A[1])*c.u[1]
		if t < chord && math.Hypot(y-c.C[0], x-c.C[1]) > s.Arc {
			return cornerCodes.Wetting
		}
	}
	return cornerCodes.Nonwetting
}

func (s cornerScene) corners() []corner {
	cs := make([]corner, s.Sides)
	for k := range cs {
		cs[k] = s.corner(k)
	}
	return cs
}

// draw returns the labels (voxel size 1 µm), each voxel taking the phase
// at its centre.
func (s cornerScene) draw() *volume.Labels {
	nz, ny, nx, _, _ := s.shape()
	lab := volume.NewShape[uint8](nz, ny, nx, 1e-6)
	cs := s.corners()
	sec := make([]uint8, ny*nx)
	for y := 0; y < ny; y++ {
		for x := 0; x < nx; x++ {
			sec[y*nx+x] = s.phaseAt(float64(y), float64(x), cs)
		}
	}
	for z := 0; z < nz; z++ {
		copy(lab.Pix[z*ny*nx:][:ny*nx], sec)
	}
	return lab
}

var cornerCodes = phase.Default()

// measureCorner returns the curvature partial (default options unless
// opt is given) and the product's w–n area A_wn (voxel²): package
// measure's (S_w + S_n − S_s)/2 from the 13-direction Crofton surface
// areas, the area reported as area_wn_m2 and, per bulk volume, a_wn.
func measureCorner(t testing.TB, lab *volume.Labels, opt curvature.Options) (curvature.Partial, float64) {
	s, w, n := cornerCodes.Sets()
	p := curvature.Measure(lab, s, w, n, lab.Box, opt)
	mo := measure.Defaults()
	mo.SkipContact, mo.SkipCurvature = true, true // A_wn does not depend on them
	res, err := measure.Volume(lab, mo, 1024, 1)
	if err != nil {
		t.Fatal(err)
	}
	return p, res.AreaWN / (lab.VoxelSize * lab.VoxelSize)
}

// Source: analytic geometry (the derivation at cornerScene). The arc must
// meet each wall at θ through the wetting phase, span π − 2β − 2θ, and
// the drawn wetting region must have the Mason & Morrow corner area.
func TestCornerArcGeometry(t *testing.T) {
	for _, sides := range []int{3, 4} {
		for _, th := range []float64{0, 20, 40} {
			s := cornerTube(sides, 10, th, [2]float64{0.37, 0.21})
			for k, c := range s.corners() {
				// Contact points on the circle and on the walls.
				for i, p := range [][2]float64{c.P1, c.P2} {
					if e := math.Hypot(p[0]-c.C[0], p[1]-c.C[1]) - s.Arc; math.Abs(e) > 1e-9 {
						t.Errorf("%d sides θ %v corner %d: contact point %d is %.2g off the circle", sides, th, k, i, e)
					}
					_, _, _, cy, cx := s.shape()
					nv := s.normal((k + i) % sides)
					if e := (p[0]-cy)*nv[0] + (p[1]-cx)*nv[1] - s.R; math.Abs(e) > 1e-9 {
						t.Errorf("%d sides θ %v corner %d: contact point %d is %.2g off its wall", sides, th, k, i, e)
					}
				}
				// Angle at P1 between the wall towards the apex and the
				// arc's tangent towards the arc's middle M = C − r·u.
				m := [2]float64{c.C[0] - s.Arc*c.u[0], c.C[1] - s.Arc*c.u[1]}
				rad := [2]float64{c.P1[0] - c.C[0], c.P1[1] - c.C[1]}
				tg := [2]float64{-rad[1] / s.Arc, rad[0] / s.Arc}
				if tg[0]*(m[0]-c.P1[0])+tg[1]*(m[1]-c.P1[1]) < 0 {
					tg = [2]float64{-tg[0], -tg[1]}
				}
				wall := [2]float64{c.A[0] - c.P1[0], c.A[1] - c.P1[1]}
				wl := math.Hypot(wall[0], wall[1])
				wall = [2]float64{wall[0] / wl, wall[1] / wl}
				ang := math.Acos(math.Max(-1, math.Min(1, wall[0]*tg[0]+wall[1]*tg[1]))) * 180 / math.Pi
				if math.Abs(ang-th) > 1e-6 {
					t.Errorf("%d sides θ %v corner %d: arc meets the wall at %.6f°", sides, th, k, ang)
				}
				// Between the two rays lies wetting phase; across the arc
				// nonwetting.
				bis := [2]float64{wall[0] + tg[0], wall[1] + tg[1]}
				bl := math.Hypot(bis[0], bis[1])
				cs := s.corners()
				if th > 0 {
					q := [2]float64{c.P1[0] + 0.05*bis[0]/bl, c.P1[1] + 0.05*bis[1]/bl}
					if got := s.phaseAt(q[0], q[1], cs); got != cornerCodes.Wetting {
						t.Errorf("%d sides θ %v corner %d: the wedge between wall and arc is %d, not wetting", sides, th, k, got)
					}
				}
				q := [2]float64{m[0] + 0.05*c.u[0], m[1] + 0.05*c.u[1]}
				if got := s.phaseAt(q[0], q[1], cs); got != cornerCodes.Nonwetting {
					t.Errorf("%d sides θ %v corner %d: beyond the arc's middle is %d, not nonwetting", sides, th, k, got)
				}
				// Arc angle.
				a1 := math.Atan2(c.P1[0]-c.C[0], c.P1[1]-c.C[1])
				a2 := math.Atan2(c.P2[0]-c.C[0], c.P2[1]-c.C[1])
				span := math.Abs(math.Remainder(a1-a2, 2*math.Pi))
				if math.Abs(span-s.arcAngle()) > 1e-9 {
					t.Errorf("%d sides θ %v corner %d: arc spans %.6f rad, want π − 2β − 2θ = %.6f", sides, th, k, span, s.arcAngle())
				}
			}
			// Wetting cross-section by sampling each corner's triangle
			// (apex, P1, P2), one point jittered at random (fixed seed) in
			// every cell of a grid of 0.02 voxel, so that walls along the
			// grid do not bias the count: within 0.7 % of Mason &
			// Morrow's area (largest error measured +0.35 %, square θ 40°,
			// a corner of 2.9 voxel²).
			rng := rand.New(rand.NewPCG(uint64(sides), uint64(th)))
			cs := s.corners()
			const h = 0.02
			wet := 0
			for _, c := range cs {
				lo := [2]float64{math.Min(c.A[0], math.Min(c.P1[0], c.P2[0])) - 1, math.Min(c.A[1], math.Min(c.P1[1], c.P2[1])) - 1}
				hi := [2]float64{math.Max(c.A[0], math.Max(c.P1[0], c.P2[0])) + 1, math.Max(c.A[1], math.Max(c.P1[1], c.P2[1])) + 1}
				for y := lo[0]; y < hi[0]; y += h {
					for x := lo[1]; x < hi[1]; x += h {
						if s.phaseAt(y+h*rng.Float64(), x+h*rng.Float64(), cs) == cornerCodes.Wetting {
							wet++
						}
					}
				}
			}
			got := float64(wet) * h * h
			if e := got/s.wetSection() - 1; math.Abs(e) > 0.007 {
				t.Errorf("%d sides θ %v: sampled wetting cross-section %.3f, Mason & Morrow %.3f (%+.2f%%)", sides, th, got, s.wetSection(), 100*e)
			}
			// The drawn voxels hold it to within the digitisation.
			lab := s.draw()
			_, ny, nx, _, _ := s.shape()
			nw := 0
			for _, v := range lab.Pix[:ny*nx] {
				if v == cornerCodes.Wetting {
					nw++
				}
			}
			t.Logf("%d sides θ %v r %v: wetting section sampled %.2f, voxels %d, Mason & Morrow %.2f", sides, th, s.Arc, got, nw, s.wetSection())
		}
	}
}

var cornerArcs = flag.Bool("cornerarcs", false, "log the corner-arc-menisci table of the package documentation")

// cornerPlacements returns the cross-section offsets (y, x) of the
// table and checks: none (the square's walls on voxel faces) and four
// sub-voxel shifts from a fixed seed.
func cornerPlacements() [][2]float64 {
	rng := rand.New(rand.NewPCG(14, 3))
	out := [][2]float64{{0, 0}}
	for len(out) < 5 {
		out = append(out, [2]float64{rng.Float64(), rng.Float64()})
	}
	return out
}

// cornerRow measures one scene at every placement: the κ error and the
// A_wn error (fractions), the band voxels kept, and the co-area area of
// the curvature stage without exclusion over the exact arc area.
type cornerRow struct {
	kappa, area, coarea []float64
	voxels              []int64
}

func measureRow(t testing.TB, sides int, r, th float64, opt curvature.Options, withArea bool) cornerRow {
	var row cornerRow
	for _, off := range cornerPlacements() {
		s := cornerTube(sides, r, th, off)
		lab := s.draw()
		var p curvature.Partial
		if withArea {
			var awn float64
			p, awn = measureCorner(t, lab, opt)
			row.area = append(row.area, awn/s.arcArea()-1)
			so, w, n := cornerCodes.Sets()
			q := curvature.Measure(lab, so, w, n, lab.Box, curvature.Options{Exclude: -1})
			row.coarea = append(row.coarea, q.Area/s.arcArea())
		} else {
			so, w, n := cornerCodes.Sets()
			p = curvature.Measure(lab, so, w, n, lab.Box, opt)
		}
		row.kappa = append(row.kappa, p.Mean()/s.kappa()-1)
		row.voxels = append(row.voxels, p.Voxels)
	}
	return row
}

func pctRange(v []float64) string {
	lo, hi, nan := math.Inf(1), math.Inf(-1), 0
	for _, x := range v {
		if math.IsNaN(x) {
			nan++
			continue
		}
		lo, hi = math.Min(lo, x), math.Max(hi, x)
	}
	s := "none"
	if nan < len(v) {
		s = fmt.Sprintf("%+.1f…%+.1f", 100*lo, 100*hi)
	}
	if nan > 0 {
		s += fmt.Sprintf(" (%d empty)", nan)
	}
	return s
}

var cornerShapes = []struct {
	name  string
	sides int
}{{"square", 4}, {"triangle", 3}}

// TestCornerArcTable logs, for corner arc menisci (cornerScene), the
// error of the mean κ (default options) and of the product's A_wn against
// the exact values over five placements, for the table in the package
// documentation (go test -run CornerArcTable -args -cornerarcs).
func TestCornerArcTable(t *testing.T) {
	if !*cornerArcs {
		t.Skip("run with -cornerarcs")
	}
	for _, c := range cornerShapes {
		for _, r := range []float64{8, 10, 14, 20} {
			for _, th := range []float64{0, 20, 40} {
				row := measureRow(t, c.sides, r, th, curvature.Options{}, true)
				t.Logf("%-8s r %2.0f θ %2.0f gap %5.2f | κ %s | voxels %v | A_wn %s | co-area/arc (no exclusion) %s",
					c.name, r, th, cornerTube(c.sides, r, th, [2]float64{}).gap(), pctRange(row.kappa), row.voxels, pctRange(row.area), fmtList(row.coarea))
			}
		}
	}
}

// cornerChecks are the corner menisci on which issue 14's curvature target
// (κ within 8 % for arc radii ≥ 8 voxels) is met at all five placements
// with the default options; tol is the smaller of the target and twice
// the largest |error| measured (2026-12-06): triangle r 14 θ 0°
// −1.4…+7.2 % (8 %, the target), triangle r 20 θ 0° −3.2…+3.2 % (6.5 %).
// Source: the meniscus is a cylinder of radius r, κ = 1/r (Young–Laplace;
// Mason & Morrow 1991, J. Colloid Interface Sci. 141:262; cornerScene).
//
// Everywhere else in the table of TestCornerArcTable (package doc, "Corner
// arc menisci") the target is not met and not tested: square r 8–20 at
// every θ and triangle r 8–10 at every θ, r 14–20 at θ 20–40° read
// between −107 % and +34 % or keep no band voxel at all (arcs whose middle
// lies within the exclusion of both walls).
var cornerChecks = []struct {
	sides   int
	r, th   float64
	tol     float64
	measure string
}{
	{3, 14, 0, 0.08, "−1.4…+7.2 %"},
	{3, 20, 0, 0.065, "−3.2…+3.2 %"},
}

// cornerFailures returns the checked corner menisci whose mean κ misses
// its band when the truth is the curvature of an arc of radius
// r·rScale (1 for the test).
func cornerFailures(t testing.TB, rScale float64) []string {
	var bad []string
	for _, c := range cornerChecks {
		for i, off := range cornerPlacements() {
			s := cornerTube(c.sides, c.r, c.th, off)
			so, w, n := cornerCodes.Sets()
			lab := s.draw()
			p := curvature.Measure(lab, so, w, n, lab.Box, curvature.Options{})
			want := 1 / (c.r * rScale)
			if e := p.Mean()/want - 1; !(math.Abs(e) <= c.tol) {
				bad = append(bad, fmt.Sprintf("%d sides r=%v θ=%v° placement %d: mean κ %.5f, want %.5f ± %.1f%% (error %+.2f%%; measured %s)",
					c.sides, c.r, c.th, i, p.Mean(), want, 100*c.tol, 100*e, c.measure))
			}
		}
	}
	return bad
}

// TestCornerArcMeniscus checks the default estimator on corner arc
// menisci where issue 14's target is met (bands and source at
// cornerChecks).
func TestCornerArcMeniscus(t *testing.T) {
	for _, b := range cornerFailures(t, 1) {
		t.Error(b)
	}
}

// TestCornerArcMeniscusCanFail spoils TestCornerArcMeniscus: with a truth
// of radius 1.15·r every checked meniscus must miss its band.
func TestCornerArcMeniscusCanFail(t *testing.T) {
	bad := cornerFailures(t, 1.15)
	n := len(cornerChecks) * len(cornerPlacements())
	t.Logf("truth r·1.15: %d of %d menisci out of band, e.g. %v", len(bad), n, bad[:min(len(bad), 1)])
	if len(bad) < n {
		t.Errorf("truth r·1.15: only %d of %d menisci out of band", len(bad), n)
	}
}

func fmtList(v []float64) string {
	s := ""
	for _, x := range v {
		s += fmt.Sprintf(" %.3f", x)
	}
	return s
}
