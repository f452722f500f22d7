package volio

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/klauspost/compress/zstd"

	"sluice/pkg/volume"
)

var ctx = context.Background()

// Source: round trip (self-consistency) plus the Zarr v2 key layout
// ("iz/iy/ix" or "iz.iy.ix") from the Zarr storage specification v2; the
// outside checks are TestZarrReadByZarrPython and TestZarrWrittenByZarrPython.
func TestZarrRoundTrip(t *testing.T) {
	shape := [3]int{20, 18, 13}
	for _, dt := range allDTypes {
		for _, comp := range []string{"", "zstd"} {
			for _, sep := range []string{"/", "."} {
				name := fmt.Sprintf("%v_%q_%s", dt, comp, sep)
				root := t.TempDir()
				meta := ZarrMeta{Shape: shape, Chunks: [3]int{8, 8, 8}, DType: dt, Compressor: comp, Separator: sep,
					FillValue: 3, VoxelSize: 2.5e-6, TimeS: 12.5, HasTime: true, Attrs: map[string]any{"campaign": "c1"}}
				z, err := CreateZarr(ctx, Dir(root), "steps/s1/volume.zarr", meta)
				if err != nil {
					t.Fatal(err)
				}
				v := pattern(dt, volume.BoxOf(shape[0], shape[1], shape[2]), 99)
				if err := z.WriteBox(ctx, v); err != nil {
					t.Fatal(err)
				}
				z2, err := OpenZarr(ctx, Dir(root), "steps/s1/volume.zarr")
				if err != nil {
					t.Fatal(err)
				}
				m := z2.Meta()
				if m.Shape != shape || m.Chunks != meta.Chunks || m.DType != dt || m.Compressor != comp || m.Separator != sep ||
					m.FillValue != 3 || !sameLength(m.VoxelSize, 2.5e-6) || !m.HasTime || m.TimeS != 12.5 || m.Attrs["campaign"] != "c1" {
					t.Errorf("%s: meta %+v", name, m)
				}
				got, err := z2.ReadBox(ctx, volume.BoxOf(shape[0], shape[1], shape[2]))
				if err != nil {
					t.Fatal(err)
				}
				sameVolume(t, name, got, v)
				// Tile core + halo of 2, clipped to the array.
				core := volume.Box{Min: [3]int{8, 0, 8}, Max: [3]int{16, 8, 13}}
				got, err = z2.ReadBox(ctx, core.Grow(2))
				if err != nil {
					t.Fatal(err)
				}
				sameVolume(t, name+" halo", got, cropAny(v, core.Grow(2).Intersect(v.Bounds())))
				sep2 := map[string]string{"/": string(os.PathSeparator), ".": "."}[sep]
				if _, err := os.Stat(filepath.Join(root, "steps/s1/volume.zarr", "2"+sep2+"2"+sep2+"1")); err != nil {
					t.Errorf("%s: last chunk file: %v", name, err)
				}
			}
		}
	}
}

func cropAny(v volume.Any, b volume.Box) volume.Any {
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		return t.Crop(b, 0)
	case *volume.Volume[uint16]:
		return t.Crop(b, 0)
	case *volume.Volume[float32]:
		return t.Crop(b, 0)
	}
	panic("type")
}

// Source: Zarr storage specification v2 — edge chunks are stored full size,
// missing chunks read as fill_value.
func TestZarrChunksAndFill(t *testing.T) {
	root := t.TempDir()
	z, err := CreateZarr(ctx, Dir(root), "", ZarrMeta{Shape: [3]int{10, 10, 10}, Chunks: [3]int{4, 4, 4}, DType: volume.Uint16, Compressor: "zstd", FillValue: 500})
	if err != nil {
		t.Fatal(err)
	}
	// Edge chunk (2,2,2) covers [8:10]³: write it clipped, and chunk (0,0,0)
	// as a full chunk.
	edge := volume.New[uint16](z.ChunkBox([3]int{2, 2, 2}), 0)
	for i := range edge.Pix {
		edge.Pix[i] = uint16(i + 1)
	}
	if err := z.WriteChunk(ctx, [3]int{2, 2, 2}, edge); err != nil {
		t.Fatal(err)
	}
	first := volume.New[uint16](volume.BoxOf(4, 4, 4), 0)
	for i := range first.Pix {
		first.Pix[i] = 7
	}
	if err := z.WriteChunk(ctx, [3]int{0, 0, 0}, first); err != nil {
		t.Fatal(err)
	}
	got, err := z.ReadBox(ctx, volume.BoxOf(10, 10, 10))
	if err != nil {
		t.Fatal(err)
	}
	g := got.(*volume.Volume[uint16])
	for zz := 0; zz < 10; zz++ {
		for y := 0; y < 10; y++ {
			for x := 0; x < 10; x++ {
				want := uint16(500)
				switch {
				case zz < 4 && y < 4 && x < 4:
					want = 7
				case zz >= 8 && y >= 8 && x >= 8:
					want = edge.At(zz, y, x)
				}
				if g.At(zz, y, x) != want {
					t.Fatalf("(%d,%d,%d) = %d, want %d", zz, y, x, g.At(zz, y, x), want)
				}
			}
		}
	}
	// Misfits are refused.
	if err := z.WriteChunk(ctx, [3]int{3, 0, 0}, first); !errors.Is(err, ErrFormat) {
		t.Errorf("chunk outside grid: %v", err)
	}
	if err := z.WriteChunk(ctx, [3]int{1, 0, 0}, first); !errors.Is(err, ErrFormat) {
		t.Errorf("volume at the wrong place: %v", err)
	}
	if err := z.WriteBox(ctx, volume.New[uint16](volume.Box{Min: [3]int{2, 0, 0}, Max: [3]int{6, 4, 4}}, 0)); !errors.Is(err, ErrFormat) {
		t.Errorf("unaligned box: %v", err)
	}
	if err := z.WriteBox(ctx, volume.New[uint8](volume.BoxOf(4, 4, 4), 0)); !errors.Is(err, ErrFormat) {
		t.Errorf("wrong dtype: %v", err)
	}
	if _, err := z.ReadBox(ctx, volume.Box{Min: [3]int{10, 0, 0}, Max: [3]int{12, 5, 5}}); !errors.Is(err, ErrFormat) {
		t.Errorf("box outside: %v", err)
	}
}

// Source: slabs compared with volume.Crop of the written volume (self-consistency).
// Zarr directories open through Open and OpenStream like any other format.
func TestZarrStream(t *testing.T) {
	root := t.TempDir()
	v := pattern(volume.Float32, volume.BoxOf(9, 5, 6), 4)
	z, err := CreateZarr(ctx, Dir(root), "", ZarrMeta{Shape: [3]int{9, 5, 6}, Chunks: [3]int{4, 5, 3}, DType: volume.Float32, Compressor: "zstd", VoxelSize: 2.5e-6})
	if err != nil {
		t.Fatal(err)
	}
	if err := z.WriteBox(ctx, v); err != nil {
		t.Fatal(err)
	}
	s, err := OpenStream(root, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if h := s.Header(); h.Format != "zarr" || h.Shape != [3]int{9, 5, 6} || h.DType != volume.Float32 {
		t.Errorf("header %+v", h)
	}
	slab, err := s.ReadSlab(3, 7)
	if err != nil {
		t.Fatal(err)
	}
	sameVolume(t, "slab", slab, cropAny(v, volume.Box{Min: [3]int{3, 0, 0}, Max: [3]int{7, 5, 6}}))
	if _, err := s.ReadSlab(0, 10); !errors.Is(err, ErrFormat) {
		t.Errorf("slab past the end: %v", err)
	}
	all, err := Open(root, Options{})
	if err != nil {
		t.Fatal(err)
	}
	sameVolume(t, "open", all, v)
	if _, err := Open(root, Options{MaxVoxels: 100}); !errors.Is(err, ErrTooLarge) {
		t.Errorf("limit: %v", err)
	}
}

// Arrays written by Go open in zarr-python 2.13 with identical values,
// including the fill value of chunks never written, and our attributes.
func TestZarrReadByZarrPython(t *testing.T) {
	root := t.TempDir()
	shape := [3]int{13, 10, 17}
	var args, want []string
	for _, dt := range allDTypes {
		for _, comp := range []string{"", "zstd"} {
			prefix := fmt.Sprintf("%v_%s.zarr", dt, map[string]string{"": "raw", "zstd": "zstd"}[comp])
			z, err := CreateZarr(ctx, Dir(root), prefix, ZarrMeta{Shape: shape, Chunks: [3]int{5, 4, 6}, DType: dt, Compressor: comp, Level: 5, FillValue: 9, VoxelSize: 2.5e-6})
			if err != nil {
				t.Fatal(err)
			}
			v := pattern(dt, volume.BoxOf(shape[0], shape[1], shape[2]), 1234)
			// Write only z < 10: chunks with iz = 2 stay missing.
			part := cropAny(v, volume.Box{Max: [3]int{10, 10, 17}})
			if err := z.WriteBox(ctx, part); err != nil {
				t.Fatal(err)
			}
			expect := cropAny(part, volume.BoxOf(shape[0], shape[1], shape[2]))
			fillVolume(expect, 0)
			switch e := expect.(type) {
			case *volume.Volume[uint8]:
				e.Paste(part.(*volume.Volume[uint8]))
			case *volume.Volume[uint16]:
				e.Paste(part.(*volume.Volume[uint16]))
			case *volume.Volume[float32]:
				e.Paste(part.(*volume.Volume[float32]))
			}
			for zz := 10; zz < 13; zz++ {
				for i := pixOffset(expect, zz, 0, 0); i < pixOffset(expect, zz, 0, 0)+10*17; i++ {
					setPix(expect, i, 9)
				}
			}
			npType := map[volume.DType]string{volume.Uint8: "<u1", volume.Uint16: "<u2", volume.Float32: "<f4"}[dt]
			args = append(args, filepath.Join(root, prefix), npType)
			want = append(want, fmt.Sprintf("(13, 10, 17) %s 2.5um", sha(leBytes(expect))))
		}
	}
	// Source: zarr-python 2.13 zarr.open_array with numcodecs 0.11 Zstd
	// (Debian python3-zarr, python3-numcodecs).
	out := runPython(t, []string{"numpy", "zarr", "numcodecs"}, `
import sys, hashlib, zarr
a = sys.argv[1:]
for d, t in zip(a[0::2], a[1::2]):
    z = zarr.open_array(d, mode="r")
    v = z[:]
    print(v.shape, hashlib.sha256(v.astype(t).tobytes()).hexdigest(), z.attrs["voxel_size"])`, args...)
	if out != strings.Join(want, "\n") {
		t.Errorf("zarr-python disagrees:\n got %s\nwant %s", out, strings.Join(want, "\n"))
	}
}

func setPix(v volume.Any, i int, f float64) {
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		t.Pix[i] = uint8(f)
	case *volume.Volume[uint16]:
		t.Pix[i] = uint16(f)
	case *volume.Volume[float32]:
		t.Pix[i] = float32(f)
	}
}

// Arrays written by zarr-python 2.13 — both separators, zstd, zlib, gzip and
// no compressor, big-endian, partly written with a fill value — read back in
// Go identical to the array zarr-python itself reads.
func TestZarrWrittenByZarrPython(t *testing.T) {
	root := t.TempDir()
	// Source: zarr-python 2.13 / numcodecs 0.11 (Debian python3-zarr).
	out := runPython(t, []string{"numpy", "zarr", "numcodecs"}, `
import sys, os, numpy as np, zarr, numcodecs
root = sys.argv[1]
rng = np.random.default_rng(3)
shape, chunks = (11, 9, 14), (4, 5, 6)
cases = [
    ("u1_slash_zstd", "|u1", "/", numcodecs.Zstd(level=5), 0, False),
    ("u2_dot_zstd", "<u2", ".", numcodecs.Zstd(level=1), 0, False),
    ("u2_slash_none", "<u2", "/", None, 0, False),
    ("u2be_dot_none", ">u2", ".", None, 0, False),
    ("f4_slash_zstd_fill", "<f4", "/", numcodecs.Zstd(level=3), -1.5, True),
    ("f4_dot_zlib", "<f4", ".", numcodecs.Zlib(level=4), 0, False),
    ("u1_slash_gzip_fill", "|u1", "/", numcodecs.GZip(level=6), 200, True),
    ("f4be_slash_nan", ">f4", "/", numcodecs.Zstd(level=3), float("nan"), True),
]
for name, dt, sep, comp, fill, partial in cases:
    if dt[1] == "f":
        a = (rng.standard_normal(shape) * 100).astype(dt)
    else:
        a = rng.integers(0, np.iinfo(dt).max, shape, endpoint=True).astype(dt)
    z = zarr.open_array(os.path.join(root, name), mode="w", shape=shape, chunks=chunks, dtype=dt,
                        compressor=comp, fill_value=fill, dimension_separator=sep)
    if partial:
        z[0:4, 0:5, :] = a[0:4, 0:5, :]   # whole chunks only; the rest stays missing
    else:
        z[:] = a
    z[:].astype("<" + dt[1:]).tofile(os.path.join(root, name + ".bin"))
    print(name, len(os.listdir(os.path.join(root, name))))
`, root)
	t.Log(out)
	for _, line := range strings.Split(out, "\n") {
		name := strings.Fields(line)[0]
		dt := map[string]volume.DType{"u1": volume.Uint8, "u2": volume.Uint16, "f4": volume.Float32}[name[:2]]
		want, err := Open(filepath.Join(root, name+".bin"), Options{Shape: [3]int{11, 9, 14}, DType: dt})
		if err != nil {
			t.Fatal(err)
		}
		got, err := Open(filepath.Join(root, name), Options{})
		if err != nil {
			t.Errorf("%s: %v", name, err)
			continue
		}
		sameVolume(t, name, got, want)
		if strings.Contains(name, "_slash_") {
			if _, err := os.Stat(filepath.Join(root, name, "0", "0", "0")); err != nil {
				t.Errorf("%s: not nested: %v", name, err)
			}
		}
	}
}

// Source: Zarr storage specification v2 (.zarray fields); the unsupported
// variants are valid v2 metadata we refuse on purpose.
func TestZarrMetaErrors(t *testing.T) {
	base := `{"zarr_format":2,"shape":[4,4,4],"chunks":[2,2,2],"dtype":"<u2","compressor":null,"fill_value":0,"order":"C","filters":null%s}`
	cases := []struct {
		zarray string
		msg    string
	}{
		{`{"zarr_format":3}`, "zarr_format 3"},
		{`not json`, "bad .zarray"},
		{strings.Replace(fmt.Sprintf(base, ""), `[4,4,4]`, `[4,4]`, 1), "3 dimensions"},
		{strings.Replace(fmt.Sprintf(base, ""), `[2,2,2]`, `[0,2,2]`, 1), "out of range"},
		{strings.Replace(fmt.Sprintf(base, ""), `[2,2,2]`, `[100000,100000,100000]`, 1), "exceed"},
		{strings.Replace(fmt.Sprintf(base, ""), `"<u2"`, `"<i8"`, 1), `dtype "<i8"`},
		{strings.Replace(fmt.Sprintf(base, ""), `"<u2"`, `[["a","<u2"]]`, 1), "simple dtype"},
		{strings.Replace(fmt.Sprintf(base, ""), `null,"fill`, `{"id":"bz2","level":5},"fill`, 1), `compressor "bz2" not supported`},
		{strings.Replace(fmt.Sprintf(base, ""), `"C"`, `"F"`, 1), `order "F"`},
		{strings.Replace(fmt.Sprintf(base, ""), `"filters":null`, `"filters":[{"id":"delta"}]`, 1), "filters"},
		{strings.Replace(fmt.Sprintf(base, ""), `"fill_value":0`, `"fill_value":70000`, 1), "fill_value 70000"},
		{strings.Replace(fmt.Sprintf(base, ""), `"fill_value":0`, `"fill_value":"NaN"`, 1), "fill_value"},
		{fmt.Sprintf(base, `,"dimension_separator":"-"`), "dimension_separator"},
	}
	for _, c := range cases {
		root := t.TempDir()
		os.WriteFile(filepath.Join(root, ".zarray"), []byte(c.zarray), 0o644)
		_, err := Open(root, Options{})
		if !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), c.msg) || strings.Contains(err.Error(), "\n") ||
			!strings.HasPrefix(err.Error(), "volio: "+filepath.Join(root, ".zarray")+": ") {
			t.Errorf("%s: got %v, want ErrFormat with %q", c.zarray, err, c.msg)
		}
	}
	root := t.TempDir()
	os.WriteFile(filepath.Join(root, ".zarray"), []byte(fmt.Sprintf(base, "")), 0o644)
	os.WriteFile(filepath.Join(root, ".zattrs"), []byte(`{"voxel_size":"quick"}`), 0o644)
	if _, err := Open(root, Options{}); !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), ".zattrs: voxel_size") {
		t.Errorf("bad attrs: %v", err)
	}
}

// Source: RFC 8878 (Zstandard frame format: frame content size) for the
// bomb; sizes by hand (2·2·2 voxels × 2 bytes = 16).
func TestZarrChunkErrors(t *testing.T) {
	for _, comp := range []string{"", "zstd"} {
		root := t.TempDir()
		z, err := CreateZarr(ctx, Dir(root), "a", ZarrMeta{Shape: [3]int{4, 4, 4}, Chunks: [3]int{2, 2, 2}, DType: volume.Uint16, Compressor: comp})
		if err != nil {
			t.Fatal(err)
		}
		if err := z.WriteBox(ctx, pattern(volume.Uint16, volume.BoxOf(4, 4, 4), 1)); err != nil {
			t.Fatal(err)
		}
		key := filepath.Join(root, "a", "0", "1", "0")
		data, _ := os.ReadFile(key)
		os.WriteFile(key, data[:len(data)-3], 0o644)
		_, err = z.ReadBox(ctx, volume.BoxOf(4, 4, 4))
		if comp == "" {
			if !errors.Is(err, ErrTruncated) || err.Error() != "volio: "+key+": truncated chunk: got 13 of 16 bytes" {
				t.Errorf("short raw chunk: %v", err)
			}
		} else if !errors.Is(err, ErrFormat) || !strings.HasPrefix(err.Error(), "volio: "+key+": zstd chunk: ") {
			t.Errorf("cut zstd chunk: %v", err)
		}
	}
	// A zstd chunk that inflates beyond the chunk size (a decompression
	// bomb) is refused without allocating its declared size.
	root := t.TempDir()
	z, err := CreateZarr(ctx, Dir(root), "", ZarrMeta{Shape: [3]int{4, 4, 4}, Chunks: [3]int{2, 2, 2}, DType: volume.Uint8, Compressor: "zstd"})
	if err != nil {
		t.Fatal(err)
	}
	enc, _ := zstd.NewWriter(nil)
	bomb := enc.EncodeAll(make([]byte, 64<<20), nil)
	os.MkdirAll(filepath.Join(root, "0", "0"), 0o755)
	if err := os.WriteFile(filepath.Join(root, "0", "0", "0"), bomb, 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := z.ReadBox(ctx, volume.BoxOf(2, 2, 2)); !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "zstd chunk: decompressed size exceeds") {
		t.Errorf("bomb: %v", err)
	}
	if _, err := Dir(root).Get(ctx, "../etc/passwd"); !errors.Is(err, ErrFormat) {
		t.Errorf("escaping key: %v", err)
	}
	if _, err := Dir(root).Get(ctx, "nothing/here"); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("missing key: %v", err)
	}
}
