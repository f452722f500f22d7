package volio

import (
	"bytes"
	"context"
	"errors"
	"io/fs"
	"os"
	"path/filepath"
	"sync"
	"testing"

	"github.com/klauspost/compress/zstd"
)

// fuzzLimit is the voxel limit in fuzz tests: any accepted input must stay
// below it, and the readers check it before allocating.
const fuzzLimit = 1 << 16

func seedFiles(f *testing.F, pattern string) {
	names, err := filepath.Glob(filepath.Join("testdata", pattern))
	if err != nil || len(names) == 0 {
		f.Fatalf("no seeds for %s", pattern)
	}
	for _, n := range names {
		data, err := os.ReadFile(n)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
}

func FuzzRawHeader(f *testing.F) {
	seedFiles(f, "*.sluice.json")
	f.Fuzz(func(t *testing.T, data []byte) {
		h, l, err := parseRawHeader("h.sluice.json", data, Options{})
		if err != nil {
			if !errors.Is(err, ErrFormat) {
				t.Fatalf("error without ErrFormat: %v", err)
			}
			return
		}
		if h.DType.Size() == 0 || l.offset < 0 {
			t.Fatalf("accepted %+v %+v", h, l)
		}
		// A file of exactly the right size passes iff the volume is within
		// the limit.
		n, ok := mulLimit(h.Shape, fuzzLimit)
		size := l.offset + n*int64(h.DType.Size())
		err = checkRawSize("f.raw", h, l, size, fuzzLimit)
		if ok != (err == nil) {
			t.Fatalf("shape %v within limit %v, size check %v", h.Shape, ok, err)
		}
		if ok && checkRawSize("f.raw", h, l, size-1, fuzzLimit) == nil {
			t.Fatalf("one byte short accepted")
		}
	})
}

// memBucket is an in-memory Bucket for fuzzing without disk traffic.
type memBucket struct {
	mu sync.Mutex
	m  map[string][]byte
}

func (b *memBucket) Get(_ context.Context, key string) ([]byte, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	v, ok := b.m[key]
	if !ok {
		return nil, &FileError{Path: key, Msg: "no such key", Err: fs.ErrNotExist}
	}
	return v, nil
}

func (b *memBucket) Put(_ context.Context, key string, data []byte) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.m[key] = append([]byte(nil), data...)
	return nil
}

func FuzzZarrMeta(f *testing.F) {
	enc, _ := zstd.NewWriter(nil, zstd.WithSingleSegment(true))
	for _, n := range []string{"zstd_slash.zarray", "none_dot.zarray"} {
		data, err := os.ReadFile(filepath.Join("testdata", n))
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data, enc.EncodeAll(make([]byte, 2*3*4*4), nil))
		f.Add(data, make([]byte, 2*3*4*4))
	}
	f.Fuzz(func(t *testing.T, zarray, chunk []byte) {
		b := &memBucket{m: map[string][]byte{".zarray": zarray, "0/0/0": chunk, "0.0.0": chunk}}
		z, err := OpenZarr(context.Background(), b, "")
		if err != nil {
			if !errors.Is(err, ErrFormat) {
				t.Fatalf("error without ErrFormat: %v", err)
			}
			return
		}
		z.limit = fuzzLimit
		box := z.ChunkBox([3]int{0, 0, 0}).Grow(1)
		v, err := z.ReadBox(context.Background(), box)
		if err != nil {
			if !errors.Is(err, ErrFormat) && !errors.Is(err, ErrTruncated) && !errors.Is(err, ErrTooLarge) {
				t.Fatalf("unexpected error kind: %v", err)
			}
			return
		}
		if n := v.Bounds().Voxels(); n > fuzzLimit || v.Bounds() != box.Intersect(z.whole()) {
			t.Fatalf("read %v (%d voxels) for %v", v.Bounds(), n, box)
		}
	})
}

// FuzzTIFF decodes single- and multi-page TIFF (the multi-page seeds
// include pages in LZW and Deflate and one page of the wrong size).
func FuzzTIFF(f *testing.F) {
	seedFiles(f, "*.tif")
	f.Fuzz(func(t *testing.T, data []byte) {
		v, err := decodeTIFFBytes(data, fuzzLimit)
		if err != nil {
			if !errors.Is(err, ErrFormat) && !errors.Is(err, ErrTruncated) && !errors.Is(err, ErrTooLarge) {
				t.Fatalf("unexpected error kind: %v", err)
			}
			return
		}
		if n := v.Bounds().Voxels(); n > fuzzLimit || n < 1 {
			t.Fatalf("decoded %d voxels", n)
		}
		// What we decoded re-encodes, one page per slice, and decodes to
		// the same voxels.
		var buf bytes.Buffer
		if err := EncodeTIFFPages(&buf, v); err != nil {
			t.Fatal(err)
		}
		w, err := decodeTIFFBytes(buf.Bytes(), fuzzLimit)
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(leBytes(v), leBytes(w)) || v.DType() != w.DType() || v.Bounds() != w.Bounds() {
			t.Fatalf("re-encoding changed the volume")
		}
	})
}
