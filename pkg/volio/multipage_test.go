package volio

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/volume"
)

// Multi-page TIFF files written live by tifffile and PIL read as z-stacks,
// one page per slice, identical to the array they were written from; read
// slab by slab they give the same voxels.
func TestTIFFMultiPageWrittenByTifffile(t *testing.T) {
	dir := t.TempDir()
	// Source: tifffile 2023.2.3 imwrite of a 3-D array (one page per
	// leading index; Debian python3-tifffile) and PIL 9.4 save_all
	// (Debian python3-pil), which write LZW and PackBits that tifffile
	// cannot without imagecodecs. photometric="minisblack" keeps tifffile
	// from taking 3 or 4 leading pages for colour planes.
	runPython(t, []string{"numpy", "tifffile", "PIL"}, `
import sys, os, numpy as np, tifffile
from PIL import Image
rng = np.random.default_rng(11)
root = sys.argv[1]
kinds = {"u1": np.uint8, "u2": np.uint16}
encs = {"plain": {}, "be": {"byteorder": ">"}, "zlib": {"compression": "zlib"},
        "zlibpred": {"compression": "zlib", "predictor": True}, "strips": {"rowsperstrip": 4}}
for k, t in kinds.items():
    a = rng.integers(0, np.iinfo(t).max, (7, 13, 10), endpoint=True).astype(t)
    a.astype("<" + k).tofile(os.path.join(root, k + ".bin"))
    for e, kw in encs.items():
        tifffile.imwrite(os.path.join(root, k + "_" + e + ".tif"), a, photometric="minisblack", **kw)
    comp = {"u1": "tiff_lzw", "u2": "packbits"}[k]
    pages = [Image.fromarray(p) for p in a]
    pages[0].save(os.path.join(root, k + "_pil.tif"), save_all=True, append_images=pages[1:], compression=comp)
`, dir)
	for _, k := range []struct {
		name string
		dt   volume.DType
	}{{"u1", volume.Uint8}, {"u2", volume.Uint16}} {
		want, err := Open(filepath.Join(dir, k.name+".bin"), Options{Shape: [3]int{7, 13, 10}, DType: k.dt})
		if err != nil {
			t.Fatal(err)
		}
		for _, e := range []string{"plain", "be", "zlib", "zlibpred", "strips", "pil"} {
			name := filepath.Join(dir, k.name+"_"+e+".tif")
			got, err := Open(name, Options{})
			if err != nil {
				t.Errorf("%s_%s: %v", k.name, e, err)
				continue
			}
			sameVolume(t, k.name+"_"+e, got, want)
			// Slab by slab, as ingest reads.
			s, err := OpenStream(name, Options{})
			if err != nil {
				t.Fatal(err)
			}
			if h := s.Header(); h.Shape != [3]int{7, 13, 10} || h.DType != k.dt {
				t.Errorf("%s_%s: header %+v", k.name, e, h)
			}
			slab, err := s.ReadSlab(2, 5)
			if err != nil {
				t.Errorf("%s_%s slab: %v", k.name, e, err)
				continue
			}
			if slab.Bounds() != (volume.Box{Min: [3]int{2, 0, 0}, Max: [3]int{5, 13, 10}}) || !bytes.Equal(leBytes(slab), leBytes(cropSlab(want, 2, 5))) {
				t.Errorf("%s_%s: slab 2:5 is %v and differs from slices 2 to 4", k.name, e, slab.Bounds())
			}
		}
	}
}

// A multi-page TIFF whose pages differ, a directory whose slices have
// several pages, an IFD chain that loops and one over the voxel limit are
// refused with one line naming the file and, for pages, the page.
func TestTIFFMultiPageRefused(t *testing.T) {
	dir := t.TempDir()
	// Source: tifffile 2023.2.3 TiffWriter.write, one call per page.
	runPython(t, []string{"numpy", "tifffile"}, `
import sys, os, numpy as np, tifffile
root = sys.argv[1]
def pages(name, arrays):
    with tifffile.TiffWriter(os.path.join(root, name)) as w:
        for a in arrays:
            w.write(a, photometric="minisblack", contiguous=False)
u8 = np.zeros((12, 9), np.uint8)
pages("size.tif", [u8, u8, u8, np.zeros((12, 8), np.uint8), u8])
pages("depth.tif", [u8, u8, np.zeros((12, 9), np.uint16)])
pages("format.tif", [np.zeros((12, 9), np.uint16), np.zeros((12, 9), np.int16)])
os.makedirs(os.path.join(root, "stackdir"))
tifffile.imwrite(os.path.join(root, "stackdir", "z0.tif"), np.zeros((2, 12, 9), np.uint8), photometric="minisblack")
tifffile.imwrite(os.path.join(root, "stackdir", "z1.tif"), np.zeros((2, 12, 9), np.uint8), photometric="minisblack")
tifffile.imwrite(os.path.join(root, "pages6.tif"), np.zeros((6, 12, 9), np.uint8), photometric="minisblack")
`, dir)
	// A two-page file whose second IFD points back to the first.
	var loop bytes.Buffer
	v := volume.NewShape[uint8](2, 4, 3, 0)
	if err := EncodeTIFFPages(&loop, v); err != nil {
		t.Fatal(err)
	}
	lb := loop.Bytes()
	first := int64(leOrder.Uint32(lb[4:]))
	second := nextIFD(lb, first)
	leOrder.PutUint32(lb[second+2+12*int64(leOrder.Uint16(lb[second:])):], uint32(first))
	os.WriteFile(filepath.Join(dir, "loop.tif"), lb, 0o644)

	for _, c := range []struct {
		name string
		opt  Options
		kind error
		msg  string
	}{
		{"size.tif", Options{}, ErrFormat, "page 4 of 5 is 8×12 uint8, page 1 is 9×12 uint8"},
		{"depth.tif", Options{}, ErrFormat, "page 3 of 3 is 9×12 uint16, page 1 is 9×12 uint8"},
		{"format.tif", Options{}, ErrFormat, "page 2: 16-bit samples of format 2"},
		{"stackdir", Options{}, ErrFormat, "z0.tif: TIFF: 2 pages"},
		{"loop.tif", Options{}, ErrFormat, "page 2 links back to page 1"},
		{"pages6.tif", Options{MaxVoxels: 5 * 12 * 9}, ErrTooLarge, "6 or more pages of 9×12 pixels exceed the limit of 540 voxels"},
	} {
		p := filepath.Join(dir, c.name)
		_, err := Open(p, c.opt)
		if err == nil {
			t.Errorf("%s: read without error", c.name)
			continue
		}
		msg := err.Error()
		if !errors.Is(err, c.kind) || !strings.Contains(msg, c.msg) || strings.Contains(msg, "\n") || !strings.HasPrefix(msg, "volio: "+p) {
			t.Errorf("%s: error %q, want %v naming the file and containing %q", c.name, msg, c.kind, c.msg)
		}
		t.Logf("%s: %v", c.name, err)
	}
	// The file under the limit reads in full.
	if v, err := Open(filepath.Join(dir, "pages6.tif"), Options{MaxVoxels: 6 * 12 * 9}); err != nil || v.Bounds().Size() != [3]int{6, 12, 9} {
		t.Errorf("pages6.tif at its size: %v", err)
	}
}

// The multi-page seeds of FuzzTIFF read as written.
func TestTIFFMultiPageSeeds(t *testing.T) {
	// Source: values written by tifffile 2023.2.3 / PIL 9.4
	// (testdata/make_tiff.py): page k holds the 6×5 image of
	// TestTIFFReferenceFiles plus k, wrapping in the voxel type.
	for _, c := range []struct {
		file string
		dt   volume.DType
	}{{"tifffile_u8_pages.tif", volume.Uint8}, {"pil_u8_pages_lzw.tif", volume.Uint8}, {"tifffile_u16_pages_zlib_pred.tif", volume.Uint16}} {
		want := newVolume(c.dt, volume.BoxOf(3, 6, 5), 0)
		for k := 0; k < 3; k++ {
			for i := 0; i < 30; i++ {
				switch w := want.(type) {
				case *volume.Volume[uint8]:
					w.Pix[30*k+i] = uint8((37*i)%256 + k)
				case *volume.Volume[uint16]:
					w.Pix[30*k+i] = uint16((2521*i)%65536 + k)
				}
			}
		}
		got, err := Open(filepath.Join("testdata", c.file), Options{})
		if err != nil {
			t.Errorf("%s: %v", c.file, err)
			continue
		}
		sameVolume(t, c.file, got, want)
	}
	if _, err := Open(filepath.Join("testdata", "tifffile_pages_narrow.tif"), Options{}); !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "page 3 of 3 is 4×6 uint8, page 1 is 5×6 uint8") {
		t.Errorf("narrow page: %v", err)
	}
}

// EncodeTIFFPages writes what ReadSlab reads back: every slice one page.
func TestEncodeTIFFPagesRoundTrip(t *testing.T) {
	for _, dt := range allDTypes {
		v := pattern(dt, volume.BoxOf(5, 7, 6), 3+uint64(dt))
		var b bytes.Buffer
		if err := EncodeTIFFPages(&b, v); err != nil {
			t.Fatal(err)
		}
		got, err := decodeTIFFBytes(b.Bytes(), 1<<20)
		if err != nil {
			t.Fatalf("%v: %v", dt, err)
		}
		sameVolume(t, dt.String(), got, v)
	}
}

// nextIFD returns the offset of the IFD after the one at off in a
// little-endian TIFF.
func nextIFD(b []byte, off int64) int64 {
	n := int64(leOrder.Uint16(b[off:]))
	return int64(leOrder.Uint32(b[off+2+12*n:]))
}
