package volio

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/klauspost/compress/zstd"

	"sluice/pkg/volume"
)

// bloscCases writes, for every inner codec × shuffle × typesize × data kind
// × block size, a buffer compressed by numcodecs.Blosc (Debian
// python3-numcodecs 0.11, which bundles c-blosc 1.21) and the raw bytes.
// Data kinds: noise (incompressible: stored or raw splits), a smooth ramp
// (long matches), and a 12000-byte sequence of words from a 64-word
// vocabulary repeated (locally compressible, so BloscLZ does not give up,
// and with matches at distances beyond 8191: its far-distance form), with
// a tail shorter than a block so the last block is a leftover.
const bloscCases = `
import sys, os, numpy as np, numcodecs
from numcodecs import Blosc
root = sys.argv[1]
rng = np.random.default_rng(5)
voc = rng.integers(0, 256, (64, 8), dtype="u1")
n = 0
for ts, dt in ((1, "u1"), (2, "<u2"), (4, "<f4")):
    count = 40000 // ts + 37
    kinds = {
        "noise": rng.integers(0, 256, count * ts, dtype="u1").view(dt),
        "ramp": (np.arange(count) // 7 % 250).astype(dt),
        "far": np.tile(voc[rng.integers(0, 64, 12000 // 8)].ravel(), 4)[: count * ts].view(dt),
    }
    for kind, a in kinds.items():
        for cname in ("blosclz", "lz4", "lz4hc", "zlib", "zstd"):
            for shuffle in (Blosc.NOSHUFFLE, Blosc.SHUFFLE, Blosc.BITSHUFFLE):
                for bs in (0, 4096):
                    clevel = 9 if kind == "far" else 5
                    c = Blosc(cname=cname, clevel=clevel, shuffle=shuffle, blocksize=bs)
                    name = "%s_%s_%d_%d_%d" % (kind, cname, shuffle, ts, bs)
                    open(os.path.join(root, name + ".blosc"), "wb").write(c.encode(a))
                    open(os.path.join(root, name + ".raw"), "wb").write(a.tobytes())
                    n += 1
print(n)
`

// Every Blosc buffer numcodecs writes decodes to its bytes exactly.
func TestBloscWrittenByNumcodecs(t *testing.T) {
	dir := t.TempDir()
	n := runPython(t, []string{"numpy", "numcodecs"}, bloscCases, dir)
	if n != fmt.Sprint(3*3*5*3*2) {
		t.Fatalf("python wrote %s cases", n)
	}
	dec, err := zstd.NewReader(nil)
	if err != nil {
		t.Fatal(err)
	}
	defer dec.Close()
	files, _ := filepath.Glob(filepath.Join(dir, "*.blosc"))
	flagsSeen := map[byte]bool{}
	for _, f := range files {
		src, _ := os.ReadFile(f)
		want, _ := os.ReadFile(strings.TrimSuffix(f, ".blosc") + ".raw")
		got, err := bloscDecode(src, len(want), dec)
		if err != nil {
			t.Errorf("%s: %v", filepath.Base(f), err)
			continue
		}
		if !bytes.Equal(got, want) {
			i := 0
			for i < len(got) && got[i] == want[i] {
				i++
			}
			t.Errorf("%s: differs from byte %d of %d (flags %#x)", filepath.Base(f), i, len(want), src[2])
		}
		flagsSeen[src[2]&0x1f] = true
	}
	if len(files) != 270 {
		t.Errorf("%d files", len(files))
	}
	// The cases must cover stored buffers, split and unsplit blocks and both shuffles.
	for _, f := range []byte{bloscMemcpyed} {
		found := false
		for g := range flagsSeen {
			found = found || g&f != 0
		}
		if !found {
			t.Errorf("no buffer with flag %#x among %v", f, flagsSeen)
		}
	}
}

// Zarr v2 arrays written by zarr-python with Blosc (its default compressor
// and every inner codec and shuffle) read bit-identically.
func TestZarrBloscWrittenByZarrPython(t *testing.T) {
	dir := t.TempDir()
	// Source: zarr-python 2.13 / numcodecs 0.11 (Debian python3-zarr,
	// python3-numcodecs); zarr.open's default compressor is
	// Blosc(cname="lz4", clevel=5, shuffle=SHUFFLE).
	runPython(t, []string{"numpy", "zarr", "numcodecs"}, `
import sys, os, numpy as np, zarr
from numcodecs import Blosc
root = sys.argv[1]
rng = np.random.default_rng(9)
shape, chunks = (11, 17, 23), (4, 8, 10)
for dt in ("|u1", "<u2", ">u2", "<f4", ">f4"):
    a = (rng.standard_normal(shape) * 300 + 1000).astype(dt) if "f" in dt else rng.integers(0, 200 if "u1" in dt else 4000, shape).astype(dt)
    a[:, :5, :] = 7
    tag = dt.replace("|", "").replace("<", "le").replace(">", "be")
    a.astype(dt.replace(">", "<")).tofile(os.path.join(root, tag + ".bin"))
    zarr.open(os.path.join(root, tag + "_default.zarr"), mode="w", shape=shape, chunks=chunks, dtype=dt)[:] = a
    for cname in ("blosclz", "lz4", "lz4hc", "zlib", "zstd"):
        for sh in (0, 1, 2):
            z = zarr.open(os.path.join(root, "%s_%s_%d.zarr" % (tag, cname, sh)), mode="w", shape=shape, chunks=chunks, dtype=dt,
                          compressor=Blosc(cname=cname, clevel=5, shuffle=sh))
            z[:] = a
`, dir)
	n := 0
	for _, c := range []struct {
		tag string
		dt  volume.DType
	}{{"u1", volume.Uint8}, {"leu2", volume.Uint16}, {"beu2", volume.Uint16}, {"lef4", volume.Float32}, {"bef4", volume.Float32}} {
		want, err := Open(filepath.Join(dir, c.tag+".bin"), Options{Shape: [3]int{11, 17, 23}, DType: c.dt})
		if err != nil {
			t.Fatal(err)
		}
		arrays := []string{c.tag + "_default.zarr"}
		for _, cname := range []string{"blosclz", "lz4", "lz4hc", "zlib", "zstd"} {
			for sh := 0; sh < 3; sh++ {
				arrays = append(arrays, fmt.Sprintf("%s_%s_%d.zarr", c.tag, cname, sh))
			}
		}
		for _, a := range arrays {
			got, err := Open(filepath.Join(dir, a), Options{RequireChunks: true})
			if err != nil {
				t.Errorf("%s: %v", a, err)
				continue
			}
			sameVolume(t, a, got, want)
			n++
		}
	}
	if n != 5*16 {
		t.Errorf("checked %d arrays, want %d", n, 5*16)
	}
}

// A damaged Blosc chunk is refused in one line naming the chunk.
func TestZarrBloscDamaged(t *testing.T) {
	dir := t.TempDir()
	runPython(t, []string{"numpy", "zarr"}, `
import sys, os, numpy as np, zarr
zarr.open(os.path.join(sys.argv[1], "a.zarr"), mode="w", shape=(4, 8, 8), chunks=(4, 8, 8), dtype="<u2")[:] = np.arange(256).reshape(4, 8, 8)
`, dir)
	chunk := filepath.Join(dir, "a.zarr", "0.0.0")
	orig, err := os.ReadFile(chunk)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name  string
		data  []byte
		kind  error
		error string
	}{
		{"cut", orig[:len(orig)-3], ErrTruncated, "truncated Blosc buffer"},
		{"header only", orig[:10], ErrFormat, "shorter than the 16-byte header"},
		{"version", append([]byte{9}, orig[1:]...), ErrFormat, "format version 9"},
		{"snappy", append(append([]byte{}, orig[:2]...), append([]byte{orig[2]&0x1f | 2<<5}, orig[3:]...)...), ErrFormat, "snappy not supported"},
		{"size", append(append([]byte{}, orig[:4]...), append([]byte{0, 1, 0, 0}, orig[8:]...)...), ErrFormat, "holds 256 bytes, want 512"},
	} {
		if err := os.WriteFile(chunk, c.data, 0o644); err != nil {
			t.Fatal(err)
		}
		_, err := Open(filepath.Join(dir, "a.zarr"), Options{})
		if err == nil || !errors.Is(err, c.kind) || !strings.Contains(err.Error(), c.error) || !strings.Contains(err.Error(), "0.0.0") {
			t.Errorf("%s: got %v, want %q", c.name, err, c.error)
		}
	}
}

// FuzzBloscDecode: arbitrary bytes never panic nor return a buffer of
// another size than asked; seeds are numcodecs buffers of each codec.
func FuzzBloscDecode(f *testing.F) {
	seeds, _ := filepath.Glob(filepath.Join("testdata", "blosc", "*.blosc"))
	for _, s := range seeds {
		b, err := os.ReadFile(s)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Add([]byte{2, 1, 0x21, 2, 16, 0, 0, 0, 16, 0, 0, 0, 40, 0, 0, 0})
	dec, err := zstd.NewReader(nil, zstd.WithDecoderMaxMemory(1<<24))
	if err != nil {
		f.Fatal(err)
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		n, err := bloscSize(b)
		if err != nil || n > 1<<20 {
			return
		}
		out, err := bloscDecode(b, n, dec)
		if err == nil && len(out) != n {
			t.Fatalf("%d bytes, want %d", len(out), n)
		}
		if err != nil && !errors.Is(err, errBlosc) && !errors.Is(err, errBloscShort) {
			t.Fatalf("error of unknown kind: %v", err)
		}
	})
}
