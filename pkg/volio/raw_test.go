package volio

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/volume"
)

// Source: round trip (self-consistency); byte layout is pinned by
// TestRawByteOrderOnDisk.
func TestRawRoundTrip(t *testing.T) {
	dir := t.TempDir()
	for _, dt := range allDTypes {
		for _, order := range []string{"little", "big"} {
			name := filepath.Join(dir, fmt.Sprintf("v_%v_%s.raw", dt, order))
			v := pattern(dt, volume.BoxOf(5, 7, 9), uint64(dt))
			if err := WriteRaw(name, v, WriteOptions{ByteOrder: order, TimeS: 42.5, HasTime: true}); err != nil {
				t.Fatal(err)
			}
			h, err := ReadHeader(name, Options{})
			if err != nil {
				t.Fatal(err)
			}
			if h.Shape != [3]int{5, 7, 9} || h.DType != dt || !sameLength(h.VoxelSize, 2.5e-6) || !h.HasTime || h.TimeS != 42.5 || h.Format != "raw" {
				t.Errorf("%s: header %+v", name, h)
			}
			got, err := Open(name, Options{})
			if err != nil {
				t.Fatal(err)
			}
			sameVolume(t, name, got, v)

			// The same file described by options instead of the header.
			noHdr := name + ".bare"
			data, _ := os.ReadFile(name)
			os.WriteFile(noHdr, data, 0o644)
			got, err = Open(noHdr, Options{Shape: [3]int{5, 7, 9}, DType: dt, ByteOrder: order})
			if err != nil {
				t.Fatal(err)
			}
			sameVolume(t, noHdr, got, v)
		}
	}
}

// Byte order on disk is checked against an explicit encoding, so a writer
// and reader that agreed on the wrong order would fail.
func TestRawByteOrderOnDisk(t *testing.T) {
	dir := t.TempDir()
	v := volume.NewShape[uint16](1, 1, 2, 0)
	v.Pix[0], v.Pix[1] = 0x0102, 0xA0B0
	// Source: definition of little/big-endian byte order (common knowledge).
	for order, want := range map[string]string{"little": "\x02\x01\xB0\xA0", "big": "\x01\x02\xA0\xB0"} {
		name := filepath.Join(dir, order+".raw")
		if err := WriteRaw(name, v, WriteOptions{ByteOrder: order}); err != nil {
			t.Fatal(err)
		}
		if got, _ := os.ReadFile(name); string(got) != want {
			t.Errorf("%s: % x, want % x", order, got, want)
		}
	}
	f := volume.NewShape[float32](1, 1, 1, 0)
	// Source: IEEE 754-2008 binary32: 1.0 = sign 0, exponent 127, fraction 0
	// = 0x3F800000.
	f.Pix[0] = 1
	name := filepath.Join(dir, "one.raw")
	if err := WriteRaw(name, f, WriteOptions{ByteOrder: "big"}); err != nil {
		t.Fatal(err)
	}
	if got, _ := os.ReadFile(name); string(got) != "\x3F\x80\x00\x00" {
		t.Errorf("float32 1.0 big-endian: % x", got)
	}
}

// Source: slabs compared with volume.Crop of the written volume (self-consistency).
func TestRawStreamSlabs(t *testing.T) {
	name := filepath.Join(t.TempDir(), "s.raw")
	v := pattern(volume.Uint16, volume.BoxOf(11, 6, 5), 7).(*volume.Volume[uint16])
	if err := WriteRaw(name, v, WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	s, err := OpenStream(name, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	for z0 := 0; z0 < 11; z0 += 4 {
		z1 := min(z0+4, 11)
		slab, err := s.ReadSlab(z0, z1)
		if err != nil {
			t.Fatal(err)
		}
		want := v.Crop(volume.Box{Min: [3]int{z0, 0, 0}, Max: [3]int{z1, 6, 5}}, 0)
		sameVolume(t, fmt.Sprintf("slab %d:%d", z0, z1), slab, want)
	}
	if _, err := s.ReadSlab(3, 12); !errors.Is(err, ErrFormat) {
		t.Errorf("slab past the end: %v", err)
	}
}

// Source: our header format (package doc): header_bytes skipped, voxel_size parsed by volume.ParseLength.
func TestRawHeaderBytes(t *testing.T) {
	dir := t.TempDir()
	name := filepath.Join(dir, "h.raw")
	v := pattern(volume.Float32, volume.BoxOf(2, 3, 4), 3)
	body := leBytes(v)
	os.WriteFile(name, append([]byte("JUNKHEADER"), body...), 0o644)
	os.WriteFile(name+".sluice.json", []byte(`{"shape":[2,3,4],"dtype":"float32","header_bytes":10,"voxel_size":"800nm"}`), 0o644)
	got, err := Open(name, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if !sameLength(got.EdgeLength(), 8e-7) {
		t.Errorf("voxel size %g", got.EdgeLength())
	}
	sameVolume(t, "header_bytes", got, v)
}

// Error cases: the message is one line, names the file, and unwraps to the
// right sentinel.
// Source: our header format (package doc) and the error style of
// style.md; sizes computed by hand (16·256·256·2 = 2097152).
func TestRawErrors(t *testing.T) {
	dir := t.TempDir()
	mk := func(name string, size int, header string) string {
		p := filepath.Join(dir, name)
		os.WriteFile(p, make([]byte, size), 0o644)
		if header != "" {
			os.WriteFile(p+".sluice.json", []byte(header), 0o644)
		}
		return p
	}
	cases := []struct {
		path string
		opt  Options
		kind error
		msg  string
	}{
		{mk("scan.raw", 1048576, `{"shape":[16,256,256],"dtype":"uint16"}`), Options{}, ErrTruncated,
			"scan.raw: truncated raw volume: got 1048576 of 2097152 bytes"},
		{mk("long.raw", 100, `{"shape":[2,2,2],"dtype":"uint8"}`), Options{}, ErrFormat, "raw volume size mismatch"},
		{mk("huge.raw", 8, `{"shape":[100000,100000,100000],"dtype":"uint8"}`), Options{}, ErrTooLarge, "exceeds the limit of 4000000000"},
		{mk("lim.raw", 1000, `{"shape":[10,10,10],"dtype":"uint8"}`), Options{MaxVoxels: 999}, ErrTooLarge, "exceeds the limit of 999"},
		{mk("garbage.raw", 8, `{"shape":[2,2,2],"dtype":`), Options{}, ErrFormat, "garbage.raw.sluice.json: bad raw header"},
		{mk("dims.raw", 8, `{"shape":[2,4],"dtype":"uint8"}`), Options{}, ErrFormat, "shape has 2 dimensions"},
		{mk("neg.raw", 8, `{"shape":[2,-4,1],"dtype":"uint8"}`), Options{}, ErrFormat, "dimension < 1"},
		{mk("dt.raw", 8, `{"shape":[2,2,2],"dtype":"int8"}`), Options{}, ErrFormat, `dtype "int8"`},
		{mk("typo.raw", 8, `{"shape":[2,2,2],"dtype":"uint8","byteorder":"big"}`), Options{}, ErrFormat, "unknown field"},
		{mk("vs.raw", 8, `{"shape":[2,2,2],"dtype":"uint8","voxel_size":"fast"}`), Options{}, ErrFormat, "voxel_size"},
		{mk("conflict.raw", 8, `{"shape":[2,2,2],"dtype":"uint8"}`), Options{DType: volume.Uint16}, ErrFormat, "disagrees"},
		{mk("bare.raw", 8, ""), Options{}, ErrFormat, "without bare.raw.sluice.json"},
		{mk("bare2.raw", 7, ""), Options{Shape: [3]int{2, 2, 2}, DType: volume.Uint8}, ErrTruncated, "got 7 of 8 bytes"},
	}
	for _, c := range cases {
		_, err := Open(c.path, c.opt)
		if err == nil {
			t.Errorf("%s: no error", c.path)
			continue
		}
		msg := err.Error()
		if !errors.Is(err, c.kind) || !strings.Contains(msg, c.msg) || strings.Contains(msg, "\n") ||
			!strings.HasPrefix(msg, "volio: ") || !strings.Contains(msg, filepath.Base(c.path)) {
			t.Errorf("%s: error %q (kind %v), want %v containing %q", c.path, msg, errors.Unwrap(err), c.kind, c.msg)
		}
	}
	// The exact message for the documented example.
	_, err := Open(filepath.Join(dir, "scan.raw"), Options{})
	if want := "volio: " + filepath.Join(dir, "scan.raw") + ": truncated raw volume: got 1048576 of 2097152 bytes"; err == nil || err.Error() != want {
		t.Errorf("got %v, want %s", err, want)
	}
	if _, err := Open(filepath.Join(dir, "absent.raw"), Options{}); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing file: %v", err)
	}
}

// Source: size arithmetic by hand (4·4·4 uint8 = 64 bytes, cut to 40).
// A file that shrinks after the header check is reported as truncated, not
// as a panic or silent zeros.
func TestRawShrinksAfterOpen(t *testing.T) {
	name := filepath.Join(t.TempDir(), "shrink.raw")
	v := pattern(volume.Uint8, volume.BoxOf(4, 4, 4), 1)
	if err := WriteRaw(name, v, WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	s, err := OpenStream(name, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	os.Truncate(name, 40)
	if _, err := s.ReadSlab(0, 4); !errors.Is(err, ErrTruncated) || !strings.Contains(err.Error(), "got 40 of 64 bytes") {
		t.Errorf("got %v", err)
	}
}

// Source: slabs compared with volume.Crop of the written volume (self-consistency).
// Every format streams slab by slab to the same voxels, and Open accepts the
// header file's name for a raw volume.
func TestStreamAllFormats(t *testing.T) {
	root := t.TempDir()
	v := pattern(volume.Uint16, volume.BoxOf(10, 6, 7), 77)
	rawPath := filepath.Join(root, "v.raw")
	if err := WriteRaw(rawPath, v, WriteOptions{ByteOrder: "big"}); err != nil {
		t.Fatal(err)
	}
	if err := WriteTIFFStack(filepath.Join(root, "tiff"), v, WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	z, err := CreateZarr(ctx, Dir(filepath.Join(root, "zarr")), "", ZarrMeta{Shape: [3]int{10, 6, 7}, Chunks: [3]int{4, 4, 4}, DType: volume.Uint16, Compressor: "zstd", VoxelSize: 2.5e-6})
	if err != nil {
		t.Fatal(err)
	}
	if err := z.WriteBox(ctx, v); err != nil {
		t.Fatal(err)
	}
	for _, p := range []string{rawPath + ".sluice.json", filepath.Join(root, "tiff"), filepath.Join(root, "zarr")} {
		s, err := OpenStream(p, Options{MaxVoxels: 3 * 6 * 7})
		if err == nil || !errors.Is(err, ErrTooLarge) {
			t.Errorf("%s: whole-volume limit not applied: %v", p, err)
		}
		s, err = OpenStream(p, Options{})
		if err != nil {
			t.Fatal(err)
		}
		if h := s.Header(); h.Shape != [3]int{10, 6, 7} || h.DType != volume.Uint16 || !sameLength(h.VoxelSize, 2.5e-6) {
			t.Errorf("%s: header %+v", p, h)
		}
		for z0 := 0; z0 < 10; z0 += 3 {
			z1 := min(z0+3, 10)
			slab, err := s.ReadSlab(z0, z1)
			if err != nil {
				t.Fatal(err)
			}
			sameVolume(t, fmt.Sprintf("%s %d:%d", p, z0, z1), slab, cropAny(v, volume.Box{Min: [3]int{z0, 0, 0}, Max: [3]int{z1, 6, 7}}))
		}
		s.Close()
	}
}
