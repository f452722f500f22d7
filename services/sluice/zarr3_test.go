package main

import (
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"sluice/pkg/volio"
)

// zarritaWrite writes the raw little-endian file raw as the Zarr v3 array
// out with zarrita (tests/zarr3/write.mjs, array mode; spec as write.mjs
// documents it). Without Node.js or zarrita the test is skipped, or fails
// under CI.
func zarritaWrite(t *testing.T, out, raw string, spec map[string]any) {
	t.Helper()
	dir, _ := filepath.Abs(filepath.Join("..", "..", "tests", "zarr3"))
	node := need(t, "node")
	if _, err := os.Stat(filepath.Join(dir, "node_modules", "zarrita", "package.json")); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("zarrita not installed in %s (make setup)", dir)
		}
		t.Skip("zarrita not installed (make setup)")
	}
	spec["raw"] = raw
	b, _ := json.Marshal(spec)
	sf := out + ".spec.json"
	if err := os.WriteFile(sf, b, 0o644); err != nil {
		t.Fatal(err)
	}
	if o, err := exec.Command(node, filepath.Join(dir, "write.mjs"), "array", out, sf).CombinedOutput(); err != nil {
		t.Fatalf("write.mjs: %v\n%s", err, o)
	}
}

// `sluice measure` gives the same result from Zarr v3 arrays written by
// zarrita — labels in zstd shards (index with crc32c), labels transposed
// and gzipped, grey values in Blosc chunks — as from the same voxels in raw
// files, with the voxel size from the array's attributes; and bad Zarr v3
// input exits 2 with one line.
func TestMeasureZarr3(t *testing.T) {
	dir := t.TempDir()
	lab := capScene()
	raw := filepath.Join(dir, "cap.raw")
	if err := volio.WriteRaw(raw, lab, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	le := map[string]any{"name": "bytes", "configuration": map[string]any{"endian": "little"}}
	zstd := map[string]any{"name": "zstd", "configuration": map[string]any{"level": 3, "checksum": false}}
	gz := map[string]any{"name": "gzip", "configuration": map[string]any{"level": 5}}
	tr := map[string]any{"name": "transpose", "configuration": map[string]any{"order": []int{2, 0, 1}}}
	shape := lab.Bounds().Size()
	sharded := filepath.Join(dir, "cap-sharded.zarr")
	zarritaWrite(t, sharded, raw, map[string]any{"dtype": "uint8", "shape": shape,
		"sharding":   map[string]any{"shard": []int{32, 32, 32}, "inner": []int{16, 16, 16}, "innerCodecs": []any{le, zstd}},
		"attributes": map[string]any{"voxel_size": "2um"}})
	transposed := filepath.Join(dir, "cap-transposed.zarr")
	zarritaWrite(t, transposed, raw, map[string]any{"dtype": "uint8", "shape": shape, "chunk": []int{16, 20, 24},
		"codecs": []any{tr, le, gz}, "attributes": map[string]any{"voxel_size": "2um"}})
	want := measureJSON(t, "--labels", "--voxel-size", "2um", "--ift", "0.07275", raw)
	for _, p := range []string{sharded, transposed} {
		got := measureJSON(t, "--labels", "--ift", "0.07275", p)
		if !reflect.DeepEqual(got, want) {
			t.Errorf("%s and the raw file give different results:\n%v\n%v", filepath.Base(p), got, want)
		}
	}

	grey := pipelineScene(t, [3]int{32, 32, 32}, 5)
	graw := filepath.Join(dir, "grey.raw")
	if err := volio.WriteRaw(graw, grey, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	blosc := map[string]any{"name": "blosc", "configuration": map[string]any{"cname": "lz4", "clevel": 5, "shuffle": 1}}
	gz3 := filepath.Join(dir, "grey.zarr")
	zarritaWrite(t, gz3, graw, map[string]any{"dtype": "uint16", "shape": []int{32, 32, 32}, "chunk": []int{16, 16, 16},
		"codecs": []any{le, blosc}, "fill": 0})
	a := measureJSON(t, "--no-sample", "--voxel-size", "3um", graw)
	b := measureJSON(t, "--no-sample", "--voxel-size", "3um", gz3)
	if !reflect.DeepEqual(a, b) {
		t.Errorf("grey Zarr v3 (Blosc) and raw give different results:\n%v\n%v", b, a)
	}

	for _, c := range []struct{ file, want string }{
		{"zarr3-4d", "array has 4 dimensions"},
		{"zarr3-unknown-codec", `codec "bz2" not supported`},
		{"zarr3-bad-crc", "crc32c checksum mismatch"},
	} {
		code, _, errs := runCLI(t, "measure", "--labels", "--voxel-size", "2um", bad(c.file))
		if code != 2 || !strings.Contains(errs, c.want) || !strings.Contains(errs, c.file) || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%s: exit %d, %q; want exit 2 and one line naming it with %q", c.file, code, errs, c.want)
		}
	}
}
