package filter

import (
	"fmt"
	"math"

	"sluice/pkg/volume"
)

// NLM holds the parameters of the non-local means filter (Buades, Coll &
// Morel 2005). For voxel p the output is
//
//	NL(p) = Σ_q w(p,q) u(q) / Σ_q w(p,q),   q in the search cube of p,
//	w(p,q) = exp(−max(d²(p,q) − 2σ², 0) / h²),
//	d²(p,q) = mean over the patch cube of (u(p+t) − u(q+t))²,
//
// with w(p,p) replaced by max_{q≠p} w(p,q) (Buades, Coll & Morel 2011, IPOL).
// σ is the standard deviation of the noise and h the filtering strength,
// both in grey units of the input.
type NLM struct {
	// PatchRadius is the half-width of the patch cube (1 = 3×3×3).
	PatchRadius int `json:"patch_radius" yaml:"patch_radius"`
	// SearchRadius is the half-width of the search cube (2 = 5×5×5).
	SearchRadius int `json:"search_radius" yaml:"search_radius"`
	// Sigma is the noise standard deviation in grey units (> 0).
	Sigma float64 `json:"sigma" yaml:"sigma"`
	// H is the filtering strength in grey units; 0 means HFactor·Sigma with
	// the default factor.
	H float64 `json:"h" yaml:"h"`
}

// DefaultNLMHFactor is h/σ when H is left at zero. It was chosen on the
// forward-model scans of pkg/forward (3-D patches of 27 voxels give a less
// noisy distance than 2-D ones, so h can be larger than the 0.4σ suggested
// for 3×3 patches in the IPOL paper).
const DefaultNLMHFactor = 0.8

// nlmChunk is the z thickness of the slabs NLM works on: its per-slab
// buffers (three float32 blocks of chunk+2f slices, three float64 blocks of
// chunk slices) stay small whatever the tile size.
const nlmChunk = 8

// DefaultNLM returns patch radius 1, search radius 2 and the given noise σ.
func DefaultNLM(sigma float64) NLM { return NLM{PatchRadius: 1, SearchRadius: 2, Sigma: sigma} }

// Halo returns the halo the filter needs: patch radius + search radius.
func (p NLM) Halo() int { return p.PatchRadius + p.SearchRadius }

// Validate reports unusable parameters.
func (p NLM) Validate() error {
	if p.PatchRadius < 0 || p.PatchRadius > 3 || p.SearchRadius < 1 || p.SearchRadius > 6 {
		return fmt.Errorf("filter: NLM patch radius %d (want 0..3) or search radius %d (want 1..6) out of range", p.PatchRadius, p.SearchRadius)
	}
	if !(p.Sigma > 0) || math.IsInf(p.Sigma, 0) || p.H < 0 || math.IsNaN(p.H) || math.IsInf(p.H, 0) {
		return fmt.Errorf("filter: NLM needs a noise sigma > 0 (got %g) and h >= 0 (got %g)", p.Sigma, p.H)
	}
	return nil
}

// Apply filters in over core.
func (p NLM) Apply(in *volume.Volume[float32], core volume.Box) (*volume.Volume[float32], error) {
	if err := check(in, core); err != nil {
		return nil, err
	}
	if err := p.Validate(); err != nil {
		return nil, err
	}
	h := p.H
	if h == 0 {
		h = DefaultNLMHFactor * p.Sigma
	}
	inv := 1 / (h * h)
	f, sr := p.PatchRadius, p.SearchRadius
	np := float64((2*f + 1) * (2*f + 1) * (2*f + 1))
	bias := 2 * p.Sigma * p.Sigma
	out := volume.New[float32](core, in.VoxelSize)
	ib := in.Box
	s := ib.Size()
	nyx := s[1] * s[2]
	chunks(core.Min[0], core.Max[0], nlmChunk, func(z0, z1 int) {
		g := f + sr
		// Clamped index tables over the slab grown by patch + search.
		lo := [3]int{z0 - g, core.Min[1] - g, core.Min[2] - g}
		hi := [3]int{z1 + g, core.Max[1] + g, core.Max[2] + g}
		var tab [3][]int
		stride := [3]int{nyx, s[2], 1}
		for a := 0; a < 3; a++ {
			tab[a] = make([]int, hi[a]-lo[a])
			for c := lo[a]; c < hi[a]; c++ {
				tab[a][c-lo[a]] = (clamp(c, ib.Min[a], ib.Max[a]) - ib.Min[a]) * stride[a]
			}
		}
		// P: slab grown by the patch radius.
		pb := volume.Box{Min: [3]int{z0 - f, core.Min[1] - f, core.Min[2] - f}, Max: [3]int{z1 + f, core.Max[1] + f, core.Max[2] + f}}
		ps := pb.Size()
		cs := [3]int{z1 - z0, core.Max[1] - core.Min[1], core.Max[2] - core.Min[2]}
		d := make([]float32, ps[0]*ps[1]*ps[2])
		bx := make([]float32, ps[0]*ps[1]*cs[2])
		by := make([]float32, ps[0]*cs[1]*cs[2])
		bz := make([]float32, cs[2])
		nc := cs[0] * cs[1] * cs[2]
		sumW := make([]float64, nc)
		sumWU := make([]float64, nc)
		wmax := make([]float64, nc)
		for oz := -sr; oz <= sr; oz++ {
			for oy := -sr; oy <= sr; oy++ {
				for ox := -sr; ox <= sr; ox++ {
					if oz == 0 && oy == 0 && ox == 0 {
						continue
					}
					// Squared differences over P.
					fastX := pb.Min[2]-sr >= ib.Min[2] && pb.Max[2]+sr <= ib.Max[2]
					i := 0
					for z := pb.Min[0]; z < pb.Max[0]; z++ {
						tz, tzo := tab[0][z-lo[0]], tab[0][z+oz-lo[0]]
						for y := pb.Min[1]; y < pb.Max[1]; y++ {
							ty, tyo := tab[1][y-lo[1]], tab[1][y+oy-lo[1]]
							a, b := tz+ty, tzo+tyo
							row := d[i : i+ps[2]]
							if fastX {
								// No clamping along x: contiguous rows.
								pa := in.Pix[a+tab[2][pb.Min[2]-lo[2]]:][:len(row)]
								po := in.Pix[b+tab[2][pb.Min[2]+ox-lo[2]]:][:len(row)]
								for x := range row {
									v := pa[x] - po[x]
									row[x] = v * v
								}
							} else {
								xt := tab[2][pb.Min[2]-lo[2]:]
								xo := tab[2][pb.Min[2]+ox-lo[2]:]
								for x := range row {
									v := in.Pix[a+xt[x]] - in.Pix[b+xo[x]]
									row[x] = v * v
								}
							}
							i += ps[2]
						}
					}
					// Patch sums: x, then y, then z, each a fixed-order sum
					// (t = 0, 1, …, 2f), done row by row.
					nx := cs[2]
					for zy := 0; zy < ps[0]*ps[1]; zy++ {
						src := d[zy*ps[2]:][:nx+2*f]
						dst := bx[zy*nx:][:nx]
						copy(dst, src[:nx])
						for t := 1; t <= 2*f; t++ {
							st := src[t:][:nx]
							for x := range dst {
								dst[x] += st[x]
							}
						}
					}
					for z := 0; z < ps[0]; z++ {
						for y := 0; y < cs[1]; y++ {
							dst := by[(z*cs[1]+y)*nx:][:nx]
							copy(dst, bx[(z*ps[1]+y)*nx:][:nx])
							for t := 1; t <= 2*f; t++ {
								st := bx[(z*ps[1]+y+t)*nx:][:nx]
								for x := range dst {
									dst[x] += st[x]
								}
							}
						}
					}
					i = 0
					for z := 0; z < cs[0]; z++ {
						tzo := tab[0][z0+z+oz-lo[0]]
						for y := 0; y < cs[1]; y++ {
							tyo := tab[1][core.Min[1]+y+oy-lo[1]]
							xo := tab[2][core.Min[2]+ox-lo[2]:][:nx]
							acc := bz[:nx]
							copy(acc, by[(z*cs[1]+y)*nx:][:nx])
							for t := 1; t <= 2*f; t++ {
								st := by[((z+t)*cs[1]+y)*nx:][:nx]
								for x := range acc {
									acc[x] += st[x]
								}
							}
							sw, swu, wm := sumW[i:][:nx], sumWU[i:][:nx], wmax[i:][:nx]
							for x := range acc {
								e := (float64(acc[x])/np - bias) * inv
								if e < expMax {
									w := expNeg(e)
									sw[x] += w
									swu[x] += w * float64(in.Pix[tzo+tyo+xo[x]])
									if w > wm[x] {
										wm[x] = w
									}
								}
							}
							i += nx
						}
					}
				}
			}
		}
		i := 0
		for z := z0; z < z1; z++ {
			for y := core.Min[1]; y < core.Max[1]; y++ {
				src := in.Index(z, y, core.Min[2])
				o := out.Index(z, y, core.Min[2])
				for x := 0; x < cs[2]; x++ {
					u := float64(in.Pix[src+x])
					wc := wmax[i]
					if wc == 0 {
						wc = 1
					}
					out.Pix[o+x] = float32((sumWU[i] + wc*u) / (sumW[i] + wc))
					i++
				}
			}
		}
	})
	return out, nil
}

// expMax bounds the weight argument: exp(−30) ≈ 1e-13 counts as zero.
const expMax = 30

// expTable holds exp(−k/expStep) for k = 0..expMax·expStep+1.
const expStep = 256

var expTable = func() []float64 {
	t := make([]float64, expMax*expStep+2)
	for k := range t {
		t[k] = math.Exp(-float64(k) / expStep)
	}
	return t
}()

// expNeg returns exp(−e) for e < expMax (1 for e <= 0) by linear
// interpolation in expTable (relative error < 2e-6): the same value
// for the same e on every machine and tiling.
func expNeg(e float64) float64 {
	if e <= 0 {
		return 1
	}
	f := e * expStep
	k := int(f)
	r := f - float64(k)
	return expTable[k] + (expTable[k+1]-expTable[k])*r
}
