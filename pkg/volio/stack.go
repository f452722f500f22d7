package volio

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"

	"sluice/pkg/volume"
)

// stackHeaderName is the optional JSON file inside a TIFF stack directory
// that carries what TIFF tags do not: voxel size and acquisition time.
const stackHeaderName = "stack.sluice.json"

// StackHeader is the content of stack.sluice.json. Shape and DType, when
// present, must agree with the slices.
type StackHeader struct {
	Shape     []int    `json:"shape,omitempty"`
	DType     string   `json:"dtype,omitempty"`
	VoxelSize string   `json:"voxel_size,omitempty"`
	TimeS     *float64 `json:"time_s,omitempty"`
}

func isTIFFName(name string) bool {
	ext := strings.ToLower(filepath.Ext(name))
	return ext == ".tif" || ext == ".tiff"
}

// naturalLess orders file names so that the digit runs compare as numbers:
// "z2.tif" < "z10.tif". Ties (e.g. "z01" and "z1") fall back to byte order.
func naturalLess(a, b string) bool {
	i, j := 0, 0
	for i < len(a) && j < len(b) {
		da, db := isDigit(a[i]), isDigit(b[j])
		if da && db {
			si, sj := i, j
			for i < len(a) && isDigit(a[i]) {
				i++
			}
			for j < len(b) && isDigit(b[j]) {
				j++
			}
			na := strings.TrimLeft(a[si:i], "0")
			nb := strings.TrimLeft(b[sj:j], "0")
			if len(na) != len(nb) {
				return len(na) < len(nb)
			}
			if na != nb {
				return na < nb
			}
			continue
		}
		if a[i] != b[j] {
			return a[i] < b[j]
		}
		i++
		j++
	}
	if len(a)-i != len(b)-j {
		return len(a)-i < len(b)-j
	}
	return a < b
}

func isDigit(c byte) bool { return '0' <= c && c <= '9' }

// sortNatural sorts names in natural order.
func sortNatural(names []string) {
	slices.SortFunc(names, func(a, b string) int {
		switch {
		case naturalLess(a, b):
			return -1
		case naturalLess(b, a):
			return 1
		}
		return 0
	})
}

// stackStream reads a directory of single-page TIFF slices (files[z]) or
// one multi-page TIFF file (files[0], page z at IFD offset pages[z]).
type stackStream struct {
	dir   string
	files []string
	pages []int64 // IFD offsets of a multi-page file; nil for a directory
	h     Header
	info  tiffInfo
	limit int64
}

// openStack opens a directory of 2-D TIFF slices, one per z, ordered by the
// numbers in their names.
func openStack(dir string, opt Options) (Stream, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, osErr(dir, err)
	}
	var names []string
	for _, e := range ents {
		n := e.Name()
		if !e.IsDir() && isTIFFName(n) && !strings.HasPrefix(n, ".") {
			names = append(names, n)
		}
	}
	if len(names) == 0 {
		return nil, fileErr(dir, ErrFormat, "no .zarray and no .tif/.tiff slices in the directory")
	}
	sortNatural(names)
	if err := checkNumbering(dir, names); err != nil {
		return nil, err
	}
	files := make([]string, len(names))
	for i, n := range names {
		files[i] = filepath.Join(dir, n)
	}
	return openStackFiles(dir, files, true, opt)
}

func openStackFiles(name string, files []string, isDir bool, opt Options) (Stream, error) {
	if !isDir {
		return openMultiPage(name, opt)
	}
	info, err := tiffInfoOf(files[0], opt.limit())
	if err != nil {
		return nil, err
	}
	h := Header{Format: "tiff", Shape: [3]int{len(files), info.height, info.width}, DType: info.dtype(), VoxelSize: opt.VoxelSize}
	if _, ok := mulLimit(h.Shape, opt.limit()); !ok {
		return nil, fileErr(name, ErrTooLarge, "TIFF stack of %d×%d×%d voxels exceeds the limit of %d", h.Shape[0], h.Shape[1], h.Shape[2], opt.limit())
	}
	// Every slice must match the first before anything is read or stored:
	// a stack that fails half-way through would leave half a step behind.
	for i, f := range files {
		t := info
		if i > 0 {
			if t, err = tiffInfoOf(f, opt.limit()); err != nil {
				return nil, err
			}
		}
		// A slice with more pages is a stack of its own; taking its first
		// page would drop the others without a word.
		if t.next != 0 {
			return nil, onePageErr(f, opt.limit())
		}
		if t.width != info.width || t.height != info.height || t.dtype() != info.dtype() {
			return nil, fileErr(f, ErrFormat, "slice is %d×%d %v, the stack is %d×%d %v (from %s)", t.width, t.height, t.dtype(),
				info.width, info.height, info.dtype(), filepath.Base(files[0]))
		}
	}
	if err := applyStackHeader(filepath.Join(name, stackHeaderName), &h); err != nil {
		return nil, err
	}
	return &stackStream{dir: name, files: files, h: h, info: info, limit: opt.limit()}, nil
}

// onePageErr refuses a slice of a stack directory that holds several pages.
func onePageErr(name string, limit int64) error {
	n := "several"
	if f, err := os.Open(name); err == nil {
		if fi, err := f.Stat(); err == nil {
			if t, err := readTIFFInfo(f, fi.Size(), limit); err == nil {
				n = fmt.Sprint(countPages(f, fi.Size(), t.order, t.big, t.next, 2))
			}
		}
		f.Close()
	}
	return fileErr(name, ErrFormat, "TIFF: %s pages in a slice of a stack directory, which takes one page per file; open a multi-page TIFF on its own", n)
}

// openMultiPage opens one TIFF file whose pages are the z slices (a single
// page is a volume of one slice). Every page's IFD is read and checked
// against the first before any voxel is.
func openMultiPage(name string, opt Options) (Stream, error) {
	f, err := os.Open(name)
	if err != nil {
		return nil, osErr(name, err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return nil, osErr(name, err)
	}
	info, pages, err := readTIFFPages(f, fi.Size(), opt.limit())
	if err != nil {
		return nil, tiffErr(name, err)
	}
	h := Header{Format: "tiff", Shape: [3]int{len(pages), info.height, info.width}, DType: info.dtype(), VoxelSize: opt.VoxelSize}
	if _, ok := mulLimit(h.Shape, opt.limit()); !ok {
		return nil, fileErr(name, ErrTooLarge, "TIFF of %d pages of %d×%d exceeds the limit of %d voxels", h.Shape[0], h.Shape[2], h.Shape[1], opt.limit())
	}
	return &stackStream{dir: name, files: []string{name}, pages: pages, h: h, info: info, limit: opt.limit()}, nil
}

// checkNumbering finds a missing slice in a stack whose file names differ
// only in one run of digits (z00000.tif, z00001.tif, …): the numbers must
// then be consecutive. Stacks named any other way are taken in natural
// order as they are.
func checkNumbering(dir string, names []string) error {
	prefix, _, suffix, ok := splitNumber(names[0])
	if !ok {
		return nil
	}
	nums := make([]int64, len(names))
	for i, n := range names {
		p, num, s, ok := splitNumber(n)
		if !ok || p != prefix || s != suffix {
			return nil
		}
		nums[i] = num
	}
	for i := 1; i < len(nums); i++ {
		if nums[i] != nums[i-1]+1 {
			return fileErr(dir, ErrFormat, "missing slice: %s is followed by %s (slice numbers must be consecutive)", names[i-1], names[i])
		}
	}
	return nil
}

// splitNumber splits a file name around its last run of digits.
func splitNumber(name string) (prefix string, num int64, suffix string, ok bool) {
	end := strings.LastIndexFunc(name, func(r rune) bool { return r >= '0' && r <= '9' })
	if end < 0 {
		return "", 0, "", false
	}
	start := end
	for start > 0 && isDigit(name[start-1]) {
		start--
	}
	if end+1-start > 18 {
		return "", 0, "", false
	}
	for _, c := range name[start : end+1] {
		num = num*10 + int64(c-'0')
	}
	return name[:start], num, name[end+1:], true
}

func applyStackHeader(name string, h *Header) error {
	data, err := readSmall(name)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return err
	}
	var sh StackHeader
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&sh); err != nil {
		return fileErr(name, ErrFormat, "bad stack header: %v", err)
	}
	if sh.Shape != nil && (len(sh.Shape) != 3 || [3]int{sh.Shape[0], sh.Shape[1], sh.Shape[2]} != h.Shape) {
		return fileErr(name, ErrFormat, "shape %v disagrees with the slices (%v)", sh.Shape, h.Shape)
	}
	if sh.DType != "" {
		if dt, err := volume.ParseDType(sh.DType); err != nil || dt != h.DType {
			return fileErr(name, ErrFormat, "dtype %q disagrees with the slices (%v)", sh.DType, h.DType)
		}
	}
	if sh.VoxelSize != "" {
		vs, err := volume.ParseLength(sh.VoxelSize)
		if err != nil {
			return fileErr(name, ErrFormat, "voxel_size %q (want e.g. \"2.5um\")", sh.VoxelSize)
		}
		h.VoxelSize = vs
	}
	if sh.TimeS != nil {
		h.TimeS, h.HasTime = *sh.TimeS, true
	}
	return nil
}

func tiffInfoOf(name string, limit int64) (tiffInfo, error) {
	f, err := os.Open(name)
	if err != nil {
		return tiffInfo{}, osErr(name, err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return tiffInfo{}, osErr(name, err)
	}
	t, err := readTIFFInfo(f, fi.Size(), limit)
	if err != nil {
		return t, tiffErr(name, err)
	}
	return t, nil
}

// tiffErr turns an error from the TIFF reader into a one-line FileError.
func tiffErr(name string, err error) error {
	var fe *FileError
	if errors.As(err, &fe) {
		return err
	}
	msg := err.Error()
	kind := err
	for _, s := range []error{ErrTruncated, ErrFormat, ErrTooLarge} {
		if errors.Is(err, s) {
			kind = s
			msg = strings.TrimPrefix(msg, s.Error()+": ")
		}
	}
	if errors.Is(err, errTIFFShort) || errors.Is(err, io.ErrUnexpectedEOF) || errors.Is(err, io.EOF) {
		kind = ErrTruncated
	}
	return &FileError{Path: name, Msg: "TIFF: " + msg, Err: kind}
}

func (s *stackStream) Header() Header { return s.h }
func (s *stackStream) Close() error   { return nil }

func (s *stackStream) ReadSlab(z0, z1 int) (volume.Any, error) {
	sh := s.h.Shape
	if z0 < 0 || z1 > sh[0] || z0 >= z1 {
		return nil, fileErr(s.dir, ErrFormat, "slab %d:%d outside 0:%d", z0, z1, sh[0])
	}
	if _, ok := mulLimit([3]int{z1 - z0, sh[1], sh[2]}, s.limit); !ok {
		return nil, fileErr(s.dir, ErrTooLarge, "slab %d:%d of %d×%d voxels per slice exceeds the limit of %d", z0, z1, sh[1], sh[2], s.limit)
	}
	v := newVolume(s.h.DType, volume.Box{Min: [3]int{z0, 0, 0}, Max: [3]int{z1, sh[1], sh[2]}}, s.h.VoxelSize)
	if s.pages != nil {
		return v, s.readPages(v, z0, z1)
	}
	for z := z0; z < z1; z++ {
		if err := s.readSlice(s.files[z], v, z); err != nil {
			return nil, err
		}
	}
	return v, nil
}

// readPages decodes pages z0 <= z < z1 of a multi-page file into v.
func (s *stackStream) readPages(v volume.Any, z0, z1 int) error {
	name := s.files[0]
	f, err := os.Open(name)
	if err != nil {
		return osErr(name, err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return osErr(name, err)
	}
	for z := z0; z < z1; z++ {
		// The file may have changed since it was opened: read the page's
		// IFD again and check it against the header.
		t, err := readIFD(f, fi.Size(), s.limit, s.info.order, s.info.big, s.pages[z])
		if err == nil && (t.width != s.h.Shape[2] || t.height != s.h.Shape[1] || t.dtype() != s.h.DType) {
			err = fmt.Errorf("%w: page is %d×%d %v, page 1 is %d×%d %v", ErrFormat, t.width, t.height, t.dtype(), s.h.Shape[2], s.h.Shape[1], s.h.DType)
		}
		if err == nil {
			err = decodeTIFF(f, fi.Size(), t, v, z)
		}
		if err != nil {
			if len(s.pages) > 1 {
				err = pageErr(z+1, err)
			}
			return tiffErr(name, err)
		}
	}
	return nil
}

func (s *stackStream) readSlice(name string, v volume.Any, z int) error {
	f, err := os.Open(name)
	if err != nil {
		return osErr(name, err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return osErr(name, err)
	}
	t, err := readTIFFInfo(f, fi.Size(), s.limit)
	if err != nil {
		return tiffErr(name, err)
	}
	if t.width != s.h.Shape[2] || t.height != s.h.Shape[1] || t.dtype() != s.h.DType {
		return fileErr(name, ErrFormat, "slice is %d×%d %v, the stack is %d×%d %v", t.width, t.height, t.dtype(), s.h.Shape[2], s.h.Shape[1], s.h.DType)
	}
	if err := decodeTIFF(f, fi.Size(), t, v, z); err != nil {
		return tiffErr(name, err)
	}
	return nil
}

// WriteTIFFStack writes v as one uncompressed TIFF per z slice into dir
// (created if needed), named z00000.tif, z00001.tif, … by global z, plus
// stack.sluice.json with shape, dtype, voxel size and time.
func WriteTIFFStack(dir string, v volume.Any, o WriteOptions) error {
	if err := checkVolume(v); err != nil {
		return fileErr(dir, ErrFormat, "%v", err)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return osErr(dir, err)
	}
	b := v.Bounds()
	var buf bytes.Buffer
	for z := b.Min[0]; z < b.Max[0]; z++ {
		buf.Reset()
		name := filepath.Join(dir, fmt.Sprintf("z%05d.tif", z))
		if err := EncodeTIFF(&buf, v, z); err != nil {
			return fileErr(name, ErrFormat, "%v", err)
		}
		if err := writeFileAtomic(name, buf.Bytes()); err != nil {
			return err
		}
	}
	s := b.Size()
	sh := StackHeader{Shape: []int{s[0], s[1], s[2]}, DType: v.DType().String()}
	if vs := v.EdgeLength(); vs > 0 {
		sh.VoxelSize = volume.FormatLength(vs)
	}
	if o.HasTime {
		t := o.TimeS
		sh.TimeS = &t
	}
	data, _ := json.MarshalIndent(sh, "", "  ")
	return writeFileAtomic(filepath.Join(dir, stackHeaderName), append(data, '\n'))
}
