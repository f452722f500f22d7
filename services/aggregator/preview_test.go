package aggregator

import (
	"bytes"
	"context"
	"image/color"
	"image/png"
	"strings"
	"testing"

	"sluice/pkg/layout"
	"sluice/pkg/preview"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// TestPreviewCarriesScaleBar: the preview the page shows takes the scan's
// voxel size from the stored volume, so its scale bar is right. By hand:
// 200 voxels of 2.5 µm at scale 1 (384/200 → 1) is a 500 µm slice; a fifth
// is 100 µm = 40 px.
func TestPreviewCarriesScaleBar(t *testing.T) {
	ctx := context.Background()
	st, err := store.Open(ctx, t.TempDir(), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	s, _ := layout.NewStep("c", "s1")
	shape := [3]int{16, 32, 200}
	z, err := volio.CreateZarr(ctx, st, strings.TrimSuffix(s.Volume(), "/"), volio.ZarrMeta{Shape: shape, DType: volume.Uint16, VoxelSize: 2.5e-6})
	if err != nil {
		t.Fatal(err)
	}
	g := volume.NewShape[uint16](shape[0], shape[1], shape[2], 2.5e-6)
	for i := range g.Pix {
		g.Pix[i] = uint16(20000 + i%7)
	}
	if err := z.WriteBox(ctx, g); err != nil {
		t.Fatal(err)
	}
	a := &Aggregator{Store: st}
	b, err := a.Preview(ctx, "c", "s1", [3]int{-1, -1, -1})
	if err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	bar := preview.ScaleBar(2.5e-6, false, shape[2], 1)
	if bar.Label != "100 µm" || bar.Pixels != 40 {
		t.Fatalf("bar %+v, want 100 µm over 40 px", bar)
	}
	y := preview.Margin + preview.TitleHeight + shape[1] + preview.Margin + (preview.ScaleHeight-preview.BarThickness)/2
	n := 0
	for x := preview.Margin; x < img.Bounds().Dx(); x++ {
		if color.NRGBAModel.Convert(img.At(x, y)) != (color.NRGBA{0, 0, 0, 255}) {
			break
		}
		n++
	}
	if n != 40 {
		t.Fatalf("served preview's bar is %d px, want 40 (row %d of %v)", n, y, img.Bounds())
	}
}
