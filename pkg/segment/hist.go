package segment

import (
	"fmt"
	"math"

	"sluice/pkg/filter"
	"sluice/pkg/volume"
)

// Hist is a grey-level histogram of filtered voxels that merges by
// addition. Bin i holds the values v with Lo + i·Width <= v < Lo + (i+1)·Width
// (values beyond the ends go to the end bins); its centre is
// Lo + (i + ½)·Width. The binning depends only on the dtype and Params, never
// on the data of a tile, so tile histograms of one step add exactly.
type Hist struct {
	DType  string  `json:"dtype"`
	Lo     float64 `json:"lo"`
	Width  float64 `json:"width"`
	Counts []int64 `json:"counts"`
	// Solid counts the solid voxels of the reference mask (reference mode
	// only), for the solid grey of the partial-volume correction.
	Solid []int64 `json:"solid,omitempty"`
	// Columns are per-(y, x)-block sums of bin indices over all voxels of the
	// core, used by DetectSample; sorted by (BY, BX).
	Columns []Column `json:"columns,omitempty"`
}

// Column holds integer moments of the bin index over the voxels of one
// (y, x) block of SampleBlock² columns: exact under addition.
type Column struct {
	BY, BX int
	N      int64
	Sum    int64
	SumSq  int64
}

// Centre returns the centre grey value of bin i.
func (h Hist) Centre(i int) float64 { return h.Lo + (float64(i)+0.5)*h.Width }

// Total returns the number of voxels counted.
func (h Hist) Total() int64 {
	var n int64
	for _, c := range h.Counts {
		n += c
	}
	return n
}

// Add merges o into h. Both must have the same binning.
func (h *Hist) Add(o Hist) error {
	if h.Counts == nil {
		*h = Hist{DType: o.DType, Lo: o.Lo, Width: o.Width, Counts: append([]int64(nil), o.Counts...),
			Solid: append([]int64(nil), o.Solid...), Columns: append([]Column(nil), o.Columns...)}
		return nil
	}
	if h.DType != o.DType || h.Lo != o.Lo || h.Width != o.Width || len(h.Counts) != len(o.Counts) {
		return fmt.Errorf("segment: cannot merge histograms with different binning (%s %g+%g×%d vs %s %g+%g×%d)",
			h.DType, h.Lo, h.Width, len(h.Counts), o.DType, o.Lo, o.Width, len(o.Counts))
	}
	for i, c := range o.Counts {
		h.Counts[i] += c
	}
	if len(o.Solid) > 0 {
		if len(h.Solid) == 0 {
			h.Solid = make([]int64, len(h.Counts))
		}
		if len(o.Solid) != len(h.Solid) {
			return fmt.Errorf("segment: cannot merge solid histograms of %d and %d bins", len(h.Solid), len(o.Solid))
		}
		for i, c := range o.Solid {
			h.Solid[i] += c
		}
	}
	h.Columns = mergeColumns(h.Columns, o.Columns)
	return nil
}

func mergeColumns(a, b []Column) []Column {
	out := make([]Column, 0, len(a)+len(b))
	i, j := 0, 0
	less := func(x, y Column) bool { return x.BY < y.BY || (x.BY == y.BY && x.BX < y.BX) }
	for i < len(a) || j < len(b) {
		switch {
		case j == len(b) || (i < len(a) && less(a[i], b[j])):
			out = append(out, a[i])
			i++
		case i == len(a) || less(b[j], a[i]):
			out = append(out, b[j])
			j++
		default:
			c := a[i]
			c.N += b[j].N
			c.Sum += b[j].Sum
			c.SumSq += b[j].SumSq
			out = append(out, c)
			i++
			j++
		}
	}
	return out
}

// binning returns lo, width and the number of bins for a dtype.
func binning(d volume.DType, p Params) (lo, width float64, n int, err error) {
	switch d {
	case volume.Uint8:
		return 0, 1, 256, nil
	case volume.Uint16:
		b := p.Bins
		if b < 16 || b > 1024 || b&(b-1) != 0 {
			return 0, 0, 0, fmt.Errorf("segment: uint16 bins %d must be a power of two from 16 to 1024", b)
		}
		return 0, float64(65536 / b), b, nil
	case volume.Float32:
		if !(p.Range[1] > p.Range[0]) {
			return 0, 0, 0, fmt.Errorf("segment: float32 data need a histogram range (set range or run Extent first)")
		}
		return p.Range[0], (p.Range[1] - p.Range[0]) / float64(p.Bins), p.Bins, nil
	}
	return 0, 0, 0, fmt.Errorf("segment: unsupported dtype %v", d)
}

func binOf(v, lo, width float64, n int) int {
	i := int(math.Floor((v - lo) / width))
	if i < 0 || v != v {
		return 0
	}
	if i >= n {
		return n - 1
	}
	return i
}

// Filtered returns the grey of box out after p's denoiser, as float32 (grey
// must cover out plus FilterHalo, clipped to the scan) — the values the
// histogram and the thresholds see.
func Filtered(grey volume.Any, out volume.Box, p Params) (*volume.Volume[float32], error) {
	return filtered(grey, out, p)
}

// filtered converts grey to float32 and runs the configured filter over
// out (which must lie inside grey's box). Integer grey with the median or
// no filter is filtered as integers and only out is converted.
func filtered(grey volume.Any, out volume.Box, p Params) (*volume.Volume[float32], error) {
	if grey == nil {
		return nil, fmt.Errorf("segment: nil grey volume")
	}
	if !grey.Bounds().ContainsBox(out) || out.Empty() {
		return nil, fmt.Errorf("segment: box %v is empty or not inside the grey volume %v", out, grey.Bounds())
	}
	var in *volume.Volume[float32]
	switch v := grey.(type) {
	case *volume.Volume[float32]:
		in = v
	case *volume.Volume[uint8]:
		if f, ok, err := integerFiltered(v, out, p); ok {
			return f, err
		}
		in = volume.Float(v)
	case *volume.Volume[uint16]:
		if f, ok, err := integerFiltered(v, out, p); ok {
			return f, err
		}
		in = volume.Float(v)
	default:
		return nil, fmt.Errorf("segment: unsupported grey volume %T", grey)
	}
	if err := in.Validate(); err != nil {
		return nil, fmt.Errorf("segment: grey: %w", err)
	}
	switch p.Filter.Method {
	case "median":
		return filter.Median3(in, out)
	case "gaussian":
		return filter.Gaussian(in, out, p.Filter.Sigma, p.Filter.Truncate)
	case "nlm":
		return p.Filter.NLM.Apply(in, out)
	}
	return in.Crop(out, 0), nil
}

// integerFiltered handles integer grey with the median or no filter; ok is
// false for the other filters.
func integerFiltered[T filter.Integer](v *volume.Volume[T], out volume.Box, p Params) (f *volume.Volume[float32], ok bool, err error) {
	switch p.Filter.Method {
	case "median", "none":
	default:
		return nil, false, nil
	}
	if err := v.Validate(); err != nil {
		return nil, true, fmt.Errorf("segment: grey: %w", err)
	}
	if p.Filter.Method == "none" {
		return volume.Float(v.Crop(out, 0)), true, nil
	}
	f, err = medianFloat(v, out)
	return f, true, err
}

// poreMask reports whether the reference mask marks (z, y, x) as pore.
func poreMask(solid *volume.Labels, p Params, z, y, x int) bool {
	l := solid.At(z, y, x)
	return l != p.Codes.Solid && l != 255
}

func checkMask(solid *volume.Labels, box volume.Box) error {
	if solid == nil {
		return fmt.Errorf("segment: reference mode needs a solid mask")
	}
	if !solid.Box.ContainsBox(box) {
		return fmt.Errorf("segment: solid mask %v does not cover %v", solid.Box, box)
	}
	return nil
}

// Histogram filters grey (core plus halo, global coordinates) and returns the
// histogram of the filtered core voxels inside the sample (and, in reference
// mode, in the pore space of the solid mask), together with the column
// statistics of all core voxels for DetectSample. Merge tile histograms with
// Add.
func Histogram(grey volume.Any, core volume.Box, p Params, solid *volume.Labels) (Hist, error) {
	if err := p.Validate(); err != nil {
		return Hist{}, err
	}
	lo, width, n, err := binning(grey.DType(), p)
	if err != nil {
		return Hist{}, err
	}
	if p.Reference {
		if err := checkMask(solid, core); err != nil {
			return Hist{}, err
		}
	}
	f, err := filtered(grey, core, p)
	if err != nil {
		return Hist{}, err
	}
	// In reference mode with the partial-volume correction on, only pore
	// voxels away from the solid (blurred solid fraction <= BulkFraction)
	// enter the fluid histogram, so the threshold comes from bulk fluid.
	var near *volume.Volume[float32]
	if p.Reference && p.PartialVolume.Blur > 0 {
		if err := checkMask(solid, core.Grow(p.PVHalo()).Intersect(grey.Bounds())); err != nil {
			return Hist{}, err
		}
		if near, err = solidFraction(solid, core, p); err != nil {
			return Hist{}, err
		}
	}
	h := Hist{DType: grey.DType().String(), Lo: lo, Width: width, Counts: make([]int64, n)}
	if p.Reference {
		h.Solid = make([]int64, n)
	}
	// Blocks of the core: by0..by1 × bx0..bx1, held in (BY, BX) order.
	B := p.SampleBlock
	by0, bx0 := floorDiv(core.Min[1], B), floorDiv(core.Min[2], B)
	nbx := floorDiv(core.Max[2]-1, B) - bx0 + 1
	h.Columns = make([]Column, (floorDiv(core.Max[1]-1, B)-by0+1)*nbx)
	for k := range h.Columns {
		h.Columns[k].BY, h.Columns[k].BX = by0+k/nbx, bx0+k%nbx
	}
	spans := sampleSpans(p.Sample, core)
	i := 0
	for z := core.Min[0]; z < core.Max[0]; z++ {
		for y := core.Min[1]; y < core.Max[1]; y++ {
			cr := h.Columns[(floorDiv(y, B)-by0)*nbx:][:nbx]
			sp := spans[y-core.Min[1]]
			for x := core.Min[2]; x < core.Max[2]; x++ {
				if v := f.Pix[i]; v-v != 0 {
					return Hist{}, nonFinite(v, z, y, x)
				}
				b := binOf(float64(f.Pix[i]), lo, width, n)
				i++
				c := &cr[floorDiv(x, B)-bx0]
				c.N++
				c.Sum += int64(b)
				c.SumSq += int64(b) * int64(b)
				if xi := x - core.Min[2]; xi < sp[0] || xi >= sp[1] {
					continue
				}
				if p.Reference && !poreMask(solid, p, z, y, x) {
					if solid.At(z, y, x) == p.Codes.Solid {
						h.Solid[b]++
					}
					continue
				}
				if near != nil && near.Pix[i-1] > BulkFraction {
					continue
				}
				h.Counts[b]++
			}
		}
	}
	return h, nil
}

// nonFinite refuses a filtered grey value that is NaN or ±Inf: it has no
// bin and no class, and binning it anywhere would be a silent guess. The
// readers' callers refuse such scans naming the file (volio.CheckFinite);
// this is the same refusal for grey that reaches the segmentation
// directly.
func nonFinite(v float32, z, y, x int) error {
	return fmt.Errorf("segment: grey value %v at z=%d y=%d x=%d is not a finite number (NaN or ±Inf); refusing the scan", v, z, y, x)
}

func floorDiv(a, b int) int {
	q := a / b
	if a%b != 0 && a < 0 {
		q--
	}
	return q
}

// Extent is the range of filtered grey values; extents merge by min/max.
// It is the first pass for float32 data without a configured Range.
type Extent struct {
	Min, Max float64
	N        int64
}

// Add merges o into e.
func (e *Extent) Add(o Extent) {
	if o.N == 0 {
		return
	}
	if e.N == 0 {
		*e = o
		return
	}
	e.Min, e.Max, e.N = math.Min(e.Min, o.Min), math.Max(e.Max, o.Max), e.N+o.N
}

// Range returns [Min, Max] widened by half a bin so that Max falls inside
// the last bin; use it as Params.Range.
func (e Extent) Range(bins int) [2]float64 {
	w := (e.Max - e.Min) / float64(bins)
	if w == 0 {
		w = 1
	}
	return [2]float64{e.Min, e.Max + w/2}
}

// CampaignRange returns Range widened by FloatMargin of Max − Min on either
// side: the binning of a float32 step in threshold scope "campaign", which
// the campaign keeps once the step fixes its thresholds
// (CampaignBinning).
func (e Extent) CampaignRange(bins int) [2]float64 {
	m := FloatMargin * (e.Max - e.Min)
	return Extent{Min: e.Min - m, Max: e.Max + m, N: e.N}.Range(bins)
}

// MeasureExtent filters grey and returns the extent of the filtered core
// voxels inside the sample (and the pore space, in reference mode).
func MeasureExtent(grey volume.Any, core volume.Box, p Params, solid *volume.Labels) (Extent, error) {
	if err := p.Validate(); err != nil {
		return Extent{}, err
	}
	if p.Reference {
		if err := checkMask(solid, core); err != nil {
			return Extent{}, err
		}
	}
	f, err := filtered(grey, core, p)
	if err != nil {
		return Extent{}, err
	}
	e := Extent{Min: math.Inf(1), Max: math.Inf(-1)}
	i := 0
	for z := core.Min[0]; z < core.Max[0]; z++ {
		for y := core.Min[1]; y < core.Max[1]; y++ {
			for x := core.Min[2]; x < core.Max[2]; x++ {
				v := float64(f.Pix[i])
				i++
				if v-v != 0 {
					return Extent{}, nonFinite(f.Pix[i-1], z, y, x)
				}
				if !p.Sample.Inside(y, x) || (p.Reference && !poreMask(solid, p, z, y, x)) {
					continue
				}
				e.Min, e.Max, e.N = math.Min(e.Min, v), math.Max(e.Max, v), e.N+1
			}
		}
	}
	if e.N == 0 {
		return Extent{}, nil
	}
	return e, nil
}

// BulkFraction is the largest blurred solid fraction of a pore voxel that
// still counts as bulk fluid for the reference-mode histogram.
const BulkFraction = 0.02

// solidFraction returns, over out, the solid indicator of the reference
// mask blurred by the partial-volume Gaussian. The mask must cover out
// grown by PVHalo (clipped to the mask, which is clipped to the scan).
func solidFraction(solid *volume.Labels, out volume.Box, p Params) (*volume.Volume[float32], error) {
	src := out.Grow(p.PVHalo()).Intersect(solid.Box)
	ind := volume.New[float32](src, 0)
	i := 0
	for z := src.Min[0]; z < src.Max[0]; z++ {
		for y := src.Min[1]; y < src.Max[1]; y++ {
			for x := src.Min[2]; x < src.Max[2]; x++ {
				if solid.At(z, y, x) == p.Codes.Solid {
					ind.Pix[i] = 1
				}
				i++
			}
		}
	}
	return filter.Gaussian(ind, out, p.PartialVolume.Blur, filter.DefaultTruncate)
}
