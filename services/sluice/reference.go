package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"strings"

	"sluice/pkg/layout"
	"sluice/pkg/phase"
	"sluice/pkg/segment"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
	"sluice/services/ingest"
)

// runReference is `sluice reference`: segment a high-quality reference scan
// of the sample (brine-saturated or dry, long exposure) once into a solid
// mask and store it with the campaign, for reference-scan mode
// (segment.reference: true), where each fast scan then only separates the
// two fluids inside the pore space.
func runReference(args []string) int {
	fs := flag.NewFlagSet("reference", flag.ContinueOnError)
	var in inputFlags
	var cf campaignFlags
	in.register(fs)
	cf.register(fs)
	name := fs.String("campaign", "", "campaign the mask belongs to (created with --config when new)")
	config := fs.String("config", "", "campaign config for a new campaign")
	filterName := fs.String("filter", "none", "denoiser before the threshold: none (a long-exposure scan needs none), median, gaussian")
	method := fs.String("threshold", "isodata", "isodata (midpoint of the two class means), otsu, or a grey value")
	solidDark := fs.Bool("solid-darker", false, "the rock is darker than the pore fluid of the reference scan")
	sample := fs.String("sample", "", "sample cylinder Y,X,R in voxels; voxels outside become 255 (default: none)")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if len(pos) != 1 || *name == "" {
		return fail(exitBadInput, "reference: want --campaign and one FILE")
	}
	path := pos[0]
	ctx := context.Background()
	if cf.store == "" {
		cf.store = cf.data + "/store"
	}
	st, err := store.Open(ctx, cf.store, store.Credentials{})
	if err != nil {
		return fail(exitBadInput, "reference: %v", err)
	}
	cfg, err := loadConfig(*config)
	if err != nil {
		return fail(exitBadInput, "reference: %v", err)
	}
	rec, err := ingest.EnsureCampaign(ctx, st, *name, cfg, Version, "")
	if err != nil {
		return fail(exitBadInput, "reference: %v", err)
	}
	ropt, err := in.options()
	if err != nil {
		return fail(exitBadInput, "reference: %s: %v", path, err)
	}
	ropt = withDataset(ropt, cfg)
	grey, err := volio.Open(path, ropt)
	if err != nil {
		return fail(exitBadInput, "%v", err)
	}
	var sf segFlags
	sf.sample = *sample
	mask, thr, err := solidMask(grey, *filterName, *method, *solidDark, rec.Config.Segment.Codes, sf)
	if err != nil {
		return fail(exitBadInput, "reference: %s: %v", path, err)
	}
	c, _ := layout.NewCampaign(*name)
	key, err := storeReference(ctx, st, c, grey, mask, rec.Config.Tile)
	if err != nil {
		return fail(exitFailure, "reference: %v", err)
	}
	var solid, pore, out int
	for _, v := range mask.Pix {
		switch v {
		case rec.Config.Segment.Codes.Solid:
			solid++
		case phase.Outside:
			out++
		default:
			pore++
		}
	}
	fmt.Fprintf(stdout, "threshold %.6g; solid %d, pore %d, outside %d voxels (porosity %.4f)\nsolid mask stored at %s, the scan's grey values (for drift registration) at %s\nset `segment: {reference: true}` in the campaign config to use it\n",
		thr, solid, pore, out, float64(pore)/float64(max(solid+pore, 1)), key, c.ReferenceVolume())
	return exitOK
}

// solidMask thresholds a reference scan into solid / pore / outside.
func solidMask(grey volume.Any, filterName, method string, solidDark bool, codes phase.Codes, sf segFlags) (*volume.Labels, float64, error) {
	p := segment.Defaults()
	p.Filter.Method = filterName
	p.Codes = codes
	p.Threshold = "otsu"
	if sf.sample != "" {
		c, err := sf.campaignConfig()
		if err != nil {
			return nil, 0, err
		}
		p.Sample = c.Segment.Sample
	}
	if err := p.Validate(); err != nil {
		return nil, 0, err
	}
	if grey.DType() == volume.Float32 {
		e, err := segment.MeasureExtent(grey, grey.Bounds(), p, nil)
		if err != nil {
			return nil, 0, err
		}
		p.Range = e.Range(p.Bins)
	}
	h, err := segment.Histogram(grey, grey.Bounds(), p, nil)
	if err != nil {
		return nil, 0, err
	}
	var thr float64
	switch method {
	case "isodata", "otsu":
		f := segment.Isodata
		if method == "otsu" {
			f = segment.Otsu
		}
		b, err := f(h.Counts)
		if err != nil {
			return nil, 0, err
		}
		thr = h.Centre(b)
	default:
		if _, err := fmt.Sscan(method, &thr); err != nil {
			return nil, 0, fmt.Errorf("threshold %q: want isodata, otsu or a grey value", method)
		}
	}
	// Filtered grey (the same filter the histogram saw) for the decision.
	f := volume.Float(grey)
	if filterName != "none" {
		lab, err := segment.Filtered(grey, grey.Bounds(), p)
		if err != nil {
			return nil, 0, err
		}
		f = lab
	}
	mask := volume.New[uint8](grey.Bounds(), grey.EdgeLength())
	b := mask.Box
	i := 0
	for z := b.Min[0]; z < b.Max[0]; z++ {
		for y := b.Min[1]; y < b.Max[1]; y++ {
			for x := b.Min[2]; x < b.Max[2]; x++ {
				v := float64(f.Pix[i])
				switch {
				case !p.Sample.Inside(y, x):
					mask.Pix[i] = phase.Outside
				case (v > thr) != solidDark:
					mask.Pix[i] = codes.Solid
				default:
					mask.Pix[i] = codes.Wetting
				}
				i++
			}
		}
	}
	return mask, thr, nil
}

// storeReference writes the reference scan's grey values as the
// campaign's reference/volume.zarr (what steps are registered to, package
// register) and then its mask as solid.zarr.
func storeReference(ctx context.Context, st store.Store, c layout.Campaign, grey volume.Any, mask *volume.Labels, tile int) (string, error) {
	prefix := strings.TrimSuffix(c.SolidMask(), "/")
	if _, err := volio.OpenZarr(ctx, st, prefix); err == nil {
		return "", errors.New(c.SolidMask() + " exists; a campaign keeps one reference mask (start a new campaign for another)")
	}
	s := mask.Shape()
	chunks := [3]int{min(tile, s[0]), min(tile, s[1]), min(tile, s[2])}
	g, err := volio.CreateZarr(ctx, st, strings.TrimSuffix(c.ReferenceVolume(), "/"), volio.ZarrMeta{Shape: grey.Bounds().Size(), Chunks: chunks,
		DType: grey.DType(), Compressor: "zstd", VoxelSize: grey.EdgeLength(),
		Attrs: map[string]any{"role": "reference scan", "software_version": Version}})
	if err != nil {
		return "", err
	}
	if err := g.WriteBox(ctx, grey); err != nil {
		return "", err
	}
	z, err := volio.CreateZarr(ctx, st, prefix, volio.ZarrMeta{Shape: s, Chunks: chunks,
		DType: volume.Uint8, Compressor: "zstd", VoxelSize: mask.VoxelSize,
		Attrs: map[string]any{"role": "reference solid mask", "software_version": Version}})
	if err != nil {
		return "", err
	}
	return c.SolidMask(), z.WriteBox(ctx, mask)
}
