package ingest

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"strings"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// checkShape compares a scan's shape with the campaign's reference shape
// before anything of the scan is stored: every step of a campaign images
// the same field of view, so a scan of another shape is a wrong file (or a
// wrong campaign), and its numbers would not belong in the series. The
// reference is the stored reference scan's solid mask when there is one
// (reference-scan mode), else the shape of the campaign's first stored
// step, recorded at campaign.ShapeKey when that step arrives.
func (in *Ingester) checkShape(ctx context.Context, step layout.Step, path string, h volio.Header) error {
	c := step.Campaign()
	if z, err := volio.OpenZarr(ctx, in.Store, strings.TrimSuffix(c.SolidMask(), "/")); err == nil {
		if s := z.Meta().Shape; s != h.Shape {
			return fmt.Errorf("ingest: %s: shape %s differs from the campaign's reference scan (%s at %s)", path, fmtShape(h.Shape), fmtShape(s), c.SolidMask())
		}
		return nil
	} else if !errors.Is(err, fs.ErrNotExist) {
		return err
	}
	var ref campaign.ReferenceShape
	err := campaign.GetJSON(ctx, in.Store, campaign.ShapeKey(c), &ref)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		return campaign.PutJSON(ctx, in.Store, campaign.ShapeKey(c), campaign.ReferenceShape{Shape: h.Shape, From: step.Name()})
	case err != nil:
		return err
	case ref.Shape != h.Shape:
		return fmt.Errorf("ingest: %s: shape %s differs from the campaign's reference %s (step %s); every step must image the same volume",
			path, fmtShape(h.Shape), fmtShape(ref.Shape), ref.From)
	}
	return nil
}

func fmtShape(s [3]int) string { return fmt.Sprintf("%d×%d×%d", s[0], s[1], s[2]) }

// finiteSlabs rejects float32 slabs holding NaN or ±Inf (volio.CheckFinite)
// as they are streamed in, so such a scan never gets a manifest.
type finiteSlabs struct {
	volio.Stream
	path string
}

func (s finiteSlabs) ReadSlab(z0, z1 int) (volume.Any, error) {
	v, err := s.Stream.ReadSlab(z0, z1)
	if err != nil {
		return nil, err
	}
	if err := volio.CheckFinite(s.path, v); err != nil {
		return nil, err
	}
	return v, nil
}
