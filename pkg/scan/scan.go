// Package scan processes one step's grey volume the same way whether it is
// whole on one machine or cut into tiles across workers:
//
//	pass 1  Histogram per tile (filtered grey, halo = segmentation halo),
//	        merged by addition → Thresholds (and the sample cylinder)
//	pass 2  Tile: segment core + measurement halo, measure the core → the
//	        tile's labels and measure.Partial; partials merge with
//	        measure.Combine
//
// The grey box a tile reads in pass 2 is its core grown by Halo(), clipped
// to the scan. Because every stage is exact under this halo, the step
// result does not depend on the tiling (architecture.md).
package scan

import (
	"errors"
	"fmt"
	"runtime"
	"sync"

	"sluice/pkg/campaign"
	"sluice/pkg/measure"
	"sluice/pkg/segment"
	"sluice/pkg/volume"
)

// Halo returns the grey halo a pass-2 tile must be read with.
func Halo(c campaign.Config) (int, error) {
	mo, err := c.MeasureOptions()
	if err != nil {
		return 0, err
	}
	return c.Segment.Halo() + mo.Halo(), nil
}

// HistHalo returns the grey halo a pass-1 tile must be read with.
func HistHalo(c campaign.Config) int { return c.Segment.FilterHalo() }

// HistMaskHalo returns the halo of the solid mask of a pass-1 tile: wider
// than the grey where the reference-mode histogram blurs the mask
// (segment.solidFraction reads PVHalo voxels around each voxel). With the
// grey halo only, the blurred fraction near a tile's edge missed the solid
// beyond it and the histogram depended on the tile edge
// (TestReferencePass1Tiling).
func HistMaskHalo(c campaign.Config) int {
	if c.Segment.Reference && c.Segment.PartialVolume.Blur > 0 {
		return max(HistHalo(c), c.Segment.PVHalo())
	}
	return HistHalo(c)
}

// Histogram is pass 1 on one tile: grey covers core plus HistHalo, clipped
// to the scan. solid is the reference mask in reference mode, else nil.
func Histogram(grey volume.Any, core volume.Box, c campaign.Config, solid *volume.Labels) (segment.Hist, error) {
	return segment.Histogram(grey, core, c.Segment, solid)
}

// Tile is pass 2 on one tile: grey covers core plus Halo(c), clipped to
// whole. It returns the labels of the core and the tile's partial result.
func Tile(grey volume.Any, core, whole volume.Box, th segment.Thresholds, c campaign.Config, solid *volume.Labels) (*volume.Labels, *measure.Partial, error) {
	mo, err := c.MeasureOptions()
	if err != nil {
		return nil, nil, err
	}
	p := c.Segment
	p.Sample = th.Sample
	ext := core.Grow(mo.Halo()).Intersect(whole)
	lab, err := segment.Segment(grey, ext, th, p, solid)
	if err != nil {
		return nil, nil, err
	}
	if lab.VoxelSize == 0 {
		lab.VoxelSize = grey.EdgeLength()
	}
	part, err := measure.MeasureTile(lab, core, whole, mo)
	if err != nil {
		return nil, nil, err
	}
	if ext == core {
		return lab, part, nil
	}
	return lab.Crop(core, 0), part, nil
}

// Prepared is the outcome of pass 1 for a whole step.
type Prepared struct {
	Thresholds segment.Thresholds
	Hist       segment.Hist
}

// Source returns the grey (or mask) voxels of a box, clipped to the scan.
type Source func(box volume.Box) (volume.Any, error)

// MemorySource serves boxes of a volume held in memory.
func MemorySource(v volume.Any) Source {
	return func(box volume.Box) (volume.Any, error) { return crop(v, box.Intersect(v.Bounds())), nil }
}

// Prepare runs pass 1 over a whole step, reading tiles of edge c.Tile from
// src on `workers` goroutines: the float32 extent first when the range is
// not configured (in threshold scope "campaign" widened by
// segment.FloatMargin; give c the campaign's binning first with
// CampaignBinning), then the histogram, then — when the sample cylinder is to
// be detected — the detection and the histogram restricted to the sample
// (from per-superblock counts of the first histogram, only the superblocks
// the sample's rim cuts read and filtered again), and finally the
// thresholds. It returns the configuration with the
// measured range and sample filled in; pass 2 must use it.
func Prepare(src Source, whole volume.Box, dtype volume.DType, c campaign.Config, solid Source, workers int) (Prepared, campaign.Config, error) {
	t := volume.Tiling{Whole: whole, Tile: [3]int{c.Tile, c.Tile, c.Tile}}
	halo := HistHalo(c)
	maskHalo := HistMaskHalo(c)
	read := func(core volume.Box) (volume.Any, *volume.Labels, error) {
		box := core.Grow(halo).Intersect(whole)
		g, err := src(box)
		if err != nil || solid == nil {
			return g, nil, err
		}
		m, err := solid(core.Grow(maskHalo).Intersect(whole))
		if err != nil {
			return nil, nil, err
		}
		l, ok := m.(*volume.Labels)
		if !ok {
			return nil, nil, fmt.Errorf("scan: solid mask must be uint8 labels, not %s", m.DType())
		}
		return g, l, nil
	}
	if dtype == volume.Float32 && c.Segment.Range == [2]float64{} {
		var e segment.Extent
		var mu sync.Mutex
		err := forTiles(t, workers, func(core volume.Box) error {
			g, m, err := read(core)
			if err != nil {
				return err
			}
			x, err := segment.MeasureExtent(g, core, c.Segment, m)
			mu.Lock()
			e.Add(x)
			mu.Unlock()
			return err
		})
		if err != nil {
			return Prepared{}, c, err
		}
		if c.Segment.ThresholdScope == segment.ScopeCampaign {
			c.Segment.Range = e.CampaignRange(c.Segment.Bins)
		} else {
			c.Segment.Range = e.Range(c.Segment.Bins)
		}
	}
	// With the sample to be detected, pass 1 also keeps the counts of each
	// column superblock (superblocks): the histogram restricted to the
	// detected sample is then the sum over the superblocks inside it plus
	// the superblocks the sample's rim cuts, which alone are read and
	// filtered again (before, the whole step was filtered twice).
	var sb *superblocks
	if c.DetectSample && c.Segment.Sample.Radius == 0 {
		sb = newSuperblocks(whole)
	}
	var h segment.Hist
	var mu sync.Mutex
	err := forTiles(t, workers, func(core volume.Box) error {
		g, m, err := read(core)
		if err != nil {
			return err
		}
		var x segment.Hist
		if sb == nil {
			if x, err = Histogram(g, core, c, m); err != nil {
				return err
			}
		} else if x, err = sb.histogram(g, core, c, m); err != nil {
			return err
		}
		mu.Lock()
		defer mu.Unlock()
		return h.Add(x)
	})
	if err != nil {
		return Prepared{}, c, err
	}
	if sb != nil {
		s, err := segment.DetectSample(h, c.Segment, c.SampleMargin)
		if err != nil {
			return Prepared{}, c, err
		}
		c.Segment.Sample = s
		if s.Radius > 0 {
			// No sample (radius 0) means every voxel in view is in it:
			// the histogram is pass 1's as it is.
			if err := sb.restrict(&h, t, workers, c, read); err != nil {
				return Prepared{}, c, err
			}
		}
	}
	th, err := segment.ComputeThresholds(h, c.Segment)
	return Prepared{Thresholds: th, Hist: h}, c, err
}

// Whole segments and measures a grey volume held in memory, tile by tile on
// `workers` goroutines, and returns the labels, the step result and the
// thresholds used.
func Whole(grey volume.Any, c campaign.Config, solid *volume.Labels, workers int) (*volume.Labels, *measure.Result, Prepared, error) {
	lab, res, prep, _, err := WholeCampaign(grey, c, solid, workers, nil, "", 0)
	return lab, res, prep, err
}

// CampaignBinning returns c with the grey binning of a step of a campaign
// whose thresholds record so far is stored (segment.CampaignBinning): a
// float32 step at or after the one that fixed the record bins over the
// record's range. Call it before Prepare.
func CampaignBinning(c campaign.Config, dtype volume.DType, stored *segment.CampaignThresholds, step string, timeS float64) (campaign.Config, error) {
	p, err := segment.CampaignBinning(c.Segment, dtype, stored, step, timeS)
	c.Segment = p
	return c, err
}

// CampaignPrepare turns the pass-1 outcome of a step into its thresholds
// in threshold scope "campaign" (segment.CampaignStep): stored is the
// campaign's record (nil when none is stored yet), the returned record is
// the one to store (nil: nothing new). In scope "step" prep is returned
// as it is.
func CampaignPrepare(prep Prepared, c campaign.Config, stored *segment.CampaignThresholds, step string, timeS float64) (Prepared, *segment.CampaignThresholds, error) {
	if c.Segment.ThresholdScope != segment.ScopeCampaign {
		return prep, nil, nil
	}
	th, fresh, err := segment.CampaignStep(prep.Hist, prep.Thresholds, stored, c.Segment, step, timeS)
	if err != nil {
		return prep, nil, err
	}
	prep.Thresholds = th
	return prep, fresh, nil
}

// WholeCampaign is Whole for one step of a campaign in threshold scope
// "campaign": stored is the campaign's thresholds so far (nil: none yet) and
// the record this step fixed is returned (nil: none). In scope "step" it is
// Whole.
func WholeCampaign(grey volume.Any, c campaign.Config, solid *volume.Labels, workers int, stored *segment.CampaignThresholds, step string, timeS float64) (*volume.Labels, *measure.Result, Prepared, *segment.CampaignThresholds, error) {
	var solidSrc Source
	if solid != nil {
		solidSrc = MemorySource(solid)
	}
	c, err := CampaignBinning(c, grey.DType(), stored, step, timeS)
	if err != nil {
		return nil, nil, Prepared{}, nil, err
	}
	prep, c, err := Prepare(MemorySource(grey), grey.Bounds(), grey.DType(), c, solidSrc, workers)
	if err != nil {
		return nil, nil, prep, nil, err
	}
	prep, fresh, err := CampaignPrepare(prep, c, stored, step, timeS)
	if err != nil {
		return nil, nil, prep, nil, err
	}
	lab, res, err := wholePass2(grey, c, solid, prep, workers)
	return lab, res, prep, fresh, err
}

func wholePass2(grey volume.Any, c campaign.Config, solid *volume.Labels, prep Prepared, workers int) (*volume.Labels, *measure.Result, error) {
	whole := grey.Bounds()
	halo, err := Halo(c)
	if err != nil {
		return nil, nil, err
	}
	mo, _ := c.MeasureOptions()
	t := volume.Tiling{Whole: whole, Tile: [3]int{c.Tile, c.Tile, c.Tile}}
	labels := volume.New[uint8](whole, grey.EdgeLength())
	parts := make([]*measure.Partial, t.Len())
	var mu sync.Mutex
	err = forTilesIndexed(t, workers, func(i int, core volume.Box) error {
		box := core.Grow(halo).Intersect(whole)
		lab, part, err := Tile(crop(grey, box), core, whole, prep.Thresholds, c, cropLabels(solid, box))
		if err != nil {
			return err
		}
		mu.Lock()
		labels.Paste(lab)
		parts[i] = part
		mu.Unlock()
		return nil
	})
	if err != nil {
		return nil, nil, err
	}
	vs := grey.EdgeLength()
	if vs == 0 {
		vs = 1e-6
	}
	res, err := measure.Combine(parts, whole, vs, mo)
	if err == nil {
		res.PhasesDetected, res.PhasesNote = prep.Thresholds.Phases.InScan(), prep.Thresholds.Phases.Describe()
		SetDrift(res, prep.Thresholds)
	}
	return labels, res, err
}

// SetDrift copies the grey-level drift of a step in threshold scope
// "campaign" (th.Campaign) into its result: per phase in grey units and as
// a fraction of the contrast, and whether a shift was capped.
func SetDrift(res *measure.Result, th segment.Thresholds) {
	c := th.Campaign
	if c == nil || c.Pending {
		return
	}
	for k := 0; k < len(c.Order) && k < len(c.Drift.Delta); k++ {
		d, f := c.Drift.Delta[k], c.Drift.Fraction[k]
		switch c.Order[k] {
		case 'n':
			res.GreyDriftNonwetting, res.GreyDriftNonwettingFraction = d, f
		case 'w':
			res.GreyDriftWetting, res.GreyDriftWettingFraction = d, f
		case 's':
			res.GreyDriftSolid, res.GreyDriftSolidFraction = d, f
		}
	}
	beyond := c.Drift.Beyond
	res.GreyDriftBeyond, res.GreyDriftNote = &beyond, c.Drift.Note
}

func forTiles(t volume.Tiling, workers int, f func(core volume.Box) error) error {
	return forTilesIndexed(t, workers, func(_ int, core volume.Box) error { return f(core) })
}

func forTilesIndexed(t volume.Tiling, workers int, f func(i int, core volume.Box) error) error {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	n := t.Len()
	errs := make([]error, n)
	next := make(chan int)
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				errs[i] = f(i, t.Core(i))
			}
		}()
	}
	for i := 0; i < n; i++ {
		next <- i
	}
	close(next)
	wg.Wait()
	return errors.Join(errs...)
}

// crop returns the part of a volume inside box (a copy).
func crop(a volume.Any, box volume.Box) volume.Any {
	switch v := a.(type) {
	case *volume.Volume[uint8]:
		if v.Box == box {
			return v
		}
		return v.Crop(box, 0)
	case *volume.Volume[uint16]:
		if v.Box == box {
			return v
		}
		return v.Crop(box, 0)
	case *volume.Volume[float32]:
		if v.Box == box {
			return v
		}
		return v.Crop(box, 0)
	}
	panic(fmt.Sprintf("scan: unsupported volume %T", a))
}

func cropLabels(l *volume.Labels, box volume.Box) *volume.Labels {
	if l == nil {
		return nil
	}
	return l.Crop(box, 0)
}
