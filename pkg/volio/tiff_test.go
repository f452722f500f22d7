package volio

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/volume"
)

func TestNaturalSort(t *testing.T) {
	// Source: common practice ("natural sort order", digit runs compared as
	// numbers); ties broken by byte order, our own choice.
	names := []string{"s10.tif", "s9.tif", "s100.tif", "s1.tif", "s010b.tif", "s2.tif", "a.tif", "s0002.tif"}
	sortNatural(names)
	want := "a.tif s1.tif s0002.tif s2.tif s9.tif s10.tif s010b.tif s100.tif"
	if got := strings.Join(names, " "); got != want {
		t.Errorf("got  %s\nwant %s", got, want)
	}
}

// Source: round trip through our writer and reader (self-consistency); the
// outside checks are TestTIFFReferenceFiles, TestTIFFReadByTifffileAndPIL
// and TestTIFFWrittenByTifffile.
func TestTIFFStackRoundTrip(t *testing.T) {
	for _, dt := range allDTypes {
		dir := filepath.Join(t.TempDir(), "stack")
		v := pattern(dt, volume.BoxOf(12, 9, 7), 11+uint64(dt))
		if err := WriteTIFFStack(dir, v, WriteOptions{TimeS: 60, HasTime: true}); err != nil {
			t.Fatal(err)
		}
		h, err := ReadHeader(dir, Options{})
		if err != nil {
			t.Fatal(err)
		}
		if h.Format != "tiff" || h.Shape != [3]int{12, 9, 7} || h.DType != dt || !sameLength(h.VoxelSize, 2.5e-6) || h.TimeS != 60 {
			t.Errorf("header %+v", h)
		}
		got, err := Open(dir, Options{})
		if err != nil {
			t.Fatal(err)
		}
		sameVolume(t, "stack "+dt.String(), got, v)
		// A single slice opens as a one-slice volume.
		one, err := Open(filepath.Join(dir, "z00003.tif"), Options{})
		if err != nil {
			t.Fatal(err)
		}
		sameVolume(t, "slice", one, cropSlab(v, 3, 4))
	}
}

// cropSlab returns slices z0..z1 of v moved to z = 0.
func cropSlab(v volume.Any, z0, z1 int) volume.Any {
	b := v.Bounds()
	b.Min[0], b.Max[0] = z0, z1
	out := newVolume(v.DType(), volume.Box{Max: b.Size()}, v.EdgeLength())
	size := v.DType().Size()
	src := leBytes(v)
	n := b.Voxels() * size
	off := pixOffset(v, z0, b.Min[1], b.Min[2]) * size
	decodeAt(out, 0, src[off:off+n], leOrder)
	return out
}

// Source: natural order as in TestNaturalSort (common practice).
// Slices named without zero padding are stacked in numeric order.
func TestTIFFStackNaturalOrder(t *testing.T) {
	dir := t.TempDir()
	v := pattern(volume.Uint16, volume.BoxOf(11, 3, 4), 5)
	for z := 0; z < 11; z++ {
		var buf bytes.Buffer
		if err := EncodeTIFF(&buf, v, z); err != nil {
			t.Fatal(err)
		}
		os.WriteFile(filepath.Join(dir, fmt.Sprintf("scan_%d.tif", z+1)), buf.Bytes(), 0o644)
	}
	os.WriteFile(filepath.Join(dir, "notes.txt"), []byte("ignored"), 0o644)
	got, err := Open(dir, Options{VoxelSize: 1e-6})
	if err != nil {
		t.Fatal(err)
	}
	sameVolume(t, "natural order", got, v)
	if got.EdgeLength() != 1e-6 {
		t.Errorf("voxel size from options: %g", got.EdgeLength())
	}
}

// Reference slices written by tifffile and PIL (testdata/make_tiff.py):
// uncompressed, big-endian, Deflate with and without predictor, several
// strips, LZW and PackBits (the last two through golang.org/x/image/tiff).
func TestTIFFReferenceFiles(t *testing.T) {
	want := map[volume.DType]volume.Any{}
	u8 := volume.NewShape[uint8](1, 6, 5, 0)
	u16 := volume.NewShape[uint16](1, 6, 5, 0)
	f4 := volume.NewShape[float32](1, 6, 5, 0)
	for i := 0; i < 30; i++ {
		u8.Pix[i] = uint8((37 * i) % 256)
		u16.Pix[i] = uint16((2521 * i) % 65536)
		f4.Pix[i] = float32(0.37*float64(i) - 5.5) // numpy: float64 product, then cast
	}
	want[volume.Uint8], want[volume.Uint16], want[volume.Float32] = u8, u16, f4
	files := map[string]volume.DType{
		"tifffile_u8.tif": volume.Uint8, "tifffile_u16_be.tif": volume.Uint16, "tifffile_u16_zlib_pred.tif": volume.Uint16,
		"tifffile_f4.tif": volume.Float32, "tifffile_f4_be_zlib.tif": volume.Float32,
		"pil_u8_lzw.tif": volume.Uint8, "pil_u16_packbits.tif": volume.Uint16,
	}
	for f, dt := range files {
		got, err := Open(filepath.Join("testdata", f), Options{})
		if err != nil {
			t.Errorf("%s: %v", f, err)
			continue
		}
		// Source: values written by tifffile 2023.2.3 / PIL 9.4 (testdata/make_tiff.py).
		sameVolume(t, f, got, want[dt])
	}
}

// Go-written stacks read by tifffile and by PIL give the same voxels:
// compared as SHA-256 of little-endian C-order bytes.
func TestTIFFReadByTifffileAndPIL(t *testing.T) {
	root := t.TempDir()
	var args, want []string
	for _, dt := range allDTypes {
		dir := filepath.Join(root, dt.String())
		v := pattern(dt, volume.BoxOf(6, 17, 13), 21+uint64(dt))
		if err := WriteTIFFStack(dir, v, WriteOptions{}); err != nil {
			t.Fatal(err)
		}
		npType := map[volume.DType]string{volume.Uint8: "<u1", volume.Uint16: "<u2", volume.Float32: "<f4"}[dt]
		args = append(args, dir, npType)
		h := sha(leBytes(v))
		want = append(want, "tifffile (6, 17, 13) "+h, "PIL (6, 17, 13) "+h)
	}
	// Source: tifffile 2023.2.3 imread (Debian python3-tifffile) and PIL 9.4
	// Image.open (Debian python3-pil), two independent TIFF decoders.
	out := runPython(t, []string{"numpy", "tifffile", "PIL"}, `
import sys, glob, hashlib, numpy as np, tifffile
from PIL import Image
a = sys.argv[1:]
for d, t in zip(a[0::2], a[1::2]):
    files = sorted(glob.glob(d + "/*.tif"))
    for name, read in (("tifffile", tifffile.imread), ("PIL", lambda f: np.array(Image.open(f)))):
        v = np.stack([read(f) for f in files])
        print(name, v.shape, hashlib.sha256(v.astype(t).tobytes()).hexdigest())`, args...)
	if got := strings.Split(out, "\n"); strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("outside readers disagree:\n got %s\nwant %s", out, strings.Join(want, "\n"))
	}
}

// Stacks written live by tifffile with random values in several encodings
// read back identical in Go.
func TestTIFFWrittenByTifffile(t *testing.T) {
	dir := t.TempDir()
	// Source: tifffile 2023.2.3 imwrite (Debian python3-tifffile).
	runPython(t, []string{"numpy", "tifffile"}, `
import sys, os, numpy as np, tifffile
rng = np.random.default_rng(7)
root = sys.argv[1]
kinds = {"u1": np.uint8, "u2": np.uint16, "f4": np.float32}
encs = {"plain": {}, "be": {"byteorder": ">"}, "zlib": {"compression": "zlib"}, "strips": {"rowsperstrip": 3}}
for k, t in kinds.items():
    if t == np.float32:
        a = (rng.standard_normal((9, 14, 11)) * 1000).astype(t)
    else:
        a = rng.integers(0, np.iinfo(t).max, (9, 14, 11), endpoint=True).astype(t)
    a.astype("<" + k).tofile(os.path.join(root, k + ".bin"))
    for e, kw in encs.items():
        d = os.path.join(root, k + "_" + e)
        os.makedirs(d)
        for z in range(a.shape[0]):
            tifffile.imwrite(os.path.join(d, "slice%d.tiff" % z), a[z], **kw)
`, dir)
	for _, k := range []struct {
		name string
		dt   volume.DType
	}{{"u1", volume.Uint8}, {"u2", volume.Uint16}, {"f4", volume.Float32}} {
		want, err := Open(filepath.Join(dir, k.name+".bin"), Options{Shape: [3]int{9, 14, 11}, DType: k.dt})
		if err != nil {
			t.Fatal(err)
		}
		for _, e := range []string{"plain", "be", "zlib", "strips"} {
			got, err := Open(filepath.Join(dir, k.name+"_"+e), Options{})
			if err != nil {
				t.Errorf("%s_%s: %v", k.name, e, err)
				continue
			}
			sameVolume(t, k.name+"_"+e, got, want)
		}
	}
}

// Source: TIFF 6.0 (Adobe 1992) header and IFD layout, from which the
// corrupted files are built.
func TestTIFFErrors(t *testing.T) {
	dir := t.TempDir()
	good, _ := os.ReadFile(filepath.Join("testdata", "tifffile_f4.tif"))
	write := func(name string, data []byte) string {
		p := filepath.Join(dir, name)
		os.WriteFile(p, data, 0o644)
		return p
	}
	var rgb bytes.Buffer
	rgbImage(&rgb)
	big := append([]byte(nil), good...)
	// ImageWidth entry patched to 70000 × 6 rows, with a limit of 100000.
	patchTag(big, tagImageWidth, 70000)
	cases := []struct {
		path string
		opt  Options
		kind error
		msg  string
	}{
		{write("cut.tif", good[:200]), Options{}, ErrTruncated, "beyond the file"},
		{write("tiny.tif", good[:5]), Options{}, ErrTruncated, "shorter than a TIFF header"},
		{write("garbage.tif", []byte("this is not a TIFF file at all")), Options{}, ErrFormat, "not a TIFF file"},
		{write("bigtiff.tif", []byte("II+\x00\x08\x00\x00\x00\x00\x00\x00\x00\x00\x00\x00\x00")), Options{}, ErrTruncated, "IFD offset 0 outside"},
		{write("bigtiff-offsize.tif", []byte("II+\x00\x04\x00\x00\x00\x10\x00\x00\x00\x00\x00\x00\x00")), Options{}, ErrFormat, "BigTIFF offset size 4"},
		{write("rgb.tif", rgb.Bytes()), Options{}, ErrFormat, "samples per pixel"},
		{write("wide.tif", big), Options{MaxVoxels: 100000}, ErrTooLarge, "exceeds the limit"},
	}
	for _, c := range cases {
		_, err := Open(c.path, c.opt)
		if err == nil {
			t.Errorf("%s: no error", c.path)
			continue
		}
		msg := err.Error()
		if !errors.Is(err, c.kind) || !strings.Contains(msg, c.msg) || strings.Contains(msg, "\n") || !strings.HasPrefix(msg, "volio: "+c.path+": TIFF: ") {
			t.Errorf("%s: error %q, want %v containing %q", c.path, msg, c.kind, c.msg)
		}
	}
	// A stack whose slices disagree names the odd slice.
	sd := filepath.Join(dir, "mixed")
	os.Mkdir(sd, 0o755)
	os.WriteFile(filepath.Join(sd, "a1.tif"), good, 0o644)
	u8, _ := os.ReadFile(filepath.Join("testdata", "tifffile_u8.tif"))
	os.WriteFile(filepath.Join(sd, "a2.tif"), u8, 0o644)
	if _, err := Open(sd, Options{}); !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "a2.tif: slice is 5×6 uint8, the stack is 5×6 float32") {
		t.Errorf("mixed stack: %v", err)
	}
	// A directory without slices or .zarray.
	if _, err := Open(t.TempDir(), Options{}); !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "no .zarray and no .tif") {
		t.Errorf("empty dir: %v", err)
	}
	// Stack too large for the limit, found from the first slice's header.
	if _, err := Open(sd, Options{MaxVoxels: 59}); !errors.Is(err, ErrTooLarge) {
		t.Errorf("stack limit: %v", err)
	}
}

// rgbImage writes a 2×2 RGB TIFF (3 samples per pixel).
func rgbImage(b *bytes.Buffer) {
	v := volume.NewShape[uint8](1, 2, 2, 0)
	EncodeTIFF(b, v, 0)
	data := b.Bytes()
	patchTag(data, tagSamplesPerPixel, 3)
}

// patchTag overwrites the inline value of tag in the first IFD of a
// little-endian TIFF written by EncodeTIFF.
func patchTag(data []byte, tag, val int) {
	n := int(leOrder.Uint16(data[8:]))
	for i := 0; i < n; i++ {
		e := data[10+12*i:]
		if int(leOrder.Uint16(e)) == tag {
			if leOrder.Uint16(e[2:]) == typeShort {
				leOrder.PutUint16(e[8:], uint16(val))
			} else {
				leOrder.PutUint32(e[8:], uint32(val))
			}
		}
	}
}
