package volio

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"encoding/json"
	"errors"
	"io"
	"io/fs"
	"os"
	"path/filepath"

	"sluice/pkg/volume"
)

// headerSuffix is appended to a raw file's name to name its header.
const headerSuffix = ".sluice.json"

// maxHeaderFile bounds the size of a JSON header we are willing to read.
const maxHeaderFile = 1 << 20

// RawHeader is the JSON header stored next to a raw volume as
// <file>.sluice.json (see the package documentation).
type RawHeader struct {
	Shape       []int    `json:"shape"`                  // [nz, ny, nx]
	DType       string   `json:"dtype"`                  // uint8, uint16, float32
	ByteOrder   string   `json:"byte_order,omitempty"`   // little (default) or big
	VoxelSize   string   `json:"voxel_size,omitempty"`   // length with unit, e.g. "2.5um"
	TimeS       *float64 `json:"time_s,omitempty"`       // acquisition time, seconds
	HeaderBytes int64    `json:"header_bytes,omitempty"` // bytes before the first voxel
}

// rawLayout is where and how the voxels of a raw file are stored.
type rawLayout struct {
	order  binary.ByteOrder
	offset int64
}

// parseRawHeader decodes a JSON raw header and merges it with opt.
// name is used in error messages only.
func parseRawHeader(name string, data []byte, opt Options) (Header, rawLayout, error) {
	var rh RawHeader
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&rh); err != nil {
		return Header{}, rawLayout{}, fileErr(name, ErrFormat, "bad raw header: %v", err)
	}
	if dec.More() {
		return Header{}, rawLayout{}, fileErr(name, ErrFormat, "bad raw header: trailing data after the JSON object")
	}
	bad := func(format string, args ...any) (Header, rawLayout, error) {
		return Header{}, rawLayout{}, fileErr(name, ErrFormat, "bad raw header: "+format, args...)
	}
	h := Header{Format: "raw"}
	if len(rh.Shape) != 3 {
		return bad("shape has %d dimensions, want 3 (nz, ny, nx)", len(rh.Shape))
	}
	for i, d := range rh.Shape {
		if d < 1 {
			return bad("shape %v has a dimension < 1", rh.Shape)
		}
		h.Shape[i] = d
	}
	dt, err := volume.ParseDType(rh.DType)
	if err != nil {
		return bad("dtype %q (want uint8, uint16 or float32)", rh.DType)
	}
	h.DType = dt
	order, err := parseOrder(rh.ByteOrder)
	if err != nil {
		return bad("%v", err)
	}
	if rh.VoxelSize != "" {
		vs, err := volume.ParseLength(rh.VoxelSize)
		if err != nil {
			return bad("voxel_size %q (want e.g. \"2.5um\")", rh.VoxelSize)
		}
		h.VoxelSize = vs
	} else {
		h.VoxelSize = opt.VoxelSize
	}
	if rh.TimeS != nil {
		h.TimeS, h.HasTime = *rh.TimeS, true
	}
	if rh.HeaderBytes < 0 {
		return bad("header_bytes %d < 0", rh.HeaderBytes)
	}
	// Options that were given must agree with the header.
	if opt.Shape != ([3]int{}) && opt.Shape != h.Shape {
		return bad("shape %v disagrees with the requested %v", h.Shape, opt.Shape)
	}
	if opt.DType != 0 && opt.DType != h.DType {
		return bad("dtype %v disagrees with the requested %v", h.DType, opt.DType)
	}
	if opt.ByteOrder != "" {
		if o, err := parseOrder(opt.ByteOrder); err != nil || o != order {
			return bad("byte order %s disagrees with the requested %q", orderName(order), opt.ByteOrder)
		}
	}
	if opt.HeaderBytes != 0 && opt.HeaderBytes != rh.HeaderBytes {
		return bad("header_bytes %d disagrees with the requested %d", rh.HeaderBytes, opt.HeaderBytes)
	}
	return h, rawLayout{order: order, offset: rh.HeaderBytes}, nil
}

// rawFromOptions builds a header from options alone.
func rawFromOptions(name string, opt Options) (Header, rawLayout, error) {
	if opt.Shape == ([3]int{}) || opt.DType == 0 {
		return Header{}, rawLayout{}, fileErr(name, ErrFormat, "raw volume without %s and without shape and dtype options", filepath.Base(name)+headerSuffix)
	}
	for _, d := range opt.Shape {
		if d < 1 {
			return Header{}, rawLayout{}, fileErr(name, ErrFormat, "shape %v has a dimension < 1", opt.Shape)
		}
	}
	if opt.DType.Size() == 0 {
		return Header{}, rawLayout{}, fileErr(name, ErrFormat, "unsupported dtype %v", opt.DType)
	}
	order, err := parseOrder(opt.ByteOrder)
	if err != nil {
		return Header{}, rawLayout{}, fileErr(name, ErrFormat, "%v", err)
	}
	if opt.HeaderBytes < 0 {
		return Header{}, rawLayout{}, fileErr(name, ErrFormat, "header bytes %d < 0", opt.HeaderBytes)
	}
	return Header{Format: "raw", Shape: opt.Shape, DType: opt.DType, VoxelSize: opt.VoxelSize},
		rawLayout{order: order, offset: opt.HeaderBytes}, nil
}

// checkRawSize validates shape × dtype against the limit and the file size.
func checkRawSize(name string, h Header, l rawLayout, size int64, limit int64) error {
	n, ok := mulLimit(h.Shape, limit)
	if !ok {
		return fileErr(name, ErrTooLarge, "raw volume of %d×%d×%d voxels exceeds the limit of %d", h.Shape[0], h.Shape[1], h.Shape[2], limit)
	}
	want := n * int64(h.DType.Size())
	got := size - l.offset
	switch {
	case got < want:
		return fileErr(name, ErrTruncated, "truncated raw volume: got %d of %d bytes", max(got, 0), want)
	case got > want:
		return fileErr(name, ErrFormat, "raw volume size mismatch: %d bytes after the header, shape %v × %v needs %d", got, h.Shape, h.DType, want)
	}
	return nil
}

type rawStream struct {
	name  string
	f     *os.File
	h     Header
	l     rawLayout
	limit int64
}

func openRaw(name string, opt Options) (Stream, error) {
	var h Header
	var l rawLayout
	data, err := readSmall(name + headerSuffix)
	switch {
	case err == nil:
		h, l, err = parseRawHeader(name+headerSuffix, data, opt)
	case errors.Is(err, fs.ErrNotExist):
		h, l, err = rawFromOptions(name, opt)
	}
	if err != nil {
		return nil, err
	}
	f, err := os.Open(name)
	if err != nil {
		return nil, osErr(name, err)
	}
	fi, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, osErr(name, err)
	}
	if err := checkRawSize(name, h, l, fi.Size(), opt.limit()); err != nil {
		f.Close()
		return nil, err
	}
	return &rawStream{name: name, f: f, h: h, l: l, limit: opt.limit()}, nil
}

// readSmall reads a small metadata file, refusing anything over maxHeaderFile.
func readSmall(name string) ([]byte, error) {
	f, err := os.Open(name)
	if err != nil {
		return nil, osErr(name, err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, maxHeaderFile+1))
	if err != nil {
		return nil, osErr(name, err)
	}
	if len(data) > maxHeaderFile {
		return nil, fileErr(name, ErrFormat, "header file larger than %d bytes", maxHeaderFile)
	}
	return data, nil
}

func (s *rawStream) Header() Header { return s.h }
func (s *rawStream) Close() error   { return s.f.Close() }

func (s *rawStream) ReadSlab(z0, z1 int) (volume.Any, error) {
	sh := s.h.Shape
	if z0 < 0 || z1 > sh[0] || z0 >= z1 {
		return nil, fileErr(s.name, ErrFormat, "slab %d:%d outside 0:%d", z0, z1, sh[0])
	}
	return s.ReadBand(z0, z1, 0, sh[1])
}

// ReadBand returns slices z0 <= z < z1, rows y0 <= y < y1, every x: one
// contiguous file read per slice. Voxels in the machine's byte order are
// read straight into the volume; others pass through a 4 MiB buffer.
func (s *rawStream) ReadBand(z0, z1, y0, y1 int) (volume.Any, error) {
	return s.ReadBandInto(nil, z0, z1, y0, y1)
}

// ReadBandInto is ReadBand reusing dst's voxels when dst has the band's
// dtype and size (every voxel is overwritten).
func (s *rawStream) ReadBandInto(dst volume.Any, z0, z1, y0, y1 int) (volume.Any, error) {
	sh := s.h.Shape
	if z0 < 0 || z1 > sh[0] || z0 >= z1 || y0 < 0 || y1 > sh[1] || y0 >= y1 {
		return nil, fileErr(s.name, ErrFormat, "band %d:%d × %d:%d outside 0:%d × 0:%d", z0, z1, y0, y1, sh[0], sh[1])
	}
	if _, ok := mulLimit([3]int{z1 - z0, y1 - y0, sh[2]}, s.limit); !ok {
		return nil, fileErr(s.name, ErrTooLarge, "slab %d:%d of %d×%d voxels per slice exceeds the limit of %d", z0, z1, y1-y0, sh[2], s.limit)
	}
	v := reuseVolume(dst, s.h.DType, volume.Box{Min: [3]int{z0, y0, 0}, Max: [3]int{z1, y1, sh[2]}}, s.h.VoxelSize)
	size := s.h.DType.Size()
	plane := int64(y1-y0) * int64(sh[2]) * int64(size) // bytes of one slice of the band
	whole := int64(sh[0]) * int64(sh[1]) * int64(sh[2]) * int64(size)
	direct := native(s.l.order) || size == 1
	var all, buf []byte
	if direct {
		all = volumeBytes(v)
	} else {
		buf = make([]byte, min(plane, 4<<20))
	}
	for z := z0; z < z1; z++ {
		start := s.l.offset + (int64(z)*int64(sh[1])+int64(y0))*int64(sh[2])*int64(size)
		out := int64(z-z0) * plane // byte offset of this slice in the band
		for done := int64(0); done < plane; {
			dst := buf
			n := min(plane-done, int64(len(buf)))
			if direct {
				dst, n = all[out+done:out+plane], plane-done
			}
			got, err := s.f.ReadAt(dst[:n], start+done)
			if int64(got) < n {
				if err == nil || err == io.EOF {
					return nil, fileErr(s.name, ErrTruncated, "truncated raw volume: got %d of %d bytes", start+done+int64(got)-s.l.offset, whole)
				}
				return nil, osErr(s.name, err)
			}
			if !direct {
				decodeAt(v, int(out+done)/size, dst[:n], s.l.order)
			}
			done += n
		}
	}
	return v, nil
}

// WriteOptions control the writers.
type WriteOptions struct {
	// ByteOrder of raw voxels: "little" (default) or "big".
	ByteOrder string
	// TimeS is the acquisition time recorded in the header, if HasTime.
	TimeS   float64
	HasTime bool
}

// WriteRaw writes v to path as raw voxels in C order (z slowest, x fastest)
// and its header to path + ".sluice.json". Both files are written through a
// temporary file and a rename. The voxel size written is v.EdgeLength().
func WriteRaw(path string, v volume.Any, o WriteOptions) error {
	if err := checkVolume(v); err != nil {
		return fileErr(path, ErrFormat, "%v", err)
	}
	order, err := parseOrder(o.ByteOrder)
	if err != nil {
		return fileErr(path, ErrFormat, "%v", err)
	}
	s := v.Bounds().Size()
	rh := RawHeader{Shape: []int{s[0], s[1], s[2]}, DType: v.DType().String(), ByteOrder: orderName(order)}
	if vs := v.EdgeLength(); vs > 0 {
		rh.VoxelSize = volume.FormatLength(vs)
	}
	if o.HasTime {
		t := o.TimeS
		rh.TimeS = &t
	}
	hdr, err := json.MarshalIndent(rh, "", "  ")
	if err != nil {
		return fileErr(path, ErrFormat, "%v", err)
	}
	hdr = append(hdr, '\n')

	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, ".tmp-"+filepath.Base(path)+"-*")
	if err != nil {
		return osErr(path, err)
	}
	tmp := f.Name()
	fail := func(err error) error {
		f.Close()
		os.Remove(tmp)
		return osErr(path, err)
	}
	w := bufio.NewWriterSize(f, 1<<20)
	size := v.DType().Size()
	n := v.Bounds().Voxels()
	buf := make([]byte, min(n, 1<<20)*size)
	for off := 0; off < n; {
		k := min(n-off, len(buf)/size)
		encodeAt(buf[:k*size], v, off, order)
		if _, err := w.Write(buf[:k*size]); err != nil {
			return fail(err)
		}
		off += k
	}
	if err := w.Flush(); err != nil {
		return fail(err)
	}
	if err := f.Close(); err != nil {
		os.Remove(tmp)
		return osErr(path, err)
	}
	if err := os.Chmod(tmp, 0o644); err != nil {
		os.Remove(tmp)
		return osErr(path, err)
	}
	if err := os.Rename(tmp, path); err != nil {
		os.Remove(tmp)
		return osErr(path, err)
	}
	return writeFileAtomic(path+headerSuffix, hdr)
}
