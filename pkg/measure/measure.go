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
//	                                   are merged with union-find (cluster.Join)
//	curvature per ganglion             add per whole-volume ganglion after the
//	                                   union-find (cluster.Tile.CurvArea, CurvForeign
//	                                   placed through the owner tile's Rim)
//	block sums of the standard errors  add per block of a fixed lattice (blockse)
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
	"cmp"
	"errors"
	"fmt"
	"math"
	"runtime"
	"slices"
	"sync"

	"sluice/pkg/blockse"
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
	IFT float64
	// FrontThreshold is the nonwetting saturation a profile bin must
	// exceed to count as reached by the front (0 = DefaultFrontThreshold).
	FrontThreshold float64
	Curvature      curvature.Options
	Contact        contact.Options
	// Skip turns off the expensive measurements (for quick looks).
	SkipCurvature, SkipContact bool
	// SkipTopological leaves the topological contact angle out (its
	// result keys null, with a note); it needs the curvature measurement
	// anyway.
	SkipTopological bool
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
	if err := validFrontThreshold(o.FrontThreshold); err != nil {
		return err
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
		h = max(h, o.Curvature.Halo(), topoHalo())
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
	// GangliaBlocks holds the curvature sums attributed to the tile's
	// local nonwetting components (Clusters ids) per block of package
	// blockse: the standard errors of the connected and trapped Pc. Nil
	// when curvature was not measured or not attributed.
	GangliaBlocks []OwnedBlock `json:"ganglia_blocks,omitempty"`
	// Profile holds the voxel counts per slice along the flow axis (the
	// saturation profile, profile.go). Nil in tile results written before
	// it existed; Combine then leaves the profile out.
	Profile *ProfilePartial `json:"profile,omitempty"`
}

// OwnedBlock is the curvature sum W = Σw, X = Σκw (voxel², voxel) of the
// band voxels of one block attributed to one local component (Owner ≥ 1)
// or, with Owner 0, to the ganglion holding voxel At of another tile
// (cluster.Tile.CurvForeign).
type OwnedBlock struct {
	Owner int32   `json:"id"`
	At    *[3]int `json:"at,omitempty"`
	blockse.Sum
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
	attribute := !opt.SkipCurvature
	rim := 0
	if attribute {
		rim = opt.Curvature.AttributionReach()
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
	var look *cluster.Lookup
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
		p.Profile = measureProfile(lab, core, opt.FlowAxis, wet, non)
		po, io := paddedOrigins(core, whole), interiorOrigins(core, whole)
		for i, s := range [3]*phase.Set{solid, wet, non} {
			p.Padded[i] = morph.Cells(lab, s, po)
			p.Interior[i] = morph.Cells(lab, s, io)
		}
		p.Clusters, look = cluster.LabelLookup(lab, non, core, whole, opt.clusterOptions(), rim)
	})
	var att []curvature.Attributed
	if !opt.SkipCurvature {
		run(func() {
			var c curvature.Partial
			if attribute {
				c, att = curvature.MeasureAttributed(lab, solid, wet, non, core, opt.Curvature)
			} else {
				c = curvature.Measure(lab, solid, wet, non, core, opt.Curvature)
			}
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
	if attribute {
		attributeGanglia(p, att, look, lab, solid, wet, non, core.Grow(rim).Intersect(lab.Box), whole, opt.clusterOptions(), !opt.SkipTopological)
	}
	look.Release()
	return p, nil
}

// attributeGanglia sums the attributed band voxels of the core per local
// component of the tile (Clusters.CurvArea, CurvKappaArea) and per (block,
// component) (GangliaBlocks), in the order of att. A band voxel's
// nonwetting voxel may lie in the halo (within the attribution reach of the
// core, so inside box): if its component within box reaches the core, the
// sum goes to a local component of that piece (the same ganglion);
// otherwise to Clusters.CurvForeign, named by the piece's first voxel in
// raster order, which lies in the rim of the tile owning it
// (cluster.Resolver).
//
// It also splits the Euler characteristic of the nonwetting phase by
// ganglion (Clusters.Euler8, eulerShares) and the contact-line turnings of
// the topological contact angle (Clusters.Topo, topoShares).
func attributeGanglia(p *Partial, att []curvature.Attributed, look *cluster.Lookup, lab *volume.Labels, solid, wet, non *phase.Set, box, whole volume.Box, co cluster.Options, topo bool) {
	t := p.Clusters
	t.CurvArea = make([]float64, len(t.Sizes))
	t.CurvKappaArea = make([]float64, len(t.Sizes))
	core := t.Core
	// Pieces of the nonwetting phase within box, and for each the local
	// component of the core it holds (0 when none), built on first need.
	var ext *cluster.Lookup
	var toLocal []int32
	extOwner := func(v [3]int) (local int32, piece int32) {
		if ext == nil {
			ext = cluster.LabelBox(lab, non, box, co)
			ext.Runs(func(z, y, x0, x1 int, id int32) {
				for int(id) > len(toLocal) {
					toLocal = append(toLocal, 0)
				}
				if toLocal[id-1] != 0 || !core.Contains(z, y, core.Min[2]) || x1 <= core.Min[2] || x0 >= core.Max[2] {
					return
				}
				toLocal[id-1] = look.At(z, y, max(x0, core.Min[2]))
			})
		}
		e := ext.At(v[0], v[1], v[2])
		if e <= 0 {
			return 0, 0
		}
		return toLocal[e-1], e
	}
	type key struct {
		b     blockse.Key
		id    int32 // local id, or −piece for a foreign piece
		piece int32
	}
	acc := map[key]*OwnedBlock{}
	foreign := map[int32]int{} // piece → index in CurvForeign
	for _, a := range att {
		id := look.At(a.Owner[0], a.Owner[1], a.Owner[2])
		var piece int32
		if id == 0 {
			id, piece = extOwner(a.Owner)
			if id == 0 && piece == 0 {
				continue // not reached: the owner is a nonwetting voxel in box
			}
		}
		k := key{b: a.Block, id: id}
		if id > 0 {
			t.CurvArea[id-1] += a.W
			t.CurvKappaArea[id-1] += a.K
		} else {
			k.piece = piece
			at := ext.First(piece)
			i, ok := foreign[piece]
			if !ok {
				i = len(t.CurvForeign)
				foreign[piece] = i
				t.CurvForeign = append(t.CurvForeign, cluster.Foreign{At: at})
			}
			t.CurvForeign[i].Area += a.W
			t.CurvForeign[i].KappaArea += a.K
		}
		s := acc[k]
		if s == nil {
			s = &OwnedBlock{Owner: id, Sum: blockse.Sum{Key: a.Block}}
			if id == 0 {
				at := ext.First(piece)
				s.At = &at
			}
			acc[k] = s
		}
		s.W += a.W
		s.X += a.K
	}
	eulerShares(t, look, lab, non, whole, co, extOwner, func(piece int32, e8 int64) {
		i, ok := foreign[piece]
		if !ok {
			i = len(t.CurvForeign)
			foreign[piece] = i
			t.CurvForeign = append(t.CurvForeign, cluster.Foreign{At: ext.First(piece)})
		}
		t.CurvForeign[i].Euler8 += e8
	})
	if topo {
		topoShares(t, look, lab, solid, wet, non, whole, extOwner, func(piece int32, s cluster.TopoSums) {
			i, ok := foreign[piece]
			if !ok {
				i = len(t.CurvForeign)
				foreign[piece] = i
				t.CurvForeign = append(t.CurvForeign, cluster.Foreign{At: ext.First(piece)})
			}
			if t.CurvForeign[i].Topo == nil {
				t.CurvForeign[i].Topo = &cluster.TopoSums{}
			}
			t.CurvForeign[i].Topo.Add(s)
		})
	}
	ext.Release()
	p.GangliaBlocks = make([]OwnedBlock, 0, len(acc))
	for _, s := range acc {
		p.GangliaBlocks = append(p.GangliaBlocks, *s)
	}
	slices.SortFunc(p.GangliaBlocks, func(a, b OwnedBlock) int {
		if c := cmp.Compare(a.Owner, b.Owner); c != 0 {
			return c
		}
		if a.At != nil && b.At != nil {
			for i := range a.At {
				if c := cmp.Compare(a.At[i], b.At[i]); c != 0 {
					return c
				}
			}
		}
		for i := range a.Key {
			if c := cmp.Compare(a.Key[i], b.Key[i]); c != 0 {
				return c
			}
		}
		return 0
	})
}

// eulerShares sets t.Euler8: 8 × each local component's share of the Euler
// characteristic of its ganglion. Every 2×2×2 cell the tile owns in the
// padded image (the cells of measure's Padded histogram) holding some but
// not all nonwetting voxels has its set voxels split by the nonwetting
// piece (labelled on the attribution box, owner) each belongs to, and each
// piece's sub-configuration weighs 8χ by the connectivity's table (package
// morph). With 26-connectivity the set voxels of a cell are all neighbours,
// so one piece holds them and the cell weight goes whole to it; with
// 6-connectivity the weight adds over pieces that share no face, which
// different pieces never do. So the shares of all ganglia add up to the
// phase's 8χ exactly, and each ganglion's to its own 8χ (Ohser & Mücklich
// 2000, ch. 4: the Euler characteristic of a union of disjoint bodies is
// the sum of theirs). A piece reaching the core gives its share to a local
// component of the same ganglion; another goes to foreign (a piece of a
// neighbouring tile, placed through its rim by cluster.Join).
func eulerShares(t *cluster.Tile, look *cluster.Lookup, lab *volume.Labels, non *phase.Set, whole volume.Box, co cluster.Options,
	owner func(v [3]int) (local, piece int32), foreign func(piece int32, e8 int64)) {
	core := t.Core
	t.Euler8 = make([]int64, len(t.Sizes))
	_, _, _, w := morph.Weights()
	dual := co.Connectivity != 6 // 26: w26[c] = w6[255 − c]
	po := paddedOrigins(t.Core, whole)
	// Indicator of the cells' voxels (origins + 1 on the high side); voxels
	// outside the image or the tile data read 0.
	vb := po
	for a := 0; a < 3; a++ {
		vb.Max[a]++
	}
	nv := vb.Size()
	ind := make([]uint8, nv[0]*nv[1]*nv[2])
	in := vb.Intersect(whole).Intersect(lab.Box)
	for z := in.Min[0]; z < in.Max[0]; z++ {
		for y := in.Min[1]; y < in.Max[1]; y++ {
			src := lab.Pix[lab.Index(z, y, in.Min[2]):][:in.Max[2]-in.Min[2]]
			dst := ind[((z-vb.Min[0])*nv[1]+y-vb.Min[1])*nv[2]+in.Min[2]-vb.Min[2]:][:len(src)]
			for i, v := range src {
				if non[v] {
					dst[i] = 1
				}
			}
		}
	}
	var off [8]int
	for b := 0; b < 8; b++ {
		off[b] = (b>>2&1*nv[1]+b>>1&1)*nv[2] + b&1
	}
	no := po.Size()
	for z := 0; z < no[0]; z++ {
		for y := 0; y < no[1]; y++ {
			row := (z*nv[1] + y) * nv[2]
			for x := 0; x < no[2]; x++ {
				i := row + x
				c := 0
				for b := 0; b < 8; b++ {
					c |= int(ind[i+off[b]]) << b
				}
				if c == 0 || c == 255 {
					continue // weight 0 either way
				}
				var pieces, locals [8]int32
				var masks [8]int
				n := 0
				// A cell inside the core needs only the tile's own labels:
				// with 26-connectivity one set voxel names the ganglion of
				// all; with 6, voxels of different local components share
				// no face. Otherwise the pieces of the attribution box
				// name the owners of all its voxels.
				var vs [8][3]int
				inCore := true
				for b := 0; b < 8; b++ {
					vs[b] = [3]int{vb.Min[0] + z + b>>2&1, vb.Min[1] + y + b>>1&1, vb.Min[2] + x + b&1}
					if c>>b&1 == 1 && !core.Contains(vs[b][0], vs[b][1], vs[b][2]) {
						inCore = false
					}
				}
				for b := 0; b < 8; b++ {
					if c>>b&1 == 0 {
						continue
					}
					var l, pc int32
					if inCore {
						l = look.At(vs[b][0], vs[b][1], vs[b][2])
						pc = -l
					} else {
						l, pc = owner(vs[b])
					}
					if dual {
						pieces[0], locals[0], masks[0], n = pc, l, c, 1
						break
					}
					k := 0
					for k < n && pieces[k] != pc {
						k++
					}
					if k == n {
						pieces[k], locals[k] = pc, l
						n++
					}
					masks[k] |= 1 << b
				}
				for k := 0; k < n; k++ {
					e8 := w[masks[k]]
					if dual {
						e8 = w[255-masks[k]]
					}
					switch {
					case e8 == 0:
					case locals[k] > 0:
						t.Euler8[locals[k]-1] += e8
					default:
						foreign(pieces[k], e8)
					}
				}
			}
		}
	}
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
