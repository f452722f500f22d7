package volio

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/klauspost/compress/zstd"
)

// badCorpus is the bad-input corpus at the top of the repository.
var badCorpus = filepath.Join("..", "..", "testdata", "bad")

func readSeed(f *testing.F, name string) []byte {
	b, err := os.ReadFile(name)
	if err != nil {
		f.Fatal(err)
	}
	return b
}

// checkFileError is what every error of the open path must be: a one-line
// *FileError naming a file inside dir, unwrapping to one of our sentinels
// (or an fs error).
func checkFileError(t *testing.T, dir string, err error) {
	t.Helper()
	var fe *FileError
	if !errors.As(err, &fe) {
		t.Fatalf("error is not a FileError: %v", err)
	}
	if msg := err.Error(); strings.ContainsAny(msg, "\n\r") {
		t.Fatalf("error spans lines: %q", msg)
	}
	if !strings.HasPrefix(fe.Path, dir) {
		t.Fatalf("error names %q, outside %s", fe.Path, dir)
	}
	if !errors.Is(err, ErrFormat) && !errors.Is(err, ErrTruncated) && !errors.Is(err, ErrTooLarge) {
		t.Fatalf("unexpected error kind: %v", err)
	}
}

// FuzzZarrDir runs the whole Zarr open path — OpenStream on a directory,
// .zarray, .zattrs and a chunk file, then ReadSlab of every slice — on
// fuzzed files. Only chunk 0.0.0 exists, and chunks are required (as the
// CLI and ingest read scans), so an accepted array has exactly one chunk;
// what is read has the header's shape and stays within the voxel limit.
func FuzzZarrDir(f *testing.F) {
	enc, _ := zstd.NewWriter(nil, zstd.WithSingleSegment(true))
	for _, n := range []string{"zarr-bad-json", "zarr-chunks-over-shape", "zarr-unknown-dtype", "zarr-unknown-compressor", "zarr-missing-chunk"} {
		za := readSeed(f, filepath.Join(badCorpus, n, ".zarray"))
		chunk, _ := os.ReadFile(filepath.Join(badCorpus, n, "0", "0", "0"))
		f.Add(za, []byte(nil), chunk)
	}
	for _, n := range []string{"zstd_slash.zarray", "none_dot.zarray"} {
		za := readSeed(f, filepath.Join("testdata", n))
		f.Add(za, []byte(`{"voxel_size": "2.5um", "time_s": 30}`), enc.EncodeAll(make([]byte, 2*3*4*4), nil))
		f.Add(za, []byte(`{}`), make([]byte, 2*3*4*4))
	}
	f.Fuzz(func(t *testing.T, zarray, zattrs, chunk []byte) {
		dir := t.TempDir()
		os.WriteFile(filepath.Join(dir, ".zarray"), zarray, 0o644)
		if len(zattrs) > 0 {
			os.WriteFile(filepath.Join(dir, ".zattrs"), zattrs, 0o644)
		}
		os.WriteFile(filepath.Join(dir, "0.0.0"), chunk, 0o644)
		os.MkdirAll(filepath.Join(dir, "0", "0"), 0o755)
		os.WriteFile(filepath.Join(dir, "0", "0", "0"), chunk, 0o644)
		s, err := OpenStream(dir, Options{MaxVoxels: fuzzLimit, RequireChunks: true})
		if err != nil {
			checkFileError(t, dir, err)
			return
		}
		defer s.Close()
		h := s.Header()
		v, err := s.ReadSlab(0, h.Shape[0])
		if err != nil {
			checkFileError(t, dir, err)
			return
		}
		if got := v.Bounds().Size(); got != h.Shape || v.DType() != h.DType {
			t.Fatalf("read %v %v, header says %v %v", got, v.DType(), h.Shape, h.DType)
		}
		if n := v.Bounds().Voxels(); n > fuzzLimit {
			t.Fatalf("read %d voxels over the limit %d", n, fuzzLimit)
		}
		z := s.(*zarrStream).z.(*Zarr)
		if g := z.Grid(); g != [3]int{1, 1, 1} {
			t.Fatalf("read a %v grid from one chunk file with chunks required", g)
		}
	})
}

// FuzzRawFile runs OpenStream on a raw file and its .sluice.json header,
// both fuzzed: every error is a one-line FileError naming one of the two
// files, and an accepted volume fills the file exactly.
func FuzzRawFile(f *testing.F) {
	names, _ := filepath.Glob(filepath.Join(badCorpus, "*.sluice.json"))
	more, _ := filepath.Glob(filepath.Join("testdata", "*.sluice.json"))
	for _, n := range append(names, more...) {
		data, _ := os.ReadFile(strings.TrimSuffix(n, headerSuffix))
		if len(data) > 4096 {
			data = data[:4096]
		}
		f.Add(readSeed(f, n), data)
	}
	f.Add([]byte(`{"shape": [2, 3, 4], "dtype": "uint16", "byte_order": "big", "header_bytes": 8}`), make([]byte, 8+2*3*4*2))
	f.Fuzz(func(t *testing.T, header, data []byte) {
		dir := t.TempDir()
		name := filepath.Join(dir, "scan.raw")
		os.WriteFile(name, data, 0o644)
		os.WriteFile(name+headerSuffix, header, 0o644)
		s, err := OpenStream(name, Options{MaxVoxels: fuzzLimit})
		if err != nil {
			checkFileError(t, dir, err)
			return
		}
		defer s.Close()
		h := s.Header()
		v, err := s.ReadSlab(0, h.Shape[0])
		if err != nil {
			t.Fatalf("header and size accepted, read failed: %v", err)
		}
		rl := s.(*rawStream).l
		if want := rl.offset + int64(v.Bounds().Voxels()*h.DType.Size()); want != int64(len(data)) {
			t.Fatalf("accepted %v %v + %d header bytes for a file of %d bytes", h.Shape, h.DType, rl.offset, len(data))
		}
	})
}

// FuzzStackDir runs OpenStream on a TIFF stack directory of two fuzzed
// slices and a fuzzed stack.sluice.json: every error is a one-line
// FileError naming a file in the directory, and an accepted stack reads
// whole with the header's shape (two slices of equal size and type).
func FuzzStackDir(f *testing.F) {
	tifs, _ := filepath.Glob(filepath.Join("testdata", "*.tif"))
	bad, _ := filepath.Glob(filepath.Join(badCorpus, "tiff-*", "*.tif"))
	for i, n := range append(tifs, bad...) {
		b := readSeed(f, n)
		hdr := []byte(`{"voxel_size": "1.5um", "time_s": 12}`)
		if i%2 == 1 {
			hdr = []byte(`{"shape": [2, 12, 16], "dtype": "uint16"}`)
		}
		f.Add(hdr, b, b)
	}
	f.Fuzz(func(t *testing.T, header, s0, s1 []byte) {
		dir := t.TempDir()
		os.WriteFile(filepath.Join(dir, "z00000.tif"), s0, 0o644)
		os.WriteFile(filepath.Join(dir, "z00001.tif"), s1, 0o644)
		os.WriteFile(filepath.Join(dir, stackHeaderName), header, 0o644)
		s, err := OpenStream(dir, Options{MaxVoxels: fuzzLimit})
		if err != nil {
			checkFileError(t, dir, err)
			return
		}
		defer s.Close()
		h := s.Header()
		v, err := s.ReadSlab(0, h.Shape[0])
		if err != nil {
			checkFileError(t, dir, err)
			return
		}
		if h.Shape[0] != 2 || v.Bounds().Size() != h.Shape || v.DType() != h.DType || v.Bounds().Voxels() > fuzzLimit {
			t.Fatalf("read %v %v, header %v %v", v.Bounds(), v.DType(), h.Shape, h.DType)
		}
	})
}
