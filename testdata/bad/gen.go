//go:build ignore

// gen writes the bad-input corpus of sluice into the current directory
// (run it through make.sh). Every case is small and deterministic: the same
// bytes on every run. README.md lists the cases and the error each gives.
package main

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"os"
	"path/filepath"

	"google.golang.org/protobuf/proto"

	"sluice/pkg/volio"
	"sluice/pkg/volume"
	"sluice/proto/sluicepb"
)

func must(err error) {
	if err != nil {
		fmt.Fprintln(os.Stderr, "gen:", err)
		os.Exit(1)
	}
}

func write(name string, data []byte) {
	must(os.MkdirAll(filepath.Dir(name), 0o755))
	must(os.WriteFile(name, data, 0o644))
}

// ramp is a small uint16 volume with a deterministic grey ramp.
func ramp(nz, ny, nx int) *volume.Volume[uint16] {
	v := volume.NewShape[uint16](nz, ny, nx, 2e-6)
	for i := range v.Pix {
		v.Pix[i] = uint16(1000 + (i*37)%20000)
	}
	return v
}

func rawHeader(name, body string) { write(name+".sluice.json", []byte(body+"\n")) }

func tiffSlice(v volume.Any, z int) []byte {
	var b bytes.Buffer
	must(volio.EncodeTIFF(&b, v, z))
	return b.Bytes()
}

// setTIFFTag rewrites the SHORT value of tag in the first IFD of a
// little-endian TIFF written by volio.EncodeTIFF.
func setTIFFTag(t []byte, tag, val uint16) {
	le := binary.LittleEndian
	ifd := le.Uint32(t[4:])
	n := int(le.Uint16(t[ifd:]))
	for i := 0; i < n; i++ {
		e := t[int(ifd)+2+12*i:]
		if le.Uint16(e) == tag {
			le.PutUint16(e[8:], val)
			return
		}
	}
	must(fmt.Errorf("tag %d not found", tag))
}

const zarray = `{
    "zarr_format": 2,
    "shape": %s,
    "chunks": %s,
    "dtype": %q,
    "compressor": %s,
    "fill_value": 0,
    "order": "C",
    "filters": null,
    "dimension_separator": "/"
}
`

func main() {
	// Raw volumes.
	good := ramp(8, 16, 16)
	var le bytes.Buffer
	for _, p := range good.Pix {
		binary.Write(&le, binary.LittleEndian, p)
	}
	all := le.Bytes() // 4096 bytes

	write("truncated.raw", all[:2000])
	rawHeader("truncated.raw", `{"shape": [8, 16, 16], "dtype": "uint16", "voxel_size": "2um"}`)

	write("size-mismatch.raw", all)
	rawHeader("size-mismatch.raw", `{"shape": [8, 16, 16], "dtype": "uint8", "voxel_size": "2um"}`)

	write("shape-overflow.raw", all[:64])
	rawHeader("shape-overflow.raw", `{"shape": [9223372036854775807, 4294967296, 4294967296], "dtype": "uint16"}`)

	write("over-limit.raw", all[:64])
	rawHeader("over-limit.raw", `{"shape": [2000, 2000, 2000], "dtype": "uint8"}`)

	// float32 scan with two NaN and one +Inf voxel; the first at
	// (z, y, x) = (1, 2, 3).
	f := volume.NewShape[float32](4, 8, 8, 2e-6)
	for i := range f.Pix {
		f.Pix[i] = float32(i%50) / 10
	}
	f.Pix[(1*8+2)*8+3] = float32(math.NaN())
	f.Pix[(2*8+0)*8+5] = float32(math.Inf(1))
	f.Pix[(3*8+7)*8+7] = float32(math.NaN())
	must(volio.WriteRaw("nan.raw", f, volio.WriteOptions{}))

	// A step whose shape differs from the campaign's reference (the good
	// scans of the tests are 24³ or larger; this one is 20×20×20).
	must(volio.WriteRaw("shape-differs.raw", ramp(20, 20, 20), volio.WriteOptions{}))

	// A valid scan meant to be ingested under a step name already taken.
	must(volio.WriteRaw("duplicate-step.raw", ramp(24, 24, 24), volio.WriteOptions{}))

	// TIFF stacks.
	s := ramp(4, 12, 16)
	for _, z := range []int{0, 1, 3} { // slice 2 never arrived
		write(fmt.Sprintf("tiff-missing-slice/z%05d.tif", z), tiffSlice(s, z))
	}
	small := ramp(1, 10, 16)
	write("tiff-mixed-size/z00000.tif", tiffSlice(s, 0))
	write("tiff-mixed-size/z00001.tif", tiffSlice(s, 1))
	write("tiff-mixed-size/z00002.tif", tiffSlice(small, 0))
	jpeg := tiffSlice(s, 0)
	setTIFFTag(jpeg, 259, 7) // Compression = 7 (JPEG), TIFF Technical Note 2
	write("tiff-jpeg.tif", jpeg)

	// Zarr v2 arrays.
	write("zarr-bad-json/.zarray", []byte(`{"zarr_format": 2, "shape": [4, 8, 8], "chunks": [4, 8, 8], "dtype": "<u2",`+"\n"))
	write("zarr-chunks-over-shape/.zarray", []byte(fmt.Sprintf(zarray, "[4, 8, 8]", "[64, 8, 8]", "<u2", "null")))
	write("zarr-chunks-over-shape/0/0/0", make([]byte, 64*8*8*2))
	write("zarr-unknown-dtype/.zarray", []byte(fmt.Sprintf(zarray, "[4, 8, 8]", "[4, 8, 8]", "<i8", "null")))
	write("zarr-unknown-compressor/.zarray", []byte(fmt.Sprintf(zarray, "[4, 8, 8]", "[4, 8, 8]", "<u2", `{"id": "bz2", "level": 5}`)))
	write("zarr-missing-chunk/.zarray", []byte(fmt.Sprintf(zarray, "[8, 8, 8]", "[4, 8, 8]", "<u2", "null")))
	write("zarr-missing-chunk/0/0/0", all[:4*8*8*2]) // chunk 1/0/0 never arrived

	// Zarr v3 arrays.
	zarr3 := `{"zarr_format": 3, "node_type": "array", "shape": %s, "data_type": "uint16",
 "chunk_grid": {"name": "regular", "configuration": {"chunk_shape": %s}},
 "chunk_key_encoding": {"name": "default", "configuration": {"separator": "/"}},
 "fill_value": 0, "codecs": [{"name": "bytes", "configuration": {"endian": "little"}}%s], "attributes": {}}
`
	write("zarr3-4d/zarr.json", []byte(fmt.Sprintf(zarr3, "[2, 4, 8, 8]", "[1, 4, 8, 8]", "")))
	write("zarr3-unknown-codec/zarr.json", []byte(fmt.Sprintf(zarr3, "[4, 8, 8]", "[4, 8, 8]", `, {"name": "bz2", "configuration": {"level": 5}}`)))
	write("zarr3-bad-crc/zarr.json", []byte(fmt.Sprintf(zarr3, "[4, 8, 8]", "[4, 8, 8]", `, {"name": "crc32c"}`)))
	write("zarr3-bad-crc/c/0/0/0", append(all[:4*8*8*2:4*8*8*2], 0, 0, 0, 0)) // checksum 0: wrong

	// Task messages.
	write("task-garbage.bin", []byte{0x0a, 0xff, 0xff, 0xff, 0xff, 0x0f, 0x12, 0x03, 'a', 'b'})
	tk := &sluicepb.TileTask{Campaign: "bad", Step: "scan-0001", Tile: 7, TileCount: 8, ParamHash: "0123456789abcdef",
		Core: &sluicepb.Box{MinZ: 1000, MinY: 0, MinX: 0, MaxZ: 1024, MaxY: 24, MaxX: 24}, Halo: 4,
		ManifestKey: "campaigns/bad/steps/scan-0001/manifest.json", InputKey: "campaigns/bad/steps/scan-0001/volume.zarr/",
		LabelKey: "campaigns/bad/steps/scan-0001/labels.zarr/", ResultKey: "campaigns/bad/steps/scan-0001/tiles/0123456789abcdef/7.json"}
	b, err := proto.Marshal(tk)
	must(err)
	write("task-box-out-of-range.bin", b)

	// Names that would climb out of the layout.
	write("names.txt", []byte("../escape\na/b\n..\n.hidden\nScan-0001\nscan\\0001\n"))

	// Campaign configs.
	write("config-unknown-key.yaml", []byte("tile: 32\nsegment:\n  treshold: otsu\n"))
	write("config-negative-voxel-size.yaml", []byte("voxel_size: -2um\n"))
	write("config-sigma-zero.yaml", []byte("measure:\n  curvature_sigma: 0\n"))
	write("config-tile-zero.yaml", []byte("tile: 0\n"))
	write("config-thresholds-order.yaml", []byte("segment:\n  threshold: fixed\n  fixed: [30000, 18000]\n"))
	write("config-negative-ift.yaml", []byte("ift_n_per_m: -0.07\n"))
}
