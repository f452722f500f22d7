package volio

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/volume"
)

// zarritaDir is tests/zarr3: write.mjs and its node_modules (zarrita,
// installed by scripts/setup-test-env).
var zarritaDir, _ = filepath.Abs(filepath.Join("..", "..", "tests", "zarr3"))

// needZarrita returns the node binary when Node.js and the pinned zarrita
// are installed; under CI their absence fails the test, else skips it.
func needZarrita(t *testing.T) string {
	t.Helper()
	miss := func(msg string) {
		if os.Getenv("CI") != "" {
			t.Fatal(msg + " (scripts/setup-test-env installs it)")
		}
		t.Skip(msg + " (make setup)")
	}
	node, err := exec.LookPath("node")
	if err != nil {
		miss("node is not installed")
	}
	if _, err := os.Stat(filepath.Join(zarritaDir, "node_modules", "zarrita", "package.json")); err != nil {
		miss("zarrita is not installed in " + zarritaDir)
	}
	return node
}

// zarritaCase is an entry of the cases.json write.mjs writes.
type zarritaCase struct {
	Name, Path, Expected, DType, Out string
	Shape                            [3]int
	ZarritaRead                      bool `json:"zarrita_read"`
	Missing                          []string
}

// Every Zarr v3 array zarrita writes — 6 data types × 17 plain codec
// chains (bytes little/big, transpose [2,0,1] and [1,2,0], gzip, zstd,
// blosc with blosclz/lz4/lz4hc/zlib/zstd and no/byte/bit shuffle, crc32c,
// the default and v2 chunk key encodings with "/" and ".") and × 8 sharded
// layouts (index at the end or start, with or without crc32c, little or big
// endian; inner bytes, zstd, gzip, blosc, transpose, crc32c) — reads voxel
// for voxel as the values write.mjs wrote, which zarrita itself read back
// from the arrays (except the index-at-start shards, which zarrita cannot
// read: write.mjs moves the index of the same shards to the front). Every
// array has partial edge chunks and a chunk (or shard) removed; the sharded
// ones an empty inner chunk. Bands read the same values as the whole array.
//
// Source: zarrita 0.7.5 (npm, pinned in tests/zarr3/package.json) with
// numcodecs.js 0.3.2 (libzstd and c-blosc built to wasm, fflate gzip);
// float64 and int arrays compared with JavaScript's float32 rounding
// (Float32Array / DataView.setFloat32). Measured difference: 0 voxels of
// 150 arrays; tolerance 0 (bit-identical).
func TestZarr3WrittenByZarrita(t *testing.T) {
	node := needZarrita(t)
	dir := t.TempDir()
	out, err := exec.Command(node, filepath.Join(zarritaDir, "write.mjs"), "cases", dir).CombinedOutput()
	if err != nil {
		t.Fatalf("write.mjs: %v\n%s", err, out)
	}
	var cases []zarritaCase
	b, err := os.ReadFile(filepath.Join(dir, "cases.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &cases); err != nil {
		t.Fatal(err)
	}
	if len(cases) != 6*(17+8) {
		t.Fatalf("write.mjs wrote %d cases, want 150", len(cases))
	}
	blosc := map[string]int{}
	read := 0
	for _, c := range cases {
		s, err := OpenStream(c.Path, Options{RequireChunks: true})
		if err != nil {
			t.Errorf("%s: %v", c.Name, err)
			continue
		}
		h := s.Header()
		if h.Format != "zarr3" || h.Shape != c.Shape || h.DType.String() != c.Out {
			t.Errorf("%s: header %+v, want shape %v, %s", c.Name, h, c.Shape, c.Out)
		}
		got, err := s.ReadSlab(0, h.Shape[0])
		if err != nil {
			t.Errorf("%s: %v", c.Name, err)
			continue
		}
		want, err := os.ReadFile(c.Expected)
		if err != nil {
			t.Fatal(err)
		}
		g := leBytes(got)
		if !bytes.Equal(g, want) {
			size := got.DType().Size()
			diff, first := 0, -1
			for i := 0; i+size <= len(g) && i+size <= len(want); i += size {
				if !bytes.Equal(g[i:i+size], want[i:i+size]) {
					if first < 0 {
						first = i / size
					}
					diff++
				}
			}
			t.Errorf("%s: %d of %d voxels differ (first at element %d); %d vs %d bytes", c.Name, diff, len(want)/size, first, len(g), len(want))
			continue
		}
		// Bands of rows (what ingest reads) cut across chunks and shards.
		br := s.(BandReader)
		for _, band := range [][4]int{{1, 6, 3, 7}, {4, h.Shape[0], 0, 1}, {h.Shape[0] - 1, h.Shape[0], 2, h.Shape[1]}} {
			v, err := br.ReadBand(band[0], band[1], band[2], band[3])
			if err != nil {
				t.Errorf("%s band %v: %v", c.Name, band, err)
				continue
			}
			box := volume.Box{Min: [3]int{band[0], band[2], 0}, Max: [3]int{band[1], band[3], h.Shape[2]}}
			sameVolume(t, c.Name+" band", v, cropAny(got, box))
		}
		if c.Name == "uint16_le" && (!sameLength(h.VoxelSize, 2.5e-6) || !h.HasTime || h.TimeS != 12.5) {
			t.Errorf("%s: voxel size %g, time %v %g; want 2.5um and 12.5 s from the attributes", c.Name, h.VoxelSize, h.HasTime, h.TimeS)
		}
		if c.ZarritaRead {
			read++
		}
		s.Close()
		// The Blosc flags and inner codecs the checks went through.
		if strings.Contains(c.Name, "blosc") && !strings.Contains(c.Name, "_sh_") {
			if f, err := os.ReadFile(filepath.Join(c.Path, "c", "0", "0", "0")); err == nil && len(f) >= 16 {
				blosc[fmt.Sprintf("%s/flags %#02x/typesize %d", bloscCodecs[f[2]>>5], f[2]&0x17, f[3])]++
			}
		}
	}
	if read != 6*(17+5) {
		t.Errorf("%d arrays read back by zarrita, want %d", read, 6*(17+5))
	}
	t.Logf("Blosc chunks (0,0,0) seen: %v", blosc)
}

// v3meta is a valid zarr.json for the refusal and damage tests: uint16,
// 4×4×4 in chunks of 2×4×4, with the codecs given.
func v3meta(codecs string) string {
	return `{"zarr_format": 3, "node_type": "array", "shape": [4, 4, 4], "data_type": "uint16",
 "chunk_grid": {"name": "regular", "configuration": {"chunk_shape": [2, 4, 4]}},
 "chunk_key_encoding": {"name": "default", "configuration": {"separator": "/"}},
 "fill_value": 0, "codecs": ` + codecs + `, "attributes": {}}`
}

func writeV3(t *testing.T, dir, meta string, files map[string][]byte) {
	t.Helper()
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "zarr.json"), []byte(meta), 0o644); err != nil {
		t.Fatal(err)
	}
	for k, b := range files {
		p := filepath.Join(dir, filepath.FromSlash(k))
		os.MkdirAll(filepath.Dir(p), 0o755)
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// Metadata sluice cannot honour is refused when the array is opened, in
// one line naming zarr.json and the problem.
func TestZarr3Refused(t *testing.T) {
	le := `{"name": "bytes", "configuration": {"endian": "little"}}`
	idx := `"index_codecs": [` + le + `, {"name": "crc32c"}]`
	repl := func(old, new string) string { return strings.Replace(v3meta("["+le+"]"), old, new, 1) }
	cases := []struct{ name, meta, want string }{
		{"4d", repl(`"shape": [4, 4, 4]`, `"shape": [2, 4, 4, 4]`), "array has 4 dimensions"},
		{"2d", repl(`"shape": [4, 4, 4]`, `"shape": [4, 4]`), "array has 2 dimensions"},
		{"irregular", repl(`"name": "regular"`, `"name": "rectilinear"`), `chunk_grid "rectilinear" not supported`},
		{"codec", v3meta(`[` + le + `, {"name": "bz2", "configuration": {"level": 1}}]`), `codec "bz2" not supported`},
		{"int64", repl(`"uint16"`, `"int64"`), `data_type "int64" not supported`},
		{"float16", repl(`"uint16"`, `"float16"`), `data_type "float16" not supported`},
		{"group", `{"zarr_format": 3, "node_type": "group", "attributes": {}}`, "a Zarr v3 group, not an array"},
		{"v2 format", repl(`"zarr_format": 3`, `"zarr_format": 2`), "zarr_format 2, want 3"},
		{"no endian", v3meta(`[{"name": "bytes"}]`), "codec bytes has no endian for a 2-byte data type"},
		{"no bytes", v3meta(`[{"name": "gzip", "configuration": {"level": 1}}]`), "codec gzip before the bytes codec"},
		{"no codecs", v3meta(`[]`), "have no bytes or sharding_indexed codec"},
		{"bad perm", v3meta(`[{"name": "transpose", "configuration": {"order": [0, 0, 1]}}, ` + le + `]`), "is not a permutation"},
		{"after shard", v3meta(`[{"name": "sharding_indexed", "configuration": {"chunk_shape": [1, 2, 2], "codecs": [` + le + `], ` + idx + `}}, {"name": "gzip"}]`), "after sharding_indexed (compressing whole shards) not supported"},
		{"nested", v3meta(`[{"name": "sharding_indexed", "configuration": {"chunk_shape": [2, 2, 2], "codecs": [{"name": "sharding_indexed", "configuration": {"chunk_shape": [1, 1, 1], "codecs": [` + le + `], ` + idx + `}}], ` + idx + `}}]`), "nested shards"},
		{"transposed shard", v3meta(`[{"name": "transpose", "configuration": {"order": [2, 1, 0]}}, {"name": "sharding_indexed", "configuration": {"chunk_shape": [1, 2, 2], "codecs": [` + le + `], ` + idx + `}}]`), "transpose before sharding_indexed not supported"},
		{"inner misfit", v3meta(`[{"name": "sharding_indexed", "configuration": {"chunk_shape": [2, 3, 2], "codecs": [` + le + `], ` + idx + `}}]`), "does not divide the shard shape"},
		{"index gzip", v3meta(`[{"name": "sharding_indexed", "configuration": {"chunk_shape": [1, 2, 2], "codecs": [` + le + `], "index_codecs": [` + le + `, {"name": "gzip"}]}}]`), "index_codecs [bytes, gzip] not supported"},
		{"index location", v3meta(`[{"name": "sharding_indexed", "configuration": {"chunk_shape": [1, 2, 2], "codecs": [` + le + `], ` + idx + `, "index_location": "middle"}}]`), `index_location "middle"`},
		{"extension", strings.Replace(v3meta("["+le+"]"), `"attributes": {}`, `"attributes": {}, "future": {"must_understand": true}`, 1), `unknown metadata ["future"]`},
		{"transformers", strings.Replace(v3meta("["+le+"]"), `"attributes": {}`, `"attributes": {}, "storage_transformers": [{"name": "x"}]`, 1), "storage_transformers not supported"},
		{"axes", strings.Replace(v3meta("["+le+"]"), `"attributes": {}`, `"attributes": {}, "dimension_names": ["x", "y", "z"]`, 1), "stored in another axis order"},
		{"key encoding", repl(`"name": "default"`, `"name": "morton"`), `chunk_key_encoding "morton" not supported`},
		{"no fill", repl(`"fill_value": 0`, `"fill_value": null`), "fill_value is missing"},
		{"fill range", repl(`"fill_value": 0`, `"fill_value": 70000`), "not an integer in 0..65535"},
		{"json", `{"zarr_format": 3,`, "bad zarr.json"},
	}
	for _, c := range cases {
		dir := filepath.Join(t.TempDir(), "a.zarr")
		writeV3(t, dir, c.meta, nil)
		_, err := OpenStream(dir, Options{})
		if !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), c.want) ||
			!strings.Contains(err.Error(), filepath.Join(dir, "zarr.json")) || strings.Contains(err.Error(), "\n") {
			t.Errorf("%s: %v; want one line with ErrFormat naming zarr.json and %q", c.name, err, c.want)
		}
	}
	// Extension metadata that may be ignored is.
	dir := filepath.Join(t.TempDir(), "ok.zarr")
	writeV3(t, dir, strings.Replace(v3meta("["+le+"]"), `"attributes": {}`, `"attributes": {}, "future": {"must_understand": false}, "dimension_names": ["z", null, "x"]`, 1), nil)
	if _, err := OpenStream(dir, Options{}); err != nil {
		t.Errorf("must_understand false: %v", err)
	}
	// A directory with both kinds of metadata is ambiguous.
	os.WriteFile(filepath.Join(dir, ".zarray"), []byte("{}"), 0o644)
	if _, err := OpenStream(dir, Options{}); !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "holds both .zarray (Zarr v2) and zarr.json (Zarr v3)") {
		t.Errorf("both: %v", err)
	}
	// A group names the arrays inside it.
	g := t.TempDir()
	writeV3(t, g, `{"zarr_format": 3, "node_type": "group", "attributes": {}}`, nil)
	writeV3(t, filepath.Join(g, "scan"), v3meta("["+le+"]"), nil)
	if _, err := OpenStream(g, Options{}); err == nil || !strings.Contains(err.Error(), "arrays here: "+filepath.Join(g, "scan")) {
		t.Errorf("group: %v", err)
	}
}

// u16 returns n little-endian uint16 values start, start+1, ….
func u16(n, start int) []byte {
	b := make([]byte, 2*n)
	for i := 0; i < n; i++ {
		binary.LittleEndian.PutUint16(b[2*i:], uint16(start+i))
	}
	return b
}

func crcAppend(b []byte) []byte {
	return binary.LittleEndian.AppendUint32(append([]byte{}, b...), crc32.Checksum(b, crc32.MakeTable(crc32.Castagnoli)))
}

// Damaged chunks and shards are refused naming the file; hex and special
// fill values keep their bits.
func TestZarr3Damaged(t *testing.T) {
	// Source: the CRC-32C check value of "123456789" is 0xE3069283 (the
	// catalogued check value of CRC-32C; from memory) — the table our
	// crc32c codec uses.
	if c := crc32.Checksum([]byte("123456789"), crc32cTable); c != 0xe3069283 {
		t.Fatalf("crc32c check value %08x", c)
	}
	le := `{"name": "bytes", "configuration": {"endian": "little"}}`
	read := func(dir string) error {
		_, err := Open(dir, Options{})
		return err
	}
	// crc32c on plain chunks: a good chunk reads, a flipped byte does not.
	dir := filepath.Join(t.TempDir(), "crc.zarr")
	good := crcAppend(u16(32, 0))
	writeV3(t, dir, v3meta(`[`+le+`, {"name": "crc32c"}]`), map[string][]byte{"c/0/0/0": good})
	v, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if p := v.(*volume.Volume[uint16]).Pix; p[31] != 31 || p[32] != 0 {
		t.Errorf("crc32c array: voxel 31 = %d, 32 = %d; want 31 and the fill 0", p[31], p[32])
	}
	bad := append([]byte{}, good...)
	bad[5] ^= 1
	os.WriteFile(filepath.Join(dir, "c", "0", "0", "0"), bad, 0o644)
	if err := read(dir); !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "crc32c checksum mismatch") || !strings.Contains(err.Error(), filepath.Join("c", "0", "0", "0")) {
		t.Errorf("damaged chunk: %v", err)
	}
	os.WriteFile(filepath.Join(dir, "c", "0", "0", "0"), good[:40], 0o644)
	if err := read(dir); err == nil {
		t.Errorf("short chunk read")
	}
	// A chunk one voxel short (no codecs but bytes).
	dir = filepath.Join(t.TempDir(), "short.zarr")
	writeV3(t, dir, v3meta(`[`+le+`]`), map[string][]byte{"c/1/0/0": u16(31, 0)})
	if err := read(dir); !errors.Is(err, ErrTruncated) || !strings.Contains(err.Error(), "got 62 of 64 bytes") {
		t.Errorf("short chunk: %v", err)
	}

	// A shard of 2×1×1 inner chunks of 1×4×4, index at the end with crc32c:
	// inner chunk 0 stored, inner chunk 1 empty.
	shardMeta := v3meta(`[{"name": "sharding_indexed", "configuration": {"chunk_shape": [1, 4, 4], "codecs": [` + le + `],
 "index_codecs": [` + le + `, {"name": "crc32c"}], "index_location": "end"}}]`)
	index := func(entries ...uint64) []byte {
		var b []byte
		for _, e := range entries {
			b = binary.LittleEndian.AppendUint64(b, e)
		}
		return crcAppend(b)
	}
	chunk := u16(16, 100)
	shard := append(append([]byte{}, chunk...), index(0, 32, emptyChunk, emptyChunk)...)
	dir = filepath.Join(t.TempDir(), "shard.zarr")
	writeV3(t, dir, shardMeta, map[string][]byte{"c/0/0/0": shard})
	v, err = Open(dir, Options{RequireChunks: true})
	if err != nil {
		t.Fatal(err)
	}
	if p := v.(*volume.Volume[uint16]).Pix; p[0] != 100 || p[15] != 115 || p[16] != 0 || p[63] != 0 {
		t.Errorf("shard: voxels %d %d %d %d, want 100 115 and the fill 0 (empty inner chunk, missing shard)", p[0], p[15], p[16], p[63])
	}
	for _, c := range []struct {
		name string
		data []byte
		kind error
		want string
	}{
		{"index crc", append(append([]byte{}, chunk...), append(index(0, 32, emptyChunk, emptyChunk)[:35], 0xff)...), ErrFormat, "shard index crc32c checksum mismatch"},
		{"outside", append(append([]byte{}, chunk...), index(8, 32, emptyChunk, emptyChunk)...), ErrFormat, "outside the shard's data bytes 0..32"},
		{"half empty", append(append([]byte{}, chunk...), index(0, 32, emptyChunk, 0)...), ErrFormat, "shard index entry 1"},
		{"short", index(0, 32, emptyChunk, emptyChunk)[:20], ErrTruncated, "shorter than its 36-byte index"},
		{"short chunk", append(append([]byte{}, chunk[:30]...), index(0, 30, emptyChunk, emptyChunk)...), ErrTruncated, "got 30 of 32 bytes"},
	} {
		os.WriteFile(filepath.Join(dir, "c", "0", "0", "0"), c.data, 0o644)
		err := read(dir)
		if !errors.Is(err, c.kind) || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), filepath.Join("c", "0", "0", "0")) {
			t.Errorf("%s: %v; want %v with %q naming the shard", c.name, err, c.kind, c.want)
		}
	}

	// Fill values: hex bit patterns and the special floats keep their bits.
	for _, c := range []struct {
		dtype, fill string
		bits        uint32
	}{
		{"float32", `"0x7fc00001"`, 0x7fc00001},
		{"float32", `"NaN"`, 0x7fc00000},
		{"float32", `"-Infinity"`, 0xff800000},
		{"float64", `"0x3ff0000000000000"`, math.Float32bits(1)},
		{"float64", `0.1`, math.Float32bits(0.1)},
		{"int16", `-300`, math.Float32bits(-300)},
	} {
		meta := strings.Replace(strings.Replace(v3meta(`[`+le+`]`), `"uint16"`, `"`+c.dtype+`"`, 1), `"fill_value": 0`, `"fill_value": `+c.fill, 1)
		dir := filepath.Join(t.TempDir(), "fill.zarr")
		writeV3(t, dir, meta, nil)
		v, err := Open(dir, Options{})
		if err != nil {
			t.Errorf("%s fill %s: %v", c.dtype, c.fill, err)
			continue
		}
		if b := math.Float32bits(v.(*volume.Volume[float32]).Pix[7]); b != c.bits {
			t.Errorf("%s fill %s: bits %08x, want %08x", c.dtype, c.fill, b, c.bits)
		}
	}
}

// Transposes compose: [1,2,0] then [1,2,0] is [2,0,1]. Source: the
// definition of the transpose codec (encoded axis i is input axis
// order[i]), applied twice by hand.
func TestZarr3TransposeCompose(t *testing.T) {
	tr := `{"name": "transpose", "configuration": {"order": [1, 2, 0]}}`
	m, err := parseZarr3("zarr.json", []byte(v3meta(`[`+tr+`, `+tr+`, {"name": "bytes", "configuration": {"endian": "big"}}]`)))
	if err != nil {
		t.Fatal(err)
	}
	if fmt.Sprint(m.codecs.order) != "[2 0 1]" {
		t.Errorf("composed order %v, want [2 0 1]", m.codecs.order)
	}
	// untranspose of a 2×3×4 chunk stored with order [2,0,1]: encoded
	// element (x, z, y) holds the value 100z + 10y + x.
	shape := [3]int{2, 3, 4}
	src := make([]byte, 0, 24)
	for x := 0; x < 4; x++ {
		for z := 0; z < 2; z++ {
			for y := 0; y < 3; y++ {
				src = append(src, byte(100*z+10*y+x))
			}
		}
	}
	got := untranspose(src, shape, []int{2, 0, 1}, 1)
	for z, i := 0, 0; z < 2; z++ {
		for y := 0; y < 3; y++ {
			for x := 0; x < 4; x++ {
				if got[i] != byte(100*z+10*y+x) {
					t.Fatalf("(%d,%d,%d) = %d", z, y, x, got[i])
				}
				i++
			}
		}
	}
}
