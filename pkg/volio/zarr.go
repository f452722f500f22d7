package volio

import (
	"bytes"
	"compress/gzip"
	"compress/zlib"
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"sync"

	"github.com/klauspost/compress/zstd"

	"sluice/pkg/volume"
)

// maxChunkBytes bounds one decoded chunk (1 GiB), whatever the metadata says.
const maxChunkBytes = 1 << 30

// ZarrMeta is the metadata of a 3-D Zarr v2 array: the .zarray fields we
// support plus our attributes from .zattrs.
type ZarrMeta struct {
	Shape  [3]int // (nz, ny, nx)
	Chunks [3]int // chunk shape (cz, cy, cx)
	DType  volume.DType
	// BigEndian is set for arrays stored with a ">" dtype. CreateZarr always
	// writes little-endian ("<u2", "<f4"; "|u1").
	BigEndian bool
	// Compressor is "" (none, "compressor": null) or "zstd"; arrays
	// compressed with "zlib", "gzip" or "blosc" can be read but not created.
	Compressor string
	// Level is the compressor level (zstd 1..22; 0 means 3). Our encoder
	// (klauspost/compress) maps 1-2 to its fastest, 3-5 to its default,
	// 6-9 to its better and 10-22 to its best mode; on noisy 16-bit scans
	// the first two store chunks almost uncompressed (ratio 1.00 on
	// BenchmarkZarrZstd's volume, where level 9 gives 1.17).
	Level int
	// FillValue is the value of voxels in chunks that were never written.
	FillValue float64
	// Separator between chunk indices in keys: "/" (default on create) or ".".
	Separator string
	// VoxelSize in metres, stored in .zattrs as "voxel_size": "2.5um".
	VoxelSize float64
	// TimeS is stored in .zattrs as "time_s" when HasTime.
	TimeS   float64
	HasTime bool
	// Attrs are the other .zattrs entries.
	Attrs map[string]any
}

// Zarr is a 3-D Zarr v2 array in a Bucket. Its methods are safe for
// concurrent use.
type Zarr struct {
	b      Bucket
	prefix string
	meta   ZarrMeta
	order  binary.ByteOrder
	size   int // bytes per voxel
	chunkN int // voxels per (full) chunk
	fill   []byte
	limit  int64
	// requireChunks makes ReadBox fail on a missing chunk instead of
	// reading the fill value (input scans opened through OpenStream).
	requireChunks bool

	decOnce sync.Once
	dec     *zstd.Decoder
	decErr  error
	encOnce sync.Once
	enc     *zstd.Encoder
	encErr  error
	// rawChunks holds scratch raw chunks (*[]byte of chunkN·size bytes)
	// for encodeChunk, so a streaming writer does not allocate one per chunk.
	rawChunks sync.Pool
	// packedChunks holds buffers for encoded chunks (*[]byte), returned
	// after the bucket's Put (Buckets keep no reference to data).
	packedChunks sync.Pool
}

// readWorkers is the number of chunks ReadBox decodes at once.
const readWorkers = 4

// zarray is the JSON form of .zarray (Zarr storage specification v2).
type zarray struct {
	ZarrFormat         int             `json:"zarr_format"`
	Shape              []int64         `json:"shape"`
	Chunks             []int64         `json:"chunks"`
	DType              json.RawMessage `json:"dtype"`
	Compressor         json.RawMessage `json:"compressor"`
	FillValue          json.RawMessage `json:"fill_value"`
	Order              string          `json:"order"`
	Filters            json.RawMessage `json:"filters"`
	DimensionSeparator string          `json:"dimension_separator,omitempty"`
}

// parseZarray decodes .zarray; name is used in errors.
func parseZarray(name string, data []byte) (ZarrMeta, error) {
	var m ZarrMeta
	bad := func(format string, args ...any) (ZarrMeta, error) {
		return ZarrMeta{}, fileErr(name, ErrFormat, format, args...)
	}
	var za zarray
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.UseNumber()
	if err := dec.Decode(&za); err != nil {
		return bad("bad .zarray: %v", err)
	}
	if za.ZarrFormat != 2 {
		return bad("zarr_format %d, want 2", za.ZarrFormat)
	}
	if len(za.Shape) != 3 || len(za.Chunks) != 3 {
		return bad("shape %v and chunks %v must both have 3 dimensions", za.Shape, za.Chunks)
	}
	for i := 0; i < 3; i++ {
		if za.Shape[i] < 1 || za.Shape[i] > 1<<31 || za.Chunks[i] < 1 || za.Chunks[i] > 1<<31 {
			return bad("shape %v / chunks %v out of range", za.Shape, za.Chunks)
		}
		m.Shape[i], m.Chunks[i] = int(za.Shape[i]), int(za.Chunks[i])
	}
	var dt string
	if err := json.Unmarshal(za.DType, &dt); err != nil {
		return bad("dtype %s: want a simple dtype string", string(za.DType))
	}
	switch dt {
	case "|u1", "<u1", ">u1":
		m.DType = volume.Uint8
	case "<u2", ">u2":
		m.DType = volume.Uint16
	case "<f4", ">f4":
		m.DType = volume.Float32
	default:
		return bad("dtype %q, want |u1, <u2, >u2, <f4 or >f4", dt)
	}
	m.BigEndian = dt[0] == '>'
	if n, ok := mulLimit(m.Chunks, maxChunkBytes/int64(m.DType.Size())); !ok || n < 1 {
		return bad("chunks %v exceed %d bytes", m.Chunks, maxChunkBytes)
	}
	// A chunk longer than the array along an axis holds nothing but fill
	// there, and lets a few bytes of metadata demand a chunk buffer far
	// larger than the array; sluice never writes one (CreateZarr refuses it), so
	// it is read as swapped or wrong metadata.
	for i := 0; i < 3; i++ {
		if m.Chunks[i] > m.Shape[i] {
			return bad("chunks %v larger than shape %v along %s (want chunks no larger than the array)", za.Chunks, za.Shape, [3]string{"z", "y", "x"}[i])
		}
	}
	if c := strings.TrimSpace(string(za.Compressor)); c != "" && c != "null" {
		var comp struct {
			ID    string       `json:"id"`
			Level *json.Number `json:"level"`
		}
		if err := json.Unmarshal(za.Compressor, &comp); err != nil {
			return bad("compressor %s: %v", c, err)
		}
		switch comp.ID {
		case "zstd", "zlib", "gzip", "blosc":
			m.Compressor = comp.ID
		default:
			return bad("compressor %q not supported (want null, zstd, zlib, gzip or blosc)", comp.ID)
		}
		if comp.Level != nil && comp.ID != "blosc" {
			l, err := comp.Level.Int64()
			if err != nil || l < -1<<17 || l > 22 {
				return bad("compressor level %s", comp.Level.String())
			}
			m.Level = int(l)
		}
	}
	fv, err := parseFill(za.FillValue, m.DType)
	if err != nil {
		return bad("fill_value %s: %v", string(za.FillValue), err)
	}
	m.FillValue = fv
	if za.Order != "C" {
		return bad("order %q, want \"C\"", za.Order)
	}
	if f := strings.TrimSpace(string(za.Filters)); f != "" && f != "null" && f != "[]" {
		return bad("filters %s not supported (want null)", f)
	}
	switch za.DimensionSeparator {
	case "", ".":
		m.Separator = "."
	case "/":
		m.Separator = "/"
	default:
		return bad("dimension_separator %q, want \".\" or \"/\"", za.DimensionSeparator)
	}
	return m, nil
}

func parseFill(raw json.RawMessage, dt volume.DType) (float64, error) {
	s := strings.TrimSpace(string(raw))
	if s == "" || s == "null" {
		return 0, nil
	}
	var v float64
	if s[0] == '"' {
		var str string
		if err := json.Unmarshal(raw, &str); err != nil {
			return 0, err
		}
		switch str {
		case "NaN":
			v = math.NaN()
		case "Infinity":
			v = math.Inf(1)
		case "-Infinity":
			v = math.Inf(-1)
		default:
			return 0, fmt.Errorf("unknown special value")
		}
	} else {
		f, err := strconv.ParseFloat(s, 64)
		if err != nil {
			return 0, err
		}
		v = f
	}
	switch dt {
	case volume.Uint8, volume.Uint16:
		lim := float64(math.MaxUint8)
		if dt == volume.Uint16 {
			lim = math.MaxUint16
		}
		if v != math.Trunc(v) || v < 0 || v > lim {
			return 0, fmt.Errorf("not a %v", dt)
		}
	case volume.Float32:
		if !math.IsNaN(v) && !math.IsInf(v, 0) && math.Abs(v) > math.MaxFloat32 {
			return 0, fmt.Errorf("out of float32 range")
		}
	}
	return v, nil
}

// parseZattrs extracts our attributes from .zattrs into m.
func parseZattrs(name string, data []byte, m *ZarrMeta) error {
	var attrs map[string]any
	if err := json.Unmarshal(data, &attrs); err != nil {
		return fileErr(name, ErrFormat, "bad .zattrs: %v", err)
	}
	if v, ok := attrs["voxel_size"]; ok {
		s := fmt.Sprint(v)
		vs, err := volume.ParseLength(s)
		if err != nil {
			return fileErr(name, ErrFormat, "voxel_size %q (want e.g. \"2.5um\")", s)
		}
		m.VoxelSize = vs
		delete(attrs, "voxel_size")
	}
	if v, ok := attrs["time_s"]; ok {
		t, isNum := v.(float64)
		if !isNum {
			return fileErr(name, ErrFormat, "time_s %v is not a number", v)
		}
		m.TimeS, m.HasTime = t, true
		delete(attrs, "time_s")
	}
	if len(attrs) > 0 {
		m.Attrs = attrs
	}
	return nil
}

func (z *Zarr) key(name string) string {
	if z.prefix == "" {
		return name
	}
	return z.prefix + "/" + name
}

// where names a key in errors: the file path for a Dir, else the key.
func (z *Zarr) where(key string) string {
	if d, ok := z.b.(Dir); ok {
		return filepath.Join(string(d), filepath.FromSlash(key))
	}
	return key
}

func (z *Zarr) bucketName() string {
	if z.prefix == "" {
		return z.where(".")
	}
	return z.where(z.prefix)
}

// ChunkKey returns the store key of chunk idx = (iz, iy, ix).
func (z *Zarr) ChunkKey(idx [3]int) string {
	s := z.meta.Separator
	return z.key(strconv.Itoa(idx[0]) + s + strconv.Itoa(idx[1]) + s + strconv.Itoa(idx[2]))
}

// Meta returns the array metadata.
func (z *Zarr) Meta() ZarrMeta { return z.meta }

// Grid returns the number of chunks along z, y and x.
func (z *Zarr) Grid() [3]int {
	return volume.Tiling{Whole: volume.BoxOf(z.meta.Shape[0], z.meta.Shape[1], z.meta.Shape[2]), Tile: z.meta.Chunks}.Counts()
}

// ChunkBox returns the box of chunk idx clipped to the array.
func (z *Zarr) ChunkBox(idx [3]int) volume.Box {
	var b volume.Box
	for i := 0; i < 3; i++ {
		b.Min[i] = idx[i] * z.meta.Chunks[i]
		b.Max[i] = min(b.Min[i]+z.meta.Chunks[i], z.meta.Shape[i])
	}
	return b
}

func (z *Zarr) whole() volume.Box {
	return volume.BoxOf(z.meta.Shape[0], z.meta.Shape[1], z.meta.Shape[2])
}

// newZarr completes a Zarr from validated metadata.
func newZarr(b Bucket, prefix string, m ZarrMeta) *Zarr {
	z := &Zarr{b: b, prefix: strings.Trim(prefix, "/"), meta: m, order: binary.LittleEndian, size: m.DType.Size(), limit: DefaultMaxVoxels}
	if m.BigEndian {
		z.order = binary.BigEndian
	}
	z.chunkN = m.Chunks[0] * m.Chunks[1] * m.Chunks[2]
	z.fill = make([]byte, z.size)
	switch m.DType {
	case volume.Uint8:
		z.fill[0] = uint8(m.FillValue)
	case volume.Uint16:
		z.order.PutUint16(z.fill, uint16(m.FillValue))
	case volume.Float32:
		z.order.PutUint32(z.fill, math.Float32bits(float32(m.FillValue)))
	}
	return z
}

// OpenZarr reads the metadata of the array under prefix in b.
func OpenZarr(ctx context.Context, b Bucket, prefix string) (*Zarr, error) {
	z := &Zarr{b: b, prefix: strings.Trim(prefix, "/")}
	k := z.key(".zarray")
	data, err := b.Get(ctx, k)
	if err != nil {
		return nil, err
	}
	m, err := parseZarray(z.where(k), data)
	if err != nil {
		return nil, err
	}
	ka := z.key(".zattrs")
	if attrs, err := b.Get(ctx, ka); err == nil {
		if err := parseZattrs(z.where(ka), attrs, &m); err != nil {
			return nil, err
		}
	} else if !errors.Is(err, fs.ErrNotExist) {
		return nil, err
	}
	return newZarr(b, prefix, m), nil
}

// Reopen returns the same array on bucket b (for example a wrapper of the
// bucket z was opened on) without reading its metadata again: for a reader
// that opens an array whose metadata cannot change many times.
func (z *Zarr) Reopen(b Bucket) *Zarr {
	r := newZarr(b, z.prefix, z.meta)
	r.limit, r.requireChunks = z.limit, z.requireChunks
	return r
}

// CreateZarr writes .zarray and .zattrs for a new array under prefix in b
// and returns it. Zero Chunks default to 64 (clipped to Shape); an empty
// Separator defaults to "/"; only little-endian, "" or "zstd" compression
// are written.
func CreateZarr(ctx context.Context, b Bucket, prefix string, m ZarrMeta) (*Zarr, error) {
	name := strings.Trim(prefix, "/")
	if name == "" {
		name = "."
	}
	if d, ok := b.(Dir); ok {
		name = filepath.Join(string(d), filepath.FromSlash(name))
	}
	for i := 0; i < 3; i++ {
		if m.Chunks[i] == 0 {
			m.Chunks[i] = min(64, m.Shape[i])
		}
		if m.Shape[i] < 1 || m.Shape[i] > 1<<31 || m.Chunks[i] < 1 || m.Chunks[i] > 1<<31 {
			return nil, fileErr(name, ErrFormat, "shape %v / chunks %v out of range", m.Shape, m.Chunks)
		}
		if m.Chunks[i] > m.Shape[i] {
			return nil, fileErr(name, ErrFormat, "chunks %v larger than shape %v (want chunks no larger than the array)", m.Chunks, m.Shape)
		}
	}
	if m.DType.Size() == 0 {
		return nil, fileErr(name, ErrFormat, "unsupported dtype %v", m.DType)
	}
	if _, ok := mulLimit(m.Chunks, maxChunkBytes/int64(m.DType.Size())); !ok {
		return nil, fileErr(name, ErrFormat, "chunks %v exceed %d bytes", m.Chunks, maxChunkBytes)
	}
	if m.BigEndian {
		return nil, fileErr(name, ErrFormat, "CreateZarr writes little-endian arrays only")
	}
	if m.Separator == "" {
		m.Separator = "/"
	}
	if m.Separator != "/" && m.Separator != "." {
		return nil, fileErr(name, ErrFormat, "dimension separator %q", m.Separator)
	}
	var comp json.RawMessage = json.RawMessage("null")
	switch m.Compressor {
	case "":
	case "zstd":
		if m.Level == 0 {
			m.Level = 3
		}
		if m.Level < 1 || m.Level > 22 {
			return nil, fileErr(name, ErrFormat, "zstd level %d (want 1..22)", m.Level)
		}
		comp = json.RawMessage(fmt.Sprintf(`{"id":"zstd","level":%d}`, m.Level))
	default:
		return nil, fileErr(name, ErrFormat, "compressor %q not supported for writing (want \"\" or \"zstd\")", m.Compressor)
	}
	raw, _ := json.Marshal(m.FillValue)
	if math.IsNaN(m.FillValue) || math.IsInf(m.FillValue, 0) {
		special := map[bool]string{true: `"Infinity"`, false: `"-Infinity"`}[m.FillValue > 0]
		if math.IsNaN(m.FillValue) {
			special = `"NaN"`
		}
		raw = []byte(special)
	}
	if _, err := parseFill(raw, m.DType); err != nil {
		return nil, fileErr(name, ErrFormat, "fill value %v: %v", m.FillValue, err)
	}
	dt := map[volume.DType]string{volume.Uint8: "|u1", volume.Uint16: "<u2", volume.Float32: "<f4"}[m.DType]
	dtRaw, _ := json.Marshal(dt)
	za := zarray{
		ZarrFormat:         2,
		Shape:              []int64{int64(m.Shape[0]), int64(m.Shape[1]), int64(m.Shape[2])},
		Chunks:             []int64{int64(m.Chunks[0]), int64(m.Chunks[1]), int64(m.Chunks[2])},
		DType:              dtRaw,
		Compressor:         comp,
		FillValue:          raw,
		Order:              "C",
		Filters:            json.RawMessage("null"),
		DimensionSeparator: m.Separator,
	}
	zdata, err := json.MarshalIndent(za, "", "    ")
	if err != nil {
		return nil, fileErr(name, ErrFormat, "%v", err)
	}
	attrs := map[string]any{}
	for k, v := range m.Attrs {
		attrs[k] = v
	}
	if m.VoxelSize > 0 {
		attrs["voxel_size"] = volume.FormatLength(m.VoxelSize)
	}
	if m.HasTime {
		attrs["time_s"] = m.TimeS
	}
	adata, err := json.MarshalIndent(attrs, "", "    ")
	if err != nil {
		return nil, fileErr(name, ErrFormat, "attributes: %v", err)
	}
	z := newZarr(b, prefix, m)
	if err := b.Put(ctx, z.key(".zarray"), append(zdata, '\n')); err != nil {
		return nil, err
	}
	if err := b.Put(ctx, z.key(".zattrs"), append(adata, '\n')); err != nil {
		return nil, err
	}
	return z, nil
}

func (z *Zarr) decoder() (*zstd.Decoder, error) {
	z.decOnce.Do(func() {
		// The limit also caps the window a frame may ask for; zstd windows
		// are at least 1 KiB and encoders may pick a few MiB even for small
		// inputs, so the cap is the chunk size but never below 8 MiB.
		// decodeChunk checks the exact size afterwards.
		z.dec, z.decErr = zstd.NewReader(nil, zstd.WithDecoderMaxMemory(uint64(max(z.chunkN*z.size, 8<<20))))
	})
	return z.dec, z.decErr
}

func (z *Zarr) encoder() (*zstd.Encoder, error) {
	z.encOnce.Do(func() {
		// Single-segment frames always carry the content size, which
		// numcodecs' Zstd.decode needs to size its output buffer.
		z.enc, z.encErr = zstd.NewWriter(nil, zstd.WithEncoderLevel(zstd.EncoderLevelFromZstd(z.meta.Level)), zstd.WithSingleSegment(true))
	})
	return z.enc, z.encErr
}

// decodeChunk turns stored chunk bytes into exactly chunkN*size raw bytes.
func (z *Zarr) decodeChunk(key string, data []byte) ([]byte, error) {
	want := z.chunkN * z.size
	var out []byte
	switch z.meta.Compressor {
	case "":
		out = data
	case "zstd":
		dec, err := z.decoder()
		if err != nil {
			return nil, fileErr(z.where(key), ErrFormat, "zstd: %v", err)
		}
		out, err = dec.DecodeAll(data, make([]byte, 0, want))
		if err != nil {
			return nil, fileErr(z.where(key), ErrFormat, "zstd chunk: %v", err)
		}
	case "blosc":
		// The Blosc header names its own inner codec, shuffle and typesize;
		// the .zarray's cname/clevel/shuffle only say how it was written.
		dec, err := z.decoder()
		if err != nil {
			return nil, fileErr(z.where(key), ErrFormat, "zstd: %v", err)
		}
		out, err = bloscDecode(data, want, dec)
		if err != nil {
			kind := ErrFormat
			if errors.Is(err, errBloscShort) {
				kind = ErrTruncated
			}
			return nil, fileErr(z.where(key), kind, "blosc chunk: %v", err)
		}
	case "zlib", "gzip":
		var r io.ReadCloser
		var err error
		if z.meta.Compressor == "zlib" {
			r, err = zlib.NewReader(bytes.NewReader(data))
		} else {
			r, err = gzip.NewReader(bytes.NewReader(data))
		}
		if err != nil {
			return nil, fileErr(z.where(key), ErrFormat, "%s chunk: %v", z.meta.Compressor, err)
		}
		out, err = io.ReadAll(io.LimitReader(r, int64(want)+1))
		r.Close()
		if err != nil {
			return nil, fileErr(z.where(key), ErrFormat, "%s chunk: %v", z.meta.Compressor, err)
		}
	}
	if len(out) < want {
		return nil, fileErr(z.where(key), ErrTruncated, "truncated chunk: got %d of %d bytes", len(out), want)
	}
	if len(out) > want {
		return nil, fileErr(z.where(key), ErrFormat, "chunk holds more than %d bytes", want)
	}
	return out, nil
}

// forChunks runs f on every chunk index in [lo, hi] (inclusive) with
// `workers` goroutines, returning the first error.
func forChunks(ctx context.Context, lo, hi [3]int, workers int, f func(idx [3]int) error) error {
	var idxs [][3]int
	for a := lo[0]; a <= hi[0]; a++ {
		for b := lo[1]; b <= hi[1]; b++ {
			for c := lo[2]; c <= hi[2]; c++ {
				idxs = append(idxs, [3]int{a, b, c})
			}
		}
	}
	var (
		mu    sync.Mutex
		next  int
		first error
		wg    sync.WaitGroup
	)
	for w := 0; w < min(workers, len(idxs)); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				mu.Lock()
				if first != nil || next >= len(idxs) {
					mu.Unlock()
					return
				}
				i := next
				next++
				mu.Unlock()
				err := ctx.Err()
				if err == nil {
					err = f(idxs[i])
				}
				if err != nil {
					mu.Lock()
					if first == nil {
						first = err
					}
					mu.Unlock()
					return
				}
			}
		}()
	}
	wg.Wait()
	return first
}

// ReadBox assembles the voxels of box, clipped to the array, from the chunks
// it touches. Chunks that were never written read as the fill value. The
// result's Box is box ∩ [0, shape) in global coordinates.
func (z *Zarr) ReadBox(ctx context.Context, box volume.Box) (volume.Any, error) {
	in := box.Intersect(z.whole())
	if in.Empty() {
		return nil, fileErr(z.bucketName(), ErrFormat, "box %v does not meet the array %v", box, z.whole())
	}
	if _, ok := mulLimit(in.Size(), z.limit); !ok {
		return nil, fileErr(z.bucketName(), ErrTooLarge, "box %v exceeds the limit of %d voxels", in, z.limit)
	}
	if int64(z.chunkN) > z.limit {
		return nil, fileErr(z.bucketName(), ErrTooLarge, "chunks %v exceed the limit of %d voxels", z.meta.Chunks, z.limit)
	}
	out := newVolume(z.meta.DType, in, z.meta.VoxelSize)
	if z.meta.FillValue != 0 {
		fillVolume(out, z.meta.FillValue)
	}
	var lo, hi [3]int
	for i := 0; i < 3; i++ {
		lo[i] = in.Min[i] / z.meta.Chunks[i]
		hi[i] = (in.Max[i] - 1) / z.meta.Chunks[i]
	}
	c := z.meta.Chunks
	err := forChunks(ctx, lo, hi, readWorkers, func(idx [3]int) error {
		key := z.ChunkKey(idx)
		data, err := z.b.Get(ctx, key)
		if errors.Is(err, fs.ErrNotExist) {
			if z.requireChunks {
				return fileErr(z.where(key), ErrTruncated, "missing chunk %d.%d.%d of a %d×%d×%d grid (every chunk of a scan must be present)",
					idx[0], idx[1], idx[2], z.Grid()[0], z.Grid()[1], z.Grid()[2])
			}
			return nil
		}
		if err != nil {
			return err
		}
		raw, err := z.decodeChunk(key, data)
		if err != nil {
			return err
		}
		cb := z.ChunkBox(idx)
		ov := cb.Intersect(in)
		n := (ov.Max[2] - ov.Min[2]) * z.size
		for zz := ov.Min[0]; zz < ov.Max[0]; zz++ {
			for y := ov.Min[1]; y < ov.Max[1]; y++ {
				src := (((zz-cb.Min[0])*c[1]+(y-cb.Min[1]))*c[2] + (ov.Min[2] - cb.Min[2])) * z.size
				decodeAt(out, pixOffset(out, zz, y, ov.Min[2]), raw[src:src+n], z.order)
			}
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

func fillVolume(v volume.Any, f float64) {
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		for i := range t.Pix {
			t.Pix[i] = uint8(f)
		}
	case *volume.Volume[uint16]:
		for i := range t.Pix {
			t.Pix[i] = uint16(f)
		}
	case *volume.Volume[float32]:
		for i := range t.Pix {
			t.Pix[i] = float32(f)
		}
	}
}

// encodeChunk builds the stored bytes of chunk idx from the part of v inside
// it; the rest of the (always full-size) chunk holds the fill value.
func (z *Zarr) encodeChunk(v volume.Any, idx [3]int) ([]byte, error) {
	compressed := z.meta.Compressor != ""
	var raw []byte
	if compressed {
		// The raw chunk is scratch for the encoder: reuse it.
		if p, ok := z.rawChunks.Get().(*[]byte); ok {
			raw = *p
		} else {
			raw = make([]byte, z.chunkN*z.size)
		}
		defer z.rawChunks.Put(&raw)
	} else {
		raw = make([]byte, z.chunkN*z.size)
	}
	cb := z.ChunkBox(idx)
	ov := cb.Intersect(v.Bounds())
	if ov != cb || cb.Size() != z.meta.Chunks {
		// Some bytes stay at the fill value.
		if compressed {
			clear(raw)
		}
		if !allZero(z.fill) {
			for i := 0; i < len(raw); i += z.size {
				copy(raw[i:], z.fill)
			}
		}
	}
	c := z.meta.Chunks
	if !ov.Empty() {
		n := (ov.Max[2] - ov.Min[2]) * z.size
		for zz := ov.Min[0]; zz < ov.Max[0]; zz++ {
			for y := ov.Min[1]; y < ov.Max[1]; y++ {
				dst := (((zz-cb.Min[0])*c[1]+(y-cb.Min[1]))*c[2] + (ov.Min[2] - cb.Min[2])) * z.size
				encodeAt(raw[dst:dst+n], v, pixOffset(v, zz, y, ov.Min[2]), z.order)
			}
		}
	}
	if z.meta.Compressor == "zstd" {
		enc, err := z.encoder()
		if err != nil {
			return nil, fileErr(z.where(z.ChunkKey(idx)), ErrFormat, "zstd: %v", err)
		}
		// Room for incompressible input (zstd raw blocks: 3 bytes per
		// 128 KiB block plus the frame header), so the output never grows.
		var dst []byte
		if p, ok := z.packedChunks.Get().(*[]byte); ok {
			dst = (*p)[:0]
		} else {
			dst = make([]byte, 0, len(raw)+len(raw)/1024+64)
		}
		return enc.EncodeAll(raw, dst), nil
	}
	if z.meta.Compressor != "" {
		return nil, fileErr(z.where(z.ChunkKey(idx)), ErrFormat, "writing %s chunks is not supported", z.meta.Compressor)
	}
	return raw, nil
}

// writeBudget bounds the chunk buffers of concurrent chunk writers.
const writeBudget = 64 << 20

// writers is the number of chunks WriteBox encodes at once: each holds a raw
// chunk and its encoded copy (2 · chunk bytes), so as many as CPUs (at most
// 4) while their buffers fit in writeBudget, and at least one. For 256³
// uint16 chunks (32 MiB) that is one writer: ingest of a 1000³ step then
// holds one 128 MiB band plus 64 MiB of chunk buffers.
func (z *Zarr) writers() int {
	return max(1, min(readWorkers, runtime.GOMAXPROCS(0), writeBudget/max(2*z.chunkN*z.size, 1)))
}

// recycle keeps an encoded chunk's buffer for the next encodeChunk.
func (z *Zarr) recycle(data []byte) {
	if z.meta.Compressor != "" {
		z.packedChunks.Put(&data)
	}
}

func allZero(b []byte) bool {
	for _, c := range b {
		if c != 0 {
			return false
		}
	}
	return true
}

func (z *Zarr) checkWrite(v volume.Any) error {
	if err := checkVolume(v); err != nil {
		return fileErr(z.bucketName(), ErrFormat, "%v", err)
	}
	if v.DType() != z.meta.DType {
		return fileErr(z.bucketName(), ErrFormat, "writing %v voxels into a %v array", v.DType(), z.meta.DType)
	}
	return nil
}

// WriteChunk stores chunk idx. v must cover the chunk's box, either clipped
// to the array (ChunkBox) or the full chunk shape at the array's edge.
func (z *Zarr) WriteChunk(ctx context.Context, idx [3]int, v volume.Any) error {
	if err := z.checkWrite(v); err != nil {
		return err
	}
	g := z.Grid()
	for i := 0; i < 3; i++ {
		if idx[i] < 0 || idx[i] >= g[i] {
			return fileErr(z.bucketName(), ErrFormat, "chunk %v outside the grid %v", idx, g)
		}
	}
	cb := z.ChunkBox(idx)
	full := volume.Box{Min: cb.Min, Max: [3]int{cb.Min[0] + z.meta.Chunks[0], cb.Min[1] + z.meta.Chunks[1], cb.Min[2] + z.meta.Chunks[2]}}
	if b := v.Bounds(); b != cb && b != full {
		return fileErr(z.bucketName(), ErrFormat, "volume %v is not chunk %v %v", b, idx, cb)
	}
	data, err := z.encodeChunk(v, idx)
	if err != nil {
		return err
	}
	return z.b.Put(ctx, z.ChunkKey(idx), data)
}

// WriteBox stores every chunk inside v.Bounds(), which must be
// chunk-aligned: each Min a multiple of the chunk shape, each Max a multiple
// or the array's edge.
func (z *Zarr) WriteBox(ctx context.Context, v volume.Any) error {
	if err := z.checkWrite(v); err != nil {
		return err
	}
	b := v.Bounds()
	if !z.whole().ContainsBox(b) {
		return fileErr(z.bucketName(), ErrFormat, "box %v outside the array %v", b, z.whole())
	}
	var lo, hi [3]int
	for i := 0; i < 3; i++ {
		c := z.meta.Chunks[i]
		if b.Min[i]%c != 0 || (b.Max[i]%c != 0 && b.Max[i] != z.meta.Shape[i]) {
			return fileErr(z.bucketName(), ErrFormat, "box %v is not aligned to chunks %v", b, z.meta.Chunks)
		}
		lo[i] = b.Min[i] / c
		hi[i] = (b.Max[i] - 1) / c
	}
	return forChunks(ctx, lo, hi, z.writers(), func(idx [3]int) error {
		data, err := z.encodeChunk(v, idx)
		if err != nil {
			return err
		}
		err = z.b.Put(ctx, z.ChunkKey(idx), data)
		z.recycle(data)
		return err
	})
}
