package volio

import (
	"errors"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/volume"
)

// BigTIFF files written live by tifffile (uncompressed, Deflate with and
// without predictor, several strips, big-endian, float32, one page per z
// slice) read bit-identically to the array they were written from.
func TestBigTIFFWrittenByTifffile(t *testing.T) {
	dir := t.TempDir()
	// Source: tifffile 2023.2.3 imwrite(bigtiff=True) (Debian
	// python3-tifffile); the raw copy is numpy's tofile of the same array.
	runPython(t, []string{"numpy", "tifffile"}, `
import sys, os, numpy as np, tifffile
root = sys.argv[1]
rng = np.random.default_rng(12)
kinds = {"u1": np.uint8, "u2": np.uint16, "f4": np.float32}
encs = {"plain": {}, "be": {"byteorder": ">"}, "zlib": {"compression": "zlib"},
        "zlibpred": {"compression": "zlib", "predictor": True}, "strips": {"rowsperstrip": 4}}
for k, t in kinds.items():
    if k == "f4":
        a = rng.standard_normal((6, 13, 10)).astype(t)
    else:
        a = rng.integers(0, np.iinfo(t).max, (6, 13, 10), endpoint=True).astype(t)
    a.astype("<" + k).tofile(os.path.join(root, k + ".bin"))
    for e, kw in encs.items():
        if k == "f4" and e == "zlibpred":
            continue
        tifffile.imwrite(os.path.join(root, k + "_" + e + ".tif"), a, photometric="minisblack", bigtiff=True, **kw)
`, dir)
	n := 0
	for _, k := range []struct {
		name string
		dt   volume.DType
	}{{"u1", volume.Uint8}, {"u2", volume.Uint16}, {"f4", volume.Float32}} {
		want, err := Open(filepath.Join(dir, k.name+".bin"), Options{Shape: [3]int{6, 13, 10}, DType: k.dt})
		if err != nil {
			t.Fatal(err)
		}
		for _, e := range []string{"plain", "be", "zlib", "zlibpred", "strips"} {
			if k.name == "f4" && e == "zlibpred" {
				continue
			}
			name := filepath.Join(dir, k.name+"_"+e+".tif")
			got, err := Open(name, Options{})
			if err != nil {
				t.Errorf("%s_%s: %v", k.name, e, err)
				continue
			}
			sameVolume(t, k.name+"_"+e, got, want)
			n++
		}
	}
	if n != 14 {
		t.Errorf("checked %d files, want 14", n)
	}
}

// A BigTIFF with a compression only golang.org/x/image/tiff reads (LZW,
// PackBits: classic TIFF only there) is refused at open in one line. The
// file is tifffile's uncompressed BigTIFF with its Compression tag set to
// LZW (tifffile needs imagecodecs to encode LZW).
func TestBigTIFFLZWRefused(t *testing.T) {
	dir := t.TempDir()
	runPython(t, []string{"numpy", "tifffile"}, `
import sys, os, struct, numpy as np, tifffile
name = os.path.join(sys.argv[1], "lzw.tif")
tifffile.imwrite(name, np.ones((3, 8, 8), "u1"), photometric="minisblack", bigtiff=True)
b = bytearray(open(name, "rb").read())
ifd = struct.unpack_from("<Q", b, 8)[0]
n = struct.unpack_from("<Q", b, ifd)[0]
for i in range(n):
    e = ifd + 8 + 20 * i
    if struct.unpack_from("<H", b, e)[0] == 259:
        struct.pack_into("<H", b, e + 12, 5)
open(name, "wb").write(b)
`, dir)
	_, err := OpenStream(filepath.Join(dir, "lzw.tif"), Options{})
	if err == nil || !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "BigTIFF with compression 5 (LZW)") || !strings.Contains(err.Error(), "lzw.tif") {
		t.Errorf("got %v", err)
	}
}
