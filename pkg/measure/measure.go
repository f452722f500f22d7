// Package measure turns a segmented (label) volume into the per-step
// quantities of a two-phase flow experiment: porosity, saturations,
// Minkowski functionals of each phase, interfacial areas, the curvature of
// the wetting–nonwetting interface and the capillary pressure it implies,
// in-situ contact angles, and the ganglia of the nonwetting phase.
//
// Every quantity is computed per tile and merged, so the same code measures
// a whole volume on one machine and a scan cut into tiles across workers.
// MeasureTile returns a Partial for the voxels a tile owns; Combine merges
// the partials of a step. How each part merges:
//
//	voxel counts                       add (exact)
//	2×2×2 configuration histograms     add (exact integers; Ohser & Mücklich 2000, ch. 4)
//	  → volume, surface area, ∫H dS, Euler characteristic, interfacial areas
//	curvature sums and histogram       add (floating-point rounding only)
//	contact-angle sums and histogram   add (exact histogram, rounding for sums)
//	clusters                           not additive: tile labels and face planes
//	                                   are merged with union-find (cluster.Merge)
//
// The result equals the whole-volume result whatever the tiling, provided
// each tile is read with a halo of at least Options.Halo() voxels, and it
// does not depend on Options.Workers, the goroutines one tile is measured
// on (for steps with fewer tiles than cores).
//
// Interfacial areas follow from the three phase surfaces (science.md):
// A_wn = (S_w + S_n − S_s)/2, A_ws = (S_w + S_s − S_n)/2,
// A_ns = (S_n + S_s − S_w)/2, where each S is the 13-direction Crofton
// surface area of the phase indicator over cells inside the image, so the
// faces of the image box never count as interface.
package measure

import (
	"errors"
	"fmt"
	"math"
	"runtime"
	"sync"

	"sluice/pkg/cluster"
	"sluice/pkg/contact"
	"sluice/pkg/curvature"
	"sluice/pkg/morph"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Options configure a measurement. The zero value is not valid; start from
// Defaults.
type Options struct {
	Codes phase.Codes
	// Connectivity of the nonwetting clusters and of every phase's Euler
	// characteristic reported as euler_*: 26 (default) or 6.
	Connectivity int
	// FlowAxis is the axis from inlet to outlet: 0 = z (default), 1 = y, 2 = x.
	FlowAxis int
	// IFT is the interfacial tension σ in N/m; 0 leaves capillary pressure
	// out.
	IFT       float64
	Curvature curvature.Options
	Contact   contact.Options
	// Skip turns off the expensive measurements (for quick looks).
	SkipCurvature, SkipContact bool
	// Workers is the number of goroutines MeasureTile uses inside one tile
	// (0 = runtime.GOMAXPROCS). Results do not depend on it.
	Workers int `json:"-"`
}

// Defaults returns the documented default options.
func Defaults() Options {
	return Options{
		Codes:        phase.Default(),
		Connectivity: 26,
		Curvature:    curvature.Options{Sigma: curvature.DefaultSigma, Exclude: curvature.DefaultExclude},
		Contact:      contact.Options{Radius: contact.DefaultRadius, SolidSigma: contact.DefaultSolidSigma, MinFaces: contact.DefaultMinFaces},
	}
}

// Validate checks the options.
func (o Options) Validate() error {
	if err := o.Codes.Validate(); err != nil {
		return err
	}
	if o.Connectivity != 6 && o.Connectivity != 26 {
		return fmt.Errorf("measure: connectivity must be 6 or 26, not %d", o.Connectivity)
	}
	if o.FlowAxis < 0 || o.FlowAxis > 2 {
		return fmt.Errorf("measure: flow axis must be 0 (z), 1 (y) or 2 (x), not %d", o.FlowAxis)
	}
	if o.IFT < 0 || math.IsNaN(o.IFT) {
		return fmt.Errorf("measure: interfacial tension must be ≥ 0 N/m, not %g", o.IFT)
	}
	if g := o.Contact.WallGap; !(g >= 0) || g >= math.Max(o.Contact.Radius, contact.DefaultRadius)/2 {
		return fmt.Errorf("measure: contact-angle wall gap must be ≥ 0 and below half the fit radius, not %g voxels", g)
	}
	return nil
}

// Halo returns the halo in voxels a tile must be read with.
func (o Options) Halo() int {
	h := 1 // 2×2×2 cells reach one voxel past the core
	if !o.SkipCurvature {
		h = max(h, o.Curvature.Halo())
	}
	if !o.SkipContact {
		h = max(h, o.Contact.Halo())
	}
	return h
}

func (o Options) clusterOptions() cluster.Options {
	return cluster.Options{Connectivity: o.Connectivity, FlowAxis: o.FlowAxis}
}

// Phase indexes the three phases in Partial arrays.
const (
	Solid = iota
	Wetting
	Nonwetting
)

// Partial is the mergeable result of one tile.
type Partial struct {
	// Core is the box of voxels this partial owns.
	Core volume.Box `json:"core"`
	// Counts holds the voxels of the core per phase (solid, wetting,
	// nonwetting) and, last, the voxels outside the sample.
	Counts [4]int64 `json:"counts"`
	// Padded holds the 2×2×2 configuration histograms of each phase over
	// the cells this tile owns when the image is padded with background
	// (Euler characteristic, volume).
	Padded [3][256]int64 `json:"padded"`
	// Interior holds the histograms over cells lying inside the image
	// (surface area, integral of mean curvature).
	Interior  [3][256]int64      `json:"interior"`
	Curvature *curvature.Partial `json:"curvature,omitempty"`
	Contact   *contact.Partial   `json:"contact,omitempty"`
	Clusters  *cluster.Tile      `json:"clusters"`
}

// paddedOrigins returns the cell origins a core owns with the image padded
// by one background voxel on every side: its own voxels, plus the origins
// at whole.Min−1 where the core touches the low face of the image.
func paddedOrigins(core, whole volume.Box) volume.Box {
	o := core
	for a := 0; a < 3; a++ {
		if core.Min[a] == whole.Min[a] {
			o.Min[a]--
		}
	}
	return o
}

// interiorOrigins returns the cell origins of core whose 2×2×2 cell lies
// inside the image.
func interiorOrigins(core, whole volume.Box) volume.Box {
	w := whole
	for a := 0; a < 3; a++ {
		w.Max[a]--
	}
	return core.Intersect(w)
}

// MeasureTile measures the tile whose core is core. lab must cover the core
// plus a halo of opt.Halo() voxels, clipped to whole (the whole scan).
func MeasureTile(lab *volume.Labels, core, whole volume.Box, opt Options) (*Partial, error) {
	if err := opt.Validate(); err != nil {
		return nil, err
	}
	if !whole.ContainsBox(core) || core.Empty() {
		return nil, fmt.Errorf("measure: core %v outside scan %v", core, whole)
	}
	need := core.Grow(opt.Halo()).Intersect(whole)
	if !lab.Box.ContainsBox(need) {
		return nil, fmt.Errorf("measure: tile data %v does not cover core %v with halo %d", lab.Box, core, opt.Halo())
	}
	solid, wet, non := opt.Codes.Sets()
	p := &Partial{Core: core}
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	// The stages write disjoint fields of p. With more than one worker the
	// cheap whole-tile passes (counts, configuration histograms, clusters)
	// run beside the curvature while the contact-angle fits share the
	// workers; no stage's result depends on how it is scheduled.
	var wg sync.WaitGroup
	run := func(f func()) {
		if workers == 1 {
			f()
			return
		}
		wg.Add(1)
		go func() { defer wg.Done(); f() }()
	}
	run(func() {
		countPhases(p, lab, core, wet, non)
		po, io := paddedOrigins(core, whole), interiorOrigins(core, whole)
		for i, s := range [3]*phase.Set{solid, wet, non} {
			p.Padded[i] = morph.Cells(lab, s, po)
			p.Interior[i] = morph.Cells(lab, s, io)
		}
		p.Clusters = cluster.Label(lab, non, core, whole, opt.clusterOptions())
	})
	if !opt.SkipCurvature {
		run(func() {
			c := curvature.Measure(lab, solid, wet, non, core, opt.Curvature)
			p.Curvature = &c
		})
	}
	if !opt.SkipContact {
		co := opt.Contact
		co.Workers = workers
		c := contact.Measure(lab, solid, wet, non, core, co)
		p.Contact = &c
	}
	wg.Wait()
	return p, nil
}

// countPhases fills p.Counts over core.
func countPhases(p *Partial, lab *volume.Labels, core volume.Box, wet, non *phase.Set) {
	var class [256]uint8 // index into Counts
	for v := range class {
		switch {
		case uint8(v) == phase.Outside:
			class[v] = 3
		case wet[v]:
			class[v] = Wetting
		case non[v]:
			class[v] = Nonwetting
		default:
			class[v] = Solid
		}
	}
	var n [4]int64
	for z := core.Min[0]; z < core.Max[0]; z++ {
		for y := core.Min[1]; y < core.Max[1]; y++ {
			row := lab.Pix[lab.Index(z, y, core.Min[2]):][:core.Max[2]-core.Min[2]]
			for _, v := range row {
				n[class[v]]++
			}
		}
	}
	p.Counts = n
}

// Volume measures a whole label volume, cutting it into tiles of edge tile
// (0 picks 128) measured in parallel on `workers` goroutines (0 = all CPUs).
func Volume(lab *volume.Labels, opt Options, tile, workers int) (*Result, error) {
	if err := lab.Validate(); err != nil {
		return nil, err
	}
	if tile <= 0 {
		tile = 128
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	t := volume.Tiling{Whole: lab.Box, Tile: [3]int{tile, tile, tile}}
	parts, err := MeasureTiling(lab, t, opt, workers)
	if err != nil {
		return nil, err
	}
	return Combine(parts, lab.Box, lab.VoxelSize, opt)
}

// MeasureTiling measures every tile of t on lab, which covers t.Whole.
func MeasureTiling(lab *volume.Labels, t volume.Tiling, opt Options, workers int) ([]*Partial, error) {
	n := t.Len()
	parts := make([]*Partial, n)
	errs := make([]error, n)
	next := make(chan int)
	var wg sync.WaitGroup
	for w := 0; w < max(1, workers); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				core := t.Core(i)
				var sub *volume.Labels
				if n == 1 {
					sub = lab
				} else {
					sub = lab.Crop(core.Grow(opt.Halo()).Intersect(t.Whole), 0)
				}
				parts[i], errs[i] = MeasureTile(sub, core, t.Whole, opt)
			}
		}()
	}
	for i := 0; i < n; i++ {
		next <- i
	}
	close(next)
	wg.Wait()
	return parts, errors.Join(errs...)
}
