package volio

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"hash/crc32"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"sync"

	"github.com/klauspost/compress/zstd"

	"sluice/pkg/volume"
)

// Zarr v3 input (read only): the array metadata of zarr.json and the codecs
// bytes, transpose, gzip, zstd, blosc, crc32c and sharding_indexed, per the
// Zarr core specification version 3.0 and its codec specifications
// (zarr-specs.readthedocs.io, "Zarr core specification (version 3.0)",
// "Sharding codec (version 1.0)", "CRC32C checksum codec"). See doc.go.

// zarr3Name is the metadata document of a Zarr v3 node.
const zarr3Name = "zarr.json"

// maxShardChunks bounds the inner chunks of one shard (a 64 MiB index).
const maxShardChunks = 1 << 22

// zarr3Type describes a supported data_type: its size in bytes and the
// type of the volumes it is read into. uint8 and uint16 are read as
// stored; int8, int16, float32 and float64 as float32 (exact for all but
// float64, which is rounded to the nearest float32, as HDF5 input does).
type zarr3Type struct {
	size int
	out  volume.DType
	kind byte // 'u' unsigned, 'i' signed, 'f' float
}

var zarr3Types = map[string]zarr3Type{
	"uint8":   {1, volume.Uint8, 'u'},
	"uint16":  {2, volume.Uint16, 'u'},
	"int8":    {1, volume.Float32, 'i'},
	"int16":   {2, volume.Float32, 'i'},
	"float32": {4, volume.Float32, 'f'},
	"float64": {8, volume.Float32, 'f'},
}

// b2b codecs (bytes to bytes).
const (
	codecGzip = iota + 1
	codecZstd
	codecBlosc
	codecCRC32C
)

var b2bNames = map[int]string{codecGzip: "gzip", codecZstd: "zstd", codecBlosc: "blosc", codecCRC32C: "crc32c"}

// zarr3Codecs is a parsed codec chain: array-to-array transposes, one
// array-to-bytes codec (bytes, or sharding_indexed at the top level only),
// then bytes-to-bytes codecs in encoding order.
type zarr3Codecs struct {
	// order is the composed transpose: encoded axis i is decoded axis
	// order[i]; nil when there is none (or it is the identity).
	order []int
	// endian is the bytes codec's byte order.
	endian binary.ByteOrder
	shard  *zarr3Shard
	b2b    []int
}

// zarr3Shard is the configuration of sharding_indexed.
type zarr3Shard struct {
	chunk      [3]int // inner chunk shape
	per        [3]int // inner chunks per shard along z, y, x
	inner      zarr3Codecs
	indexEnd   bool
	indexOrder binary.ByteOrder
	indexCRC   bool
}

// indexBytes is the encoded size of the shard index.
func (s *zarr3Shard) indexBytes() int {
	n := 16 * s.per[0] * s.per[1] * s.per[2]
	if s.indexCRC {
		n += 4
	}
	return n
}

// Zarr3Meta is the metadata of a 3-D Zarr v3 array.
type Zarr3Meta struct {
	Shape [3]int // (nz, ny, nx)
	// DataType is the stored data_type ("uint16", "float64" …).
	DataType string
	// DType is the type of the volumes read (see zarr3Type).
	DType volume.DType
	// Chunks is the regular chunk grid's chunk shape: the shard shape
	// when the array is sharded.
	Chunks [3]int
	// InnerChunks is the inner chunk shape of a sharded array, else zero.
	InnerChunks [3]int
	// Codecs names the codecs in order, inner ones in brackets after
	// sharding_indexed (for messages and the header).
	Codecs string
	// KeyEncoding is "default" ("c/0/1/2") or "v2" ("0.1.2"); Separator
	// is "/" or ".".
	KeyEncoding, Separator string
	// FillValue is the fill value as read into DType (float64 fills are
	// rounded to float32 like the data).
	FillValue float64
	// DimensionNames from the metadata (nil when absent; "" for null).
	DimensionNames []string
	// VoxelSize, TimeS/HasTime and Attrs come from "attributes" as for
	// Zarr v2's .zattrs ("voxel_size": "2.5um", "time_s": 12.5).
	VoxelSize float64
	TimeS     float64
	HasTime   bool
	Attrs     map[string]any

	typ    zarr3Type
	codecs zarr3Codecs
	// fillBits is the fill value of the output type: the byte for
	// uint8, the value for uint16, float32 bits for float32 output.
	fillBits uint32
}

// zarr3JSON is the JSON form of an array's zarr.json.
type zarr3JSON struct {
	ZarrFormat       json.RawMessage            `json:"zarr_format"`
	NodeType         string                     `json:"node_type"`
	Shape            []json.Number              `json:"shape"`
	DataType         json.RawMessage            `json:"data_type"`
	ChunkGrid        json.RawMessage            `json:"chunk_grid"`
	ChunkKeyEncoding json.RawMessage            `json:"chunk_key_encoding"`
	FillValue        json.RawMessage            `json:"fill_value"`
	Codecs           []json.RawMessage          `json:"codecs"`
	Attributes       map[string]json.RawMessage `json:"attributes"`
	DimensionNames   json.RawMessage            `json:"dimension_names"`
	Transformers     []json.RawMessage          `json:"storage_transformers"`
}

var zarr3Known = map[string]bool{"zarr_format": true, "node_type": true, "shape": true, "data_type": true,
	"chunk_grid": true, "chunk_key_encoding": true, "fill_value": true, "codecs": true, "attributes": true,
	"dimension_names": true, "storage_transformers": true}

// named is a name/configuration object of the metadata ({"name": …,
// "configuration": {…}}), which the specification also allows as a
// plain string.
type named struct {
	Name   string
	Config map[string]json.RawMessage
}

func parseNamed(raw json.RawMessage) (named, error) {
	var s string
	if json.Unmarshal(raw, &s) == nil {
		return named{Name: s}, nil
	}
	var o struct {
		Name           string                     `json:"name"`
		Configuration  map[string]json.RawMessage `json:"configuration"`
		MustUnderstand *bool                      `json:"must_understand"`
	}
	d := json.NewDecoder(bytes.NewReader(raw))
	d.DisallowUnknownFields()
	if err := d.Decode(&o); err != nil {
		return named{}, fmt.Errorf("%s: want {\"name\": …, \"configuration\": {…}}", compactJSON(raw))
	}
	if o.Name == "" {
		return named{}, fmt.Errorf("%s: no name", compactJSON(raw))
	}
	return named{Name: o.Name, Config: o.Configuration}, nil
}

// compactJSON shortens raw JSON for a one-line message.
func compactJSON(raw json.RawMessage) string {
	var b bytes.Buffer
	if json.Compact(&b, raw) != nil {
		b.Reset()
		b.Write(raw)
	}
	s := strings.Join(strings.Fields(b.String()), " ")
	if len(s) > 120 {
		s = s[:117] + "..."
	}
	return s
}

// onlyKeys refuses configuration keys outside allowed.
func onlyKeys(codec string, c map[string]json.RawMessage, allowed ...string) error {
	for k := range c {
		ok := false
		for _, a := range allowed {
			ok = ok || k == a
		}
		if !ok {
			return fmt.Errorf("codec %s: unknown configuration key %q", codec, k)
		}
	}
	return nil
}

func jsonInt(raw json.RawMessage, lo, hi int64) (int64, bool) {
	var n json.Number
	d := json.NewDecoder(bytes.NewReader(raw))
	d.UseNumber()
	if d.Decode(&n) != nil {
		return 0, false
	}
	v, err := n.Int64()
	return v, err == nil && v >= lo && v <= hi
}

func jsonString(raw json.RawMessage) (string, bool) {
	var s string
	return s, json.Unmarshal(raw, &s) == nil
}

// parseShape3 reads a 3-element list of positive integers.
func parseShape3(raw json.RawMessage) ([3]int, error) {
	var a []json.Number
	var s [3]int
	d := json.NewDecoder(bytes.NewReader(raw))
	d.UseNumber()
	if err := d.Decode(&a); err != nil {
		return s, fmt.Errorf("%s is not a list of integers", compactJSON(raw))
	}
	if len(a) != 3 {
		return s, fmt.Errorf("%s has %d dimensions, want 3", compactJSON(raw), len(a))
	}
	for i, n := range a {
		v, err := n.Int64()
		if err != nil || v < 1 || v > 1<<31 {
			return s, fmt.Errorf("%s: %s out of range 1..2^31", compactJSON(raw), n)
		}
		s[i] = int(v)
	}
	return s, nil
}

// parseCodecs3 parses a codec chain for chunks of shape chunk; top is
// false inside a sharding codec.
func parseCodecs3(list []json.RawMessage, typ zarr3Type, chunk [3]int, top bool) (zarr3Codecs, string, error) {
	var c zarr3Codecs
	var names []string
	stage := 0 // 0 array-to-array, 1 after array-to-bytes
	order := []int{0, 1, 2}
	for _, raw := range list {
		n, err := parseNamed(raw)
		if err != nil {
			return c, "", fmt.Errorf("codec %v", err)
		}
		names = append(names, n.Name)
		switch n.Name {
		case "transpose":
			if stage != 0 {
				return c, "", fmt.Errorf("codec transpose after the bytes codec (array-to-array codecs come first)")
			}
			if err := onlyKeys(n.Name, n.Config, "order"); err != nil {
				return c, "", err
			}
			p, err := parsePerm(n.Config["order"])
			if err != nil {
				return c, "", err
			}
			// Transposes compose: after this one, encoded axis i is the
			// previous encoded axis p[i].
			next := make([]int, 3)
			for i := range next {
				next[i] = order[p[i]]
			}
			order = next
		case "bytes":
			if stage != 0 {
				return c, "", fmt.Errorf("two array-to-bytes codecs (bytes/sharding_indexed)")
			}
			if err := onlyKeys(n.Name, n.Config, "endian"); err != nil {
				return c, "", err
			}
			c.endian = binary.LittleEndian
			if raw, ok := n.Config["endian"]; ok {
				e, _ := jsonString(raw)
				switch e {
				case "little":
				case "big":
					c.endian = binary.BigEndian
				default:
					return c, "", fmt.Errorf("codec bytes: endian %s (want \"little\" or \"big\")", compactJSON(raw))
				}
			} else if typ.size > 1 {
				return c, "", fmt.Errorf("codec bytes has no endian for a %d-byte data type", typ.size)
			}
			stage = 1
		case "sharding_indexed":
			if stage != 0 {
				return c, "", fmt.Errorf("two array-to-bytes codecs (bytes/sharding_indexed)")
			}
			if !top {
				return c, "", fmt.Errorf("sharding_indexed inside sharding_indexed (nested shards) not supported")
			}
			if !isIdentity(order) {
				return c, "", fmt.Errorf("transpose before sharding_indexed not supported (put it in the shard's inner codecs)")
			}
			s, inner, err := parseSharding(n.Config, typ, chunk)
			if err != nil {
				return c, "", err
			}
			c.shard = s
			names[len(names)-1] = "sharding_indexed[" + inner + "]"
			stage = 1
		case "gzip", "zstd", "blosc", "crc32c":
			if stage != 1 {
				return c, "", fmt.Errorf("codec %s before the bytes codec (bytes-to-bytes codecs come after it)", n.Name)
			}
			if c.shard != nil {
				return c, "", fmt.Errorf("codec %s after sharding_indexed (compressing whole shards) not supported", n.Name)
			}
			if err := checkB2B(n); err != nil {
				return c, "", err
			}
			for id, name := range b2bNames {
				if name == n.Name {
					c.b2b = append(c.b2b, id)
				}
			}
		default:
			return c, "", fmt.Errorf("codec %q not supported (want bytes, transpose, gzip, zstd, blosc, crc32c or sharding_indexed)", n.Name)
		}
	}
	if stage != 1 {
		return c, "", fmt.Errorf("codecs %v have no bytes or sharding_indexed codec", names)
	}
	if !isIdentity(order) {
		c.order = order
	}
	return c, strings.Join(names, ", "), nil
}

func isIdentity(p []int) bool {
	for i, v := range p {
		if v != i {
			return false
		}
	}
	return true
}

// parsePerm reads a transpose order: a permutation of 0, 1, 2 (or "C"
// and "F", the identity and the reversal, of earlier drafts).
func parsePerm(raw json.RawMessage) ([]int, error) {
	if s, ok := jsonString(raw); ok {
		switch s {
		case "C":
			return []int{0, 1, 2}, nil
		case "F":
			return []int{2, 1, 0}, nil
		}
	}
	var p []int
	if err := json.Unmarshal(raw, &p); err != nil || len(p) != 3 {
		return nil, fmt.Errorf("codec transpose: order %s is not a permutation of [0, 1, 2]", compactJSON(raw))
	}
	seen := [3]bool{}
	for _, v := range p {
		if v < 0 || v > 2 || seen[v] {
			return nil, fmt.Errorf("codec transpose: order %s is not a permutation of [0, 1, 2]", compactJSON(raw))
		}
		seen[v] = true
	}
	return p, nil
}

// checkB2B checks the configuration of a bytes-to-bytes codec. Decoding
// needs none of it (gzip and zstd frames and the Blosc header describe
// themselves), but a wrong type or an unknown key means metadata we do not
// understand.
func checkB2B(n named) error {
	switch n.Name {
	case "gzip":
		if err := onlyKeys(n.Name, n.Config, "level"); err != nil {
			return err
		}
		if raw, ok := n.Config["level"]; ok {
			if _, ok := jsonInt(raw, 0, 9); !ok {
				return fmt.Errorf("codec gzip: level %s (want 0..9)", compactJSON(raw))
			}
		}
	case "zstd":
		if err := onlyKeys(n.Name, n.Config, "level", "checksum"); err != nil {
			return err
		}
		if raw, ok := n.Config["level"]; ok {
			if _, ok := jsonInt(raw, -(1 << 17), 22); !ok {
				return fmt.Errorf("codec zstd: level %s", compactJSON(raw))
			}
		}
		if raw, ok := n.Config["checksum"]; ok {
			var b bool
			if json.Unmarshal(raw, &b) != nil {
				return fmt.Errorf("codec zstd: checksum %s (want true or false)", compactJSON(raw))
			}
		}
	case "blosc":
		if err := onlyKeys(n.Name, n.Config, "cname", "clevel", "shuffle", "typesize", "blocksize"); err != nil {
			return err
		}
		if raw, ok := n.Config["cname"]; ok {
			s, _ := jsonString(raw)
			switch s {
			case "blosclz", "lz4", "lz4hc", "zlib", "zstd":
			default:
				return fmt.Errorf("codec blosc: cname %s not supported (want blosclz, lz4, lz4hc, zlib or zstd)", compactJSON(raw))
			}
		}
		if raw, ok := n.Config["shuffle"]; ok {
			s, _ := jsonString(raw)
			switch s {
			case "noshuffle", "shuffle", "bitshuffle":
			default:
				// numcodecs-style integers 0, 1, 2 are accepted too.
				if _, ok := jsonInt(raw, 0, 2); !ok {
					return fmt.Errorf("codec blosc: shuffle %s (want noshuffle, shuffle or bitshuffle)", compactJSON(raw))
				}
			}
		}
	case "crc32c":
		if err := onlyKeys(n.Name, n.Config); err != nil {
			return err
		}
	}
	return nil
}

// parseSharding reads the configuration of sharding_indexed for shards of
// shape shard.
func parseSharding(cfg map[string]json.RawMessage, typ zarr3Type, shard [3]int) (*zarr3Shard, string, error) {
	if err := onlyKeys("sharding_indexed", cfg, "chunk_shape", "codecs", "index_codecs", "index_location"); err != nil {
		return nil, "", err
	}
	s := &zarr3Shard{indexEnd: true}
	inner, err := parseShape3(cfg["chunk_shape"])
	if err != nil {
		return nil, "", fmt.Errorf("sharding_indexed chunk_shape %v", err)
	}
	s.chunk = inner
	for i := 0; i < 3; i++ {
		if shard[i]%inner[i] != 0 {
			return nil, "", fmt.Errorf("sharding_indexed chunk_shape %v does not divide the shard shape %v", inner, shard)
		}
		s.per[i] = shard[i] / inner[i]
	}
	if _, ok := mulLimit(s.per, maxShardChunks); !ok {
		return nil, "", fmt.Errorf("shards of %v inner chunks exceed %d", s.per, maxShardChunks)
	}
	if _, ok := mulLimit(inner, maxChunkBytes/int64(typ.size)); !ok {
		return nil, "", fmt.Errorf("inner chunks %v exceed %d bytes", inner, maxChunkBytes)
	}
	var list []json.RawMessage
	if err := json.Unmarshal(cfg["codecs"], &list); err != nil {
		return nil, "", fmt.Errorf("sharding_indexed codecs %s is not a list", compactJSON(cfg["codecs"]))
	}
	c, names, err := parseCodecs3(list, typ, inner, false)
	if err != nil {
		return nil, "", err
	}
	s.inner = c
	if raw, ok := cfg["index_location"]; ok {
		loc, _ := jsonString(raw)
		switch loc {
		case "end":
		case "start":
			s.indexEnd = false
		default:
			return nil, "", fmt.Errorf("sharding_indexed index_location %s (want \"start\" or \"end\")", compactJSON(raw))
		}
	}
	// The index codecs must give a fixed size: bytes, then at most crc32c.
	var idx []json.RawMessage
	if err := json.Unmarshal(cfg["index_codecs"], &idx); err != nil {
		return nil, "", fmt.Errorf("sharding_indexed index_codecs %s is not a list", compactJSON(cfg["index_codecs"]))
	}
	var inames []string
	for i, raw := range idx {
		n, err := parseNamed(raw)
		if err != nil {
			return nil, "", fmt.Errorf("index codec %v", err)
		}
		inames = append(inames, n.Name)
		switch {
		case i == 0 && n.Name == "bytes":
			s.indexOrder = binary.LittleEndian
			if err := onlyKeys(n.Name, n.Config, "endian"); err != nil {
				return nil, "", err
			}
			if raw, ok := n.Config["endian"]; ok {
				e, _ := jsonString(raw)
				switch e {
				case "little":
				case "big":
					s.indexOrder = binary.BigEndian
				default:
					return nil, "", fmt.Errorf("index codec bytes: endian %s", compactJSON(raw))
				}
			} else {
				return nil, "", fmt.Errorf("index codec bytes has no endian")
			}
		case i == 1 && n.Name == "crc32c" && len(n.Config) == 0:
			s.indexCRC = true
		default:
			return nil, "", fmt.Errorf("sharding_indexed index_codecs [%s] not supported (want bytes, optionally followed by crc32c)", strings.Join(inames, ", "))
		}
	}
	if s.indexOrder == nil {
		return nil, "", fmt.Errorf("sharding_indexed index_codecs are empty (want bytes, optionally followed by crc32c)")
	}
	return s, names, nil
}

// parseFill3 reads fill_value for typ. Integers take JSON integers; floats
// take numbers, "NaN", "Infinity", "-Infinity" or "0x…" with the bits of
// the stored type. It returns the value as read into the output type and
// that type's bits (see Zarr3Meta.fillBits).
func parseFill3(raw json.RawMessage, typ zarr3Type) (float64, uint32, error) {
	s := strings.TrimSpace(string(raw))
	if s == "" || s == "null" {
		return 0, 0, fmt.Errorf("fill_value is missing (Zarr v3 requires one)")
	}
	if typ.kind != 'f' {
		v, ok := jsonInt(raw, math.MinInt64, math.MaxInt64)
		lo, hi := int64(0), int64(1)<<(8*typ.size)-1
		if typ.kind == 'i' {
			lo, hi = -(int64(1) << (8*typ.size - 1)), int64(1)<<(8*typ.size-1)-1
		}
		if !ok || v < lo || v > hi {
			return 0, 0, fmt.Errorf("fill_value %s is not an integer in %d..%d", compactJSON(raw), lo, hi)
		}
		f := float64(v)
		if typ.out == volume.Float32 {
			return f, math.Float32bits(float32(f)), nil
		}
		return f, uint32(v), nil
	}
	var f32 float32
	if str, ok := jsonString(raw); ok {
		switch {
		case str == "NaN":
			f32 = math.Float32frombits(0x7fc00000)
		case str == "Infinity":
			f32 = float32(math.Inf(1))
		case str == "-Infinity":
			f32 = float32(math.Inf(-1))
		case strings.HasPrefix(str, "0x") && len(str) == 2+2*typ.size:
			bits, err := strconv.ParseUint(str[2:], 16, 64)
			if err != nil {
				return 0, 0, fmt.Errorf("fill_value %q is not hexadecimal", str)
			}
			if typ.size == 4 {
				f32 = math.Float32frombits(uint32(bits))
			} else {
				f32 = float32(math.Float64frombits(bits))
			}
		default:
			return 0, 0, fmt.Errorf("fill_value %q (want a number, \"NaN\", \"Infinity\", \"-Infinity\" or 0x and %d hex digits)", str, 2*typ.size)
		}
	} else {
		f, err := strconv.ParseFloat(s, 64)
		if err != nil {
			return 0, 0, fmt.Errorf("fill_value %s is not a number", compactJSON(raw))
		}
		if typ.size == 4 && math.Abs(f) > math.MaxFloat32 {
			return 0, 0, fmt.Errorf("fill_value %s is outside the float32 range", s)
		}
		f32 = float32(f)
	}
	return float64(f32), math.Float32bits(f32), nil
}

// parseZarr3 decodes an array's zarr.json; name is used in errors.
func parseZarr3(name string, data []byte) (Zarr3Meta, error) {
	var m Zarr3Meta
	bad := func(format string, args ...any) (Zarr3Meta, error) {
		return Zarr3Meta{}, fileErr(name, ErrFormat, format, args...)
	}
	var all map[string]json.RawMessage
	if err := json.Unmarshal(data, &all); err != nil {
		return bad("bad zarr.json: %v", err)
	}
	if all == nil {
		return bad("bad zarr.json: not a JSON object")
	}
	if raw, ok := all["zarr_format"]; !ok {
		return bad("no zarr_format")
	} else if f, ok := jsonInt(raw, 3, 3); !ok || f != 3 {
		return bad("zarr_format %s, want 3", compactJSON(raw))
	}
	if nt, _ := jsonString(all["node_type"]); nt == "group" {
		return bad("a Zarr v3 group, not an array: name the array inside it")
	}
	// Extension fields may be ignored only when they say so
	// (must_understand false); anything else is metadata we cannot honour.
	var unknown []string
	for k, v := range all {
		if zarr3Known[k] {
			continue
		}
		var ext struct {
			MustUnderstand *bool `json:"must_understand"`
		}
		if json.Unmarshal(v, &ext) == nil && ext.MustUnderstand != nil && !*ext.MustUnderstand {
			continue
		}
		unknown = append(unknown, k)
	}
	if len(unknown) > 0 {
		sort.Strings(unknown)
		return bad("unknown metadata %q not supported (it does not say must_understand: false)", unknown)
	}
	var zj zarr3JSON
	d := json.NewDecoder(bytes.NewReader(data))
	d.UseNumber()
	if err := d.Decode(&zj); err != nil {
		return bad("bad zarr.json: %v", err)
	}
	if zj.NodeType != "array" {
		return bad("node_type %q, want \"array\"", zj.NodeType)
	}
	if len(zj.Shape) != 3 {
		return bad("array has %d dimensions (shape %v), want 3 (z, y, x)", len(zj.Shape), zj.Shape)
	}
	shape, err := parseShape3(all["shape"])
	if err != nil {
		return bad("shape %v", err)
	}
	m.Shape = shape
	dt, ok := jsonString(zj.DataType)
	if !ok {
		return bad("data_type %s not supported (want uint8, uint16, int8, int16, float32 or float64)", compactJSON(zj.DataType))
	}
	typ, ok := zarr3Types[dt]
	if !ok {
		why := ""
		switch dt {
		case "int32", "uint32", "int64", "uint64":
			why = "; wider integers do not fit float32 exactly"
		}
		return bad("data_type %q not supported (want uint8, uint16, int8, int16, float32 or float64%s)", dt, why)
	}
	m.DataType, m.DType, m.typ = dt, typ.out, typ
	grid, err := parseNamed(zj.ChunkGrid)
	if err != nil {
		return bad("chunk_grid %v", err)
	}
	if grid.Name != "regular" {
		return bad("chunk_grid %q not supported (want a regular grid)", grid.Name)
	}
	if err := onlyKeys("chunk_grid", grid.Config, "chunk_shape"); err != nil {
		return bad("%v", err)
	}
	chunks, err := parseShape3(grid.Config["chunk_shape"])
	if err != nil {
		return bad("chunk_grid chunk_shape %v", err)
	}
	m.Chunks = chunks
	if len(zj.ChunkKeyEncoding) == 0 {
		return bad("no chunk_key_encoding")
	}
	enc, err := parseNamed(zj.ChunkKeyEncoding)
	if err != nil {
		return bad("chunk_key_encoding %v", err)
	}
	if err := onlyKeys("chunk_key_encoding", enc.Config, "separator"); err != nil {
		return bad("%v", err)
	}
	switch enc.Name {
	case "default":
		m.Separator = "/"
	case "v2":
		m.Separator = "."
	default:
		return bad("chunk_key_encoding %q not supported (want default or v2)", enc.Name)
	}
	m.KeyEncoding = enc.Name
	if raw, ok := enc.Config["separator"]; ok {
		sep, _ := jsonString(raw)
		if sep != "/" && sep != "." {
			return bad("chunk_key_encoding separator %s (want \"/\" or \".\")", compactJSON(raw))
		}
		m.Separator = sep
	}
	if len(zj.Transformers) > 0 {
		return bad("storage_transformers not supported")
	}
	if zj.Codecs == nil {
		return bad("no codecs")
	}
	codecs, names, err := parseCodecs3(zj.Codecs, typ, chunks, true)
	if err != nil {
		return bad("%v", err)
	}
	m.codecs, m.Codecs = codecs, names
	if codecs.shard != nil {
		m.InnerChunks = codecs.shard.chunk
	} else if _, ok := mulLimit(chunks, maxChunkBytes/int64(typ.size)); !ok {
		return bad("chunks %v exceed %d bytes", chunks, maxChunkBytes)
	}
	m.FillValue, m.fillBits, err = parseFill3(zj.FillValue, typ)
	if err != nil {
		return bad("%v", err)
	}
	if s := strings.TrimSpace(string(zj.DimensionNames)); s != "" && s != "null" {
		var dn []*string
		if err := json.Unmarshal(zj.DimensionNames, &dn); err != nil || len(dn) != 3 {
			return bad("dimension_names %s: want 3 names or nulls", compactJSON(zj.DimensionNames))
		}
		m.DimensionNames = make([]string, 3)
		for i, p := range dn {
			if p != nil {
				m.DimensionNames[i] = *p
			}
		}
		// Names that are the axes z, y, x in another order say the array
		// is not stored (z, y, x): reading it as such would swap axes.
		lower := strings.ToLower(strings.Join(m.DimensionNames, ","))
		switch lower {
		case "z,x,y", "y,z,x", "y,x,z", "x,z,y", "x,y,z":
			return bad("dimension_names %q: sluice reads arrays stored as (z, y, x); this one is stored in another axis order", m.DimensionNames)
		}
	}
	if zj.Attributes != nil {
		raw, _ := json.Marshal(zj.Attributes)
		var a ZarrMeta
		if err := parseZattrs(name, raw, &a); err != nil {
			return Zarr3Meta{}, err
		}
		m.VoxelSize, m.TimeS, m.HasTime, m.Attrs = a.VoxelSize, a.TimeS, a.HasTime, a.Attrs
	}
	return m, nil
}

// Zarr3 is a 3-D Zarr v3 array in a local directory, read only. Its
// methods are safe for concurrent use.
type Zarr3 struct {
	dir  string
	meta Zarr3Meta
	// limit is the voxel limit of a read box.
	limit int64

	decOnce sync.Once
	dec     *zstd.Decoder
	decErr  error
}

// OpenZarr3 reads the metadata of the Zarr v3 array in directory dir.
func OpenZarr3(dir string) (*Zarr3, error) {
	name := filepath.Join(dir, zarr3Name)
	data, err := os.ReadFile(name)
	if err != nil {
		return nil, osErr(name, err)
	}
	m, err := parseZarr3(name, data)
	if err != nil {
		var fe *FileError
		if errors.As(err, &fe) && strings.HasPrefix(fe.Msg, "a Zarr v3 group") {
			if arrays := zarr3Children(dir); len(arrays) > 0 {
				fe.Msg += " (arrays here: " + strings.Join(arrays, ", ") + ")"
			}
		}
		return nil, err
	}
	return &Zarr3{dir: dir, meta: m, limit: DefaultMaxVoxels}, nil
}

// zarr3Children lists up to 4 child arrays of a group directory.
func zarr3Children(dir string) []string {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil
	}
	var out []string
	for _, e := range ents {
		if !e.IsDir() || len(out) == 4 {
			continue
		}
		b, err := os.ReadFile(filepath.Join(dir, e.Name(), zarr3Name))
		if err != nil {
			continue
		}
		var n struct {
			NodeType string `json:"node_type"`
		}
		if json.Unmarshal(b, &n) == nil && n.NodeType == "array" {
			out = append(out, filepath.Join(dir, e.Name()))
		}
	}
	return out
}

// Meta returns the array metadata.
func (z *Zarr3) Meta() Zarr3Meta { return z.meta }

func (z *Zarr3) bucketName() string { return z.dir }

func (z *Zarr3) whole() volume.Box {
	return volume.BoxOf(z.meta.Shape[0], z.meta.Shape[1], z.meta.Shape[2])
}

// chunkFile returns the file of chunk (or shard) idx of the chunk grid.
func (z *Zarr3) chunkFile(idx [3]int) string {
	s := z.meta.Separator
	k := strconv.Itoa(idx[0]) + s + strconv.Itoa(idx[1]) + s + strconv.Itoa(idx[2])
	if z.meta.KeyEncoding == "default" {
		k = "c" + s + k
	}
	return filepath.Join(z.dir, filepath.FromSlash(k))
}

func (z *Zarr3) decoder() (*zstd.Decoder, error) {
	z.decOnce.Do(func() {
		// Frames may declare windows of a few MiB even for small chunks;
		// the decoded size is checked afterwards.
		c := z.meta.Chunks
		if z.meta.InnerChunks[0] > 0 {
			c = z.meta.InnerChunks
		}
		n, _ := mulLimit(c, maxChunkBytes)
		z.dec, z.decErr = zstd.NewReader(nil, zstd.WithDecoderMaxMemory(uint64(max(2*n*int64(z.meta.typ.size)+1<<20, 8<<20))))
	})
	return z.dec, z.decErr
}

// decodeChunk turns the stored bytes of a chunk of shape shape into its
// elements in C order, in the byte order it returns.
func (z *Zarr3) decodeChunk(file string, data []byte, c *zarr3Codecs, shape [3]int) ([]byte, error) {
	want := shape[0] * shape[1] * shape[2] * z.meta.typ.size
	// Intermediate results of a chain of compressors have no declared
	// size; they are bounded generously.
	bound := 2*want + 1<<20
	for i := len(c.b2b) - 1; i >= 0; i-- {
		limit := bound
		if i == 0 {
			limit = want
		}
		var err error
		switch c.b2b[i] {
		case codecCRC32C:
			if len(data) < 4 {
				return nil, fileErr(file, ErrTruncated, "chunk of %d bytes has no room for its crc32c checksum", len(data))
			}
			n := len(data) - 4
			if got, sum := crc32.Checksum(data[:n], crc32cTable), binary.LittleEndian.Uint32(data[n:]); got != sum {
				return nil, fileErr(file, ErrFormat, "crc32c checksum mismatch (stored %08x, computed %08x): damaged chunk", sum, got)
			}
			data = data[:n]
		case codecGzip:
			var r *gzip.Reader
			if r, err = gzip.NewReader(bytes.NewReader(data)); err == nil {
				data, err = io.ReadAll(io.LimitReader(r, int64(limit)+1))
				r.Close()
			}
			if err != nil {
				return nil, fileErr(file, ErrFormat, "gzip chunk: %v", err)
			}
		case codecZstd:
			dec, err := z.decoder()
			if err != nil {
				return nil, fileErr(file, ErrFormat, "zstd: %v", err)
			}
			if data, err = dec.DecodeAll(data, make([]byte, 0, min(limit, 64<<20))); err != nil {
				return nil, fileErr(file, ErrFormat, "zstd chunk: %v", err)
			}
		case codecBlosc:
			dec, err := z.decoder()
			if err != nil {
				return nil, fileErr(file, ErrFormat, "zstd: %v", err)
			}
			n := want
			if i > 0 {
				if n, err = bloscSize(data); err == nil && n > limit {
					err = fmt.Errorf("declares %d bytes, more than %d", n, limit)
				}
			}
			if err == nil {
				data, err = bloscDecode(data, n, dec)
			}
			if err != nil {
				kind := ErrFormat
				if errors.Is(err, errBloscShort) {
					kind = ErrTruncated
				}
				return nil, fileErr(file, kind, "blosc chunk: %v", err)
			}
		}
		if len(data) > limit {
			return nil, fileErr(file, ErrFormat, "%s chunk decodes to more than %d bytes", b2bNames[c.b2b[i]], limit)
		}
	}
	if len(data) < want {
		return nil, fileErr(file, ErrTruncated, "truncated chunk: got %d of %d bytes", len(data), want)
	}
	if len(data) > want {
		return nil, fileErr(file, ErrFormat, "chunk holds more than %d bytes", want)
	}
	if c.order != nil {
		data = untranspose(data, shape, c.order, z.meta.typ.size)
	}
	return data, nil
}

// crc32cTable is CRC-32C (Castagnoli), the checksum of the crc32c codec.
var crc32cTable = crc32.MakeTable(crc32.Castagnoli)

// untranspose turns the elements of a transposed chunk (the encoded array,
// whose axis i is axis order[i] of the chunk, in C order) into the chunk's
// C order. shape is the decoded chunk's shape.
func untranspose(src []byte, shape [3]int, order []int, size int) []byte {
	var enc [3]int
	for i := 0; i < 3; i++ {
		enc[i] = shape[order[i]]
	}
	encStride := [3]int{enc[1] * enc[2], enc[2], 1}
	var st [3]int // stride in src of each decoded axis, in elements
	for i := 0; i < 3; i++ {
		st[order[i]] = encStride[i]
	}
	dst := make([]byte, len(src))
	o := 0
	for a := 0; a < shape[0]; a++ {
		for b := 0; b < shape[1]; b++ {
			p := a*st[0] + b*st[1]
			for c := 0; c < shape[2]; c++ {
				copy(dst[o:o+size], src[(p+c*st[2])*size:])
				o += size
			}
		}
	}
	return dst
}

// put copies the elements of the part ov of a chunk with box cb and (full)
// shape cs into out, converting them to out's type.
func (z *Zarr3) put(out volume.Any, raw []byte, order binary.ByteOrder, cb volume.Box, cs [3]int, ov volume.Box) {
	size := z.meta.typ.size
	n := (ov.Max[2] - ov.Min[2]) * size
	for zz := ov.Min[0]; zz < ov.Max[0]; zz++ {
		for y := ov.Min[1]; y < ov.Max[1]; y++ {
			src := raw[(((zz-cb.Min[0])*cs[1]+(y-cb.Min[1]))*cs[2]+(ov.Min[2]-cb.Min[2]))*size:][:n]
			off := pixOffset(out, zz, y, ov.Min[2])
			switch z.meta.DataType {
			case "uint8", "uint16", "float32":
				decodeAt(out, off, src, order)
			case "int8":
				p := out.(*volume.Volume[float32]).Pix[off:]
				for i, b := range src {
					p[i] = float32(int8(b))
				}
			case "int16":
				p := out.(*volume.Volume[float32]).Pix[off:]
				for i := 0; i < len(src); i += 2 {
					p[i/2] = float32(int16(order.Uint16(src[i:])))
				}
			case "float64":
				p := out.(*volume.Volume[float32]).Pix[off:]
				for i := 0; i < len(src); i += 8 {
					p[i/8] = float32(math.Float64frombits(order.Uint64(src[i:])))
				}
			}
		}
	}
}

// fill sets every voxel of out to the fill value.
func (z *Zarr3) fill(out volume.Any) {
	if z.meta.fillBits == 0 {
		return
	}
	switch t := out.(type) {
	case *volume.Volume[uint8]:
		for i := range t.Pix {
			t.Pix[i] = uint8(z.meta.fillBits)
		}
	case *volume.Volume[uint16]:
		for i := range t.Pix {
			t.Pix[i] = uint16(z.meta.fillBits)
		}
	case *volume.Volume[float32]:
		f := math.Float32frombits(z.meta.fillBits)
		for i := range t.Pix {
			t.Pix[i] = f
		}
	}
}

// shardIndex is the decoded index of one shard file.
type shardIndex struct {
	file    string
	missing bool     // no shard file: every inner chunk is the fill value
	entries []uint64 // (offset, nbytes) per inner chunk, C order
}

// emptyChunk marks an inner chunk that holds only the fill value.
const emptyChunk = math.MaxUint64

// parseShardIndex decodes a shard index of n inner chunks (its encoded
// bytes buf) and checks every entry against the shard's data bytes
// [lo, hi).
func parseShardIndex(file string, buf []byte, n int, order binary.ByteOrder, crc bool, lo, hi uint64) ([]uint64, error) {
	if crc {
		if len(buf) < 4 {
			return nil, fileErr(file, ErrTruncated, "shard index of %d bytes has no room for its crc32c checksum", len(buf))
		}
		k := len(buf) - 4
		if got, sum := crc32.Checksum(buf[:k], crc32cTable), binary.LittleEndian.Uint32(buf[k:]); got != sum {
			return nil, fileErr(file, ErrFormat, "shard index crc32c checksum mismatch (stored %08x, computed %08x): damaged shard", sum, got)
		}
		buf = buf[:k]
	}
	if len(buf) != 16*n {
		return nil, fileErr(file, ErrTruncated, "shard index of %d bytes, want %d", len(buf), 16*n)
	}
	e := make([]uint64, 2*n)
	for i := range e {
		e[i] = order.Uint64(buf[8*i:])
	}
	for i := 0; i < n; i++ {
		off, nb := e[2*i], e[2*i+1]
		if off == emptyChunk && nb == emptyChunk {
			continue
		}
		if off < lo || off > hi || nb > hi-off {
			return nil, fileErr(file, ErrFormat, "shard index entry %d (offset %d, %d bytes) outside the shard's data bytes %d..%d", i, off, nb, lo, hi)
		}
	}
	return e, nil
}

// readIndex reads and checks the index of the shard at grid position s.
func (z *Zarr3) readIndex(s [3]int) (*shardIndex, error) {
	sh := z.meta.codecs.shard
	file := z.chunkFile(s)
	f, err := os.Open(file)
	if errors.Is(err, fs.ErrNotExist) {
		return &shardIndex{file: file, missing: true}, nil
	}
	if err != nil {
		return nil, osErr(file, err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return nil, osErr(file, err)
	}
	size := fi.Size()
	nb := int64(sh.indexBytes())
	if size < nb {
		return nil, fileErr(file, ErrTruncated, "shard of %d bytes, shorter than its %d-byte index", size, nb)
	}
	pos, lo, hi := int64(0), uint64(nb), uint64(size)
	if sh.indexEnd {
		pos, lo, hi = size-nb, 0, uint64(size-nb)
	}
	buf := make([]byte, nb)
	if _, err := f.ReadAt(buf, pos); err != nil {
		return nil, osErr(file, err)
	}
	n := sh.per[0] * sh.per[1] * sh.per[2]
	e, err := parseShardIndex(file, buf, n, sh.indexOrder, sh.indexCRC, lo, hi)
	if err != nil {
		return nil, err
	}
	return &shardIndex{file: file, entries: e}, nil
}

// ReadBox assembles the voxels of box, clipped to the array, from the
// chunks it touches; of a sharded array only the inner chunks it touches
// are read (after the index of each shard). Missing chunks and shards and
// empty inner chunks read as the fill value: Zarr v3 writers leave out
// chunks that hold only the fill value (zarr-python 3 by default).
func (z *Zarr3) ReadBox(ctx context.Context, box volume.Box) (volume.Any, error) {
	in := box.Intersect(z.whole())
	if in.Empty() {
		return nil, fileErr(z.dir, ErrFormat, "box %v does not meet the array %v", box, z.whole())
	}
	if _, ok := mulLimit(in.Size(), z.limit); !ok {
		return nil, fileErr(z.dir, ErrTooLarge, "box %v exceeds the limit of %d voxels", in, z.limit)
	}
	c := z.meta.Chunks
	if z.meta.codecs.shard != nil {
		c = z.meta.codecs.shard.chunk
	}
	if n, ok := mulLimit(c, z.limit); !ok || n > z.limit {
		return nil, fileErr(z.dir, ErrTooLarge, "chunks %v exceed the limit of %d voxels", c, z.limit)
	}
	out := newVolume(z.meta.DType, in, z.meta.VoxelSize)
	z.fill(out)
	var lo, hi [3]int
	for i := 0; i < 3; i++ {
		lo[i] = in.Min[i] / c[i]
		hi[i] = (in.Max[i] - 1) / c[i]
	}
	boxOf := func(idx [3]int) volume.Box {
		var b volume.Box
		for i := 0; i < 3; i++ {
			b.Min[i] = idx[i] * c[i]
			b.Max[i] = min(b.Min[i]+c[i], z.meta.Shape[i])
		}
		return b
	}
	sh := z.meta.codecs.shard
	if sh == nil {
		err := forChunks(ctx, lo, hi, readWorkers, func(idx [3]int) error {
			file := z.chunkFile(idx)
			data, err := os.ReadFile(file)
			if errors.Is(err, fs.ErrNotExist) {
				return nil
			}
			if err != nil {
				return osErr(file, err)
			}
			raw, err := z.decodeChunk(file, data, &z.meta.codecs, c)
			if err != nil {
				return err
			}
			cb := boxOf(idx)
			z.put(out, raw, z.meta.codecs.endian, cb, c, cb.Intersect(in))
			return nil
		})
		if err != nil {
			return nil, err
		}
		return out, nil
	}
	// Sharded: inner chunks of the box, each shard's index read once.
	var mu sync.Mutex
	type entry struct {
		once sync.Once
		idx  *shardIndex
		err  error
	}
	indexes := map[[3]int]*entry{}
	index := func(s [3]int) (*shardIndex, error) {
		mu.Lock()
		e := indexes[s]
		if e == nil {
			e = &entry{}
			indexes[s] = e
		}
		mu.Unlock()
		e.once.Do(func() { e.idx, e.err = z.readIndex(s) })
		return e.idx, e.err
	}
	err := forChunks(ctx, lo, hi, readWorkers, func(g [3]int) error {
		var s, l [3]int
		for i := 0; i < 3; i++ {
			s[i], l[i] = g[i]/sh.per[i], g[i]%sh.per[i]
		}
		ix, err := index(s)
		if err != nil || ix.missing {
			return err
		}
		k := (l[0]*sh.per[1]+l[1])*sh.per[2] + l[2]
		off, nb := ix.entries[2*k], ix.entries[2*k+1]
		if off == emptyChunk && nb == emptyChunk {
			return nil
		}
		f, err := os.Open(ix.file)
		if err != nil {
			return osErr(ix.file, err)
		}
		data := make([]byte, nb)
		_, err = f.ReadAt(data, int64(off))
		f.Close()
		if err != nil {
			return fileErr(ix.file, ErrTruncated, "inner chunk %d: %v", k, err)
		}
		what := fmt.Sprintf("%s (inner chunk %d,%d,%d)", ix.file, l[0], l[1], l[2])
		raw, err := z.decodeChunk(what, data, &sh.inner, c)
		if err != nil {
			return err
		}
		cb := boxOf(g)
		z.put(out, raw, sh.inner.endian, cb, c, cb.Intersect(in))
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}
