package volio

import (
	"math"

	"sluice/pkg/volume"
)

// CheckFinite returns an ErrFormat FileError naming name when a float32
// volume holds NaN or ±Inf; other dtypes always pass. A grey value that is
// not a number has no place in a histogram, a median or a threshold, so
// sluice refuses such a scan before segmenting it rather than guessing a
// value for it (the readers themselves return what the file holds). The
// error gives the count of non-finite voxels in v and the first one in C
// order, in global coordinates:
//
//	volio: scan.raw: 3 non-finite float32 voxels (NaN or ±Inf) in slices 0–4, first at z=1 y=2 x=3 (NaN)
func CheckFinite(name string, v volume.Any) error {
	f, ok := v.(*volume.Volume[float32])
	if !ok {
		return nil
	}
	n, first := 0, -1
	for i, x := range f.Pix {
		// x-x is NaN exactly for NaN and ±Inf.
		if x-x != 0 {
			if first < 0 {
				first = i
			}
			n++
		}
	}
	if n == 0 {
		return nil
	}
	s := f.Box.Size()
	z := first/(s[1]*s[2]) + f.Box.Min[0]
	y := first/s[2]%s[1] + f.Box.Min[1]
	x := first%s[2] + f.Box.Min[2]
	kind := "NaN"
	if math.IsInf(float64(f.Pix[first]), 0) {
		kind = "Inf"
	}
	return fileErr(name, ErrFormat, "%d non-finite float32 voxels (NaN or ±Inf) in slices %d–%d, first at z=%d y=%d x=%d (%s)",
		n, f.Box.Min[0], f.Box.Max[0], z, y, x, kind)
}
