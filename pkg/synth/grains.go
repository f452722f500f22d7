package synth

import (
	"fmt"
	"math"
	"math/rand/v2"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// GrainPack describes a sandstone-like rock of our own design, made in two
// stages that mimic how such rock forms:
//
//  1. Deposition and compaction: spherical grains with log-normally
//     distributed radii are dropped at random positions (random sequential
//     addition) and kept when they overlap no earlier grain by more than
//     Overlap times the sum of the two radii, until the grains' summed volume
//     reaches Packing times the box volume (or placement stalls). In dense
//     deposits late grains fit more easily when small, so the accepted
//     radii run below MeanRadius (about 15 % at Packing 0.5).
//  2. Cementation: every grain grows by the same overgrowth thickness δ, so
//     the solid is the union of the balls of radius r_i + δ, with δ chosen so
//     that the porosity inside the sample equals Porosity (to one histogram
//     bin of 1/64 voxel). δ < 0 (grains shrink) when the packing alone is
//     denser than asked.
//
// Growing grains uniformly is the quartz-overgrowth step of process-based
// sandstone models (Øren & Bakke 2002, Transp. Porous Media 46:311, from
// memory); here it is only a way to hit a porosity exactly. The pack is not
// a model of any particular rock; it exists for the demo and for tests.
//
// Optionally the sample is a cylinder about the z axis (a core in a sleeve):
// voxels farther than CoreRadius from the axis through the centre of the
// box in (y, x) are set to phase.Outside and are not counted in the
// porosity.
//
// All lengths are in voxels. The same seed gives the same rock for the same
// box.
type GrainPack struct {
	// MeanRadius is the mean grain radius before cementation (voxels).
	MeanRadius float64
	// RadiusCV is the coefficient of variation of the log-normal grain
	// radius (0 = equal grains). Default 0.25.
	RadiusCV float64
	// Overlap is the largest allowed overlap of two grains as a fraction of
	// the sum of their radii (compaction). Default 0.15.
	Overlap float64
	// Packing is the summed grain volume, as a fraction of the box, at
	// which deposition stops. Default 0.5.
	Packing float64
	// Porosity is the target porosity after cementation. Default 0.25.
	Porosity float64
	// CoreRadius, if > 0, is the radius of the cylindrical sample about the
	// z axis (voxels).
	CoreRadius float64
	// Seed selects the random grains.
	Seed uint64
}

// Grain is one grain of a pack: centre (z, y, x) and radius before
// cementation, in voxels.
type Grain struct {
	Centre [3]float64
	Radius float64
}

// PackInfo reports what Draw made.
type PackInfo struct {
	Grains []Grain
	// Overgrowth is the cement thickness δ added to every grain radius.
	Overgrowth float64
	// Porosity is the porosity inside the sample as drawn.
	Porosity float64
	// SampleVoxels counts the voxels inside the sample (not Outside).
	SampleVoxels int
}

func (g GrainPack) withDefaults() GrainPack {
	if g.RadiusCV == 0 {
		g.RadiusCV = 0.25
	}
	if g.Overlap == 0 {
		g.Overlap = 0.15
	}
	if g.Packing == 0 {
		g.Packing = 0.5
	}
	if g.Porosity == 0 {
		g.Porosity = 0.25
	}
	return g
}

// Validate reports parameters that cannot make a pack.
func (g GrainPack) Validate() error {
	g = g.withDefaults()
	switch {
	case !(g.MeanRadius >= 1):
		return fmt.Errorf("synth: grain pack mean radius %g voxels, want ≥ 1", g.MeanRadius)
	case !(g.RadiusCV >= 0 && g.RadiusCV <= 1):
		return fmt.Errorf("synth: grain radius CV %g, want 0..1", g.RadiusCV)
	case !(g.Overlap >= 0 && g.Overlap < 1):
		return fmt.Errorf("synth: grain overlap %g, want 0..1", g.Overlap)
	case !(g.Packing > 0 && g.Packing <= 1.5):
		return fmt.Errorf("synth: grain packing %g, want 0..1.5", g.Packing)
	case !(g.Porosity > 0 && g.Porosity < 1):
		return fmt.Errorf("synth: target porosity %g, want 0..1", g.Porosity)
	case g.CoreRadius < 0:
		return fmt.Errorf("synth: core radius %g, want ≥ 0", g.CoreRadius)
	}
	return nil
}

// Draw fills lab with the pack: solid where a cemented grain covers the
// voxel centre, pore elsewhere inside the sample, phase.Outside outside the
// core cylinder (if any).
func (g GrainPack) Draw(lab *volume.Labels, solid, pore uint8) (PackInfo, error) {
	if err := g.Validate(); err != nil {
		return PackInfo{}, err
	}
	if err := lab.Validate(); err != nil {
		return PackInfo{}, fmt.Errorf("synth: grain pack: %w", err)
	}
	g = g.withDefaults()
	rng := rand.New(rand.NewPCG(g.Seed, g.Seed^0x6a09e667f3bcc909))
	grains := g.deposit(rng, lab.Box)

	// Additively weighted distance h(q) = min_i (|q − c_i| − r_i), evaluated
	// within reach of each grain; voxels out of reach of every grain keep
	// +Inf (pore for any overgrowth up to reach).
	reach := g.MeanRadius
	h := make([]float32, len(lab.Pix))
	for i := range h {
		h[i] = float32(math.Inf(1))
	}
	for _, gr := range grains {
		stampDistance(h, lab.Box, gr, reach)
	}

	inSample := g.sampleTest(lab.Box)
	// Histogram of h over the sample, bins of 1/64 voxel over
	// [−maxRadius, reach]; the overgrowth δ is the bin edge where the solid
	// fraction reaches 1 − Porosity.
	maxR := 0.0
	for _, gr := range grains {
		maxR = math.Max(maxR, gr.Radius)
	}
	const perVoxel = 64
	lo := -math.Ceil(maxR) - 1
	nb := int((reach-lo)*perVoxel) + 1
	hist := make([]int, nb)
	sample := 0
	idx := 0
	b := lab.Box
	for z := b.Min[0]; z < b.Max[0]; z++ {
		for y := b.Min[1]; y < b.Max[1]; y++ {
			for x := b.Min[2]; x < b.Max[2]; x++ {
				if inSample(y, x) {
					sample++
					if v := float64(h[idx]); v <= reach {
						hist[max(0, int((v-lo)*perVoxel))]++
					}
				}
				idx++
			}
		}
	}
	if sample == 0 {
		return PackInfo{}, fmt.Errorf("synth: grain pack: core radius %g leaves no voxel in box %v", g.CoreRadius, lab.Box)
	}
	wantSolid := int(math.Round((1 - g.Porosity) * float64(sample)))
	cum, k := 0, -1
	for i, c := range hist {
		if cum+c > wantSolid {
			break
		}
		cum += c
		k = i
	}
	if k == nb-1 && cum < wantSolid {
		return PackInfo{}, fmt.Errorf("synth: grain pack: porosity %g needs more overgrowth than %g voxels (raise Packing)", g.Porosity, reach)
	}
	// Solid: h < lo + (k+1)/perVoxel, i.e. every bin up to and including k.
	delta := lo + float64(k+1)/perVoxel

	idx = 0
	pores := 0
	for z := b.Min[0]; z < b.Max[0]; z++ {
		for y := b.Min[1]; y < b.Max[1]; y++ {
			for x := b.Min[2]; x < b.Max[2]; x++ {
				v := float64(h[idx])
				switch {
				case !inSample(y, x):
					lab.Pix[idx] = phase.Outside
				case v <= reach && int((v-lo)*perVoxel) <= k:
					lab.Pix[idx] = solid
				default:
					lab.Pix[idx] = pore
					pores++
				}
				idx++
			}
		}
	}
	return PackInfo{Grains: grains, Overgrowth: delta, Porosity: float64(pores) / float64(sample), SampleVoxels: sample}, nil
}

// sampleTest returns the membership test of the core cylinder for box b.
func (g GrainPack) sampleTest(b volume.Box) func(y, x int) bool {
	if g.CoreRadius <= 0 {
		return func(y, x int) bool { return true }
	}
	cy := float64(b.Min[1]+b.Max[1]-1) / 2
	cx := float64(b.Min[2]+b.Max[2]-1) / 2
	r2 := g.CoreRadius * g.CoreRadius
	return func(y, x int) bool {
		dy, dx := float64(y)-cy, float64(x)-cx
		return dy*dy+dx*dx <= r2
	}
}

// deposit places grains by random sequential addition in box grown by the
// largest grain reach, so the faces of the box cut through grains as in a
// sub-volume of a larger rock.
func (g GrainPack) deposit(rng *rand.Rand, box volume.Box) []Grain {
	// Log-normal radius with mean MeanRadius and coefficient of variation
	// RadiusCV: s² = ln(1 + CV²), m = ln(mean) − s²/2.
	s2 := math.Log(1 + g.RadiusCV*g.RadiusCV)
	mu, s := math.Log(g.MeanRadius)-s2/2, math.Sqrt(s2)
	rmax := g.MeanRadius * math.Exp(3*s) // clip at +3σ in log space
	region := box.Grow(int(math.Ceil(rmax + g.MeanRadius)))
	size := region.Size()
	total := float64(size[0]) * float64(size[1]) * float64(size[2])

	// Spatial hash of accepted grains; cell edge 2·rmax so overlapping
	// pairs are in neighbouring cells.
	cell := 2 * rmax
	var nc [3]int
	for a := range nc {
		nc[a] = int(math.Ceil(float64(size[a])/cell)) + 1
	}
	cells := make([][]int32, nc[0]*nc[1]*nc[2])
	cellOf := func(c [3]float64) [3]int {
		var k [3]int
		for a := range k {
			k[a] = min(nc[a]-1, max(0, int((c[a]-float64(region.Min[a]))/cell)))
		}
		return k
	}

	var grains []Grain
	placed := 0.0
	fails := 0
	const maxFails = 20000
	for placed < g.Packing*total && fails < maxFails {
		r := math.Min(rmax, math.Exp(mu+s*rng.NormFloat64()))
		var c [3]float64
		for a := range c {
			c[a] = float64(region.Min[a]) + rng.Float64()*float64(size[a])
		}
		k := cellOf(c)
		ok := true
	search:
		for dz := -1; dz <= 1; dz++ {
			for dy := -1; dy <= 1; dy++ {
				for dx := -1; dx <= 1; dx++ {
					kz, ky, kx := k[0]+dz, k[1]+dy, k[2]+dx
					if kz < 0 || ky < 0 || kx < 0 || kz >= nc[0] || ky >= nc[1] || kx >= nc[2] {
						continue
					}
					for _, j := range cells[(kz*nc[1]+ky)*nc[2]+kx] {
						o := grains[j]
						d := math.Sqrt(sq(c[0]-o.Centre[0]) + sq(c[1]-o.Centre[1]) + sq(c[2]-o.Centre[2]))
						if d < (1-g.Overlap)*(r+o.Radius) {
							ok = false
							break search
						}
					}
				}
			}
		}
		if !ok {
			fails++
			continue
		}
		fails = 0
		ci := (k[0]*nc[1]+k[1])*nc[2] + k[2]
		cells[ci] = append(cells[ci], int32(len(grains)))
		grains = append(grains, Grain{Centre: c, Radius: r})
		placed += 4 * math.Pi * r * r * r / 3
	}
	return grains
}

// stampDistance lowers h to |q − c| − r over the voxels within r + reach of
// the grain centre.
func stampDistance(h []float32, box volume.Box, gr Grain, reach float64) {
	R := gr.Radius + reach
	var bb volume.Box
	for a := 0; a < 3; a++ {
		bb.Min[a] = int(math.Floor(gr.Centre[a] - R))
		bb.Max[a] = int(math.Ceil(gr.Centre[a]+R)) + 1
	}
	bb = bb.Intersect(box)
	if bb.Empty() {
		return
	}
	s := box.Size()
	R2 := R * R
	for z := bb.Min[0]; z < bb.Max[0]; z++ {
		dz2 := sq(float64(z) - gr.Centre[0])
		for y := bb.Min[1]; y < bb.Max[1]; y++ {
			dzy2 := dz2 + sq(float64(y)-gr.Centre[1])
			if dzy2 > R2 {
				continue
			}
			row := ((z-box.Min[0])*s[1] + (y - box.Min[1])) * s[2]
			for x := bb.Min[2]; x < bb.Max[2]; x++ {
				d2 := dzy2 + sq(float64(x)-gr.Centre[2])
				if d2 > R2 {
					continue
				}
				v := float32(math.Sqrt(d2) - gr.Radius)
				if v < h[row+x-box.Min[2]] {
					h[row+x-box.Min[2]] = v
				}
			}
		}
	}
}

func sq(v float64) float64 { return v * v }
