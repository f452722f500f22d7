//go:build hdf5 && cgo

package volio

/*
#cgo pkg-config: hdf5
#include <hdf5.h>
#include <stdlib.h>
#include <string.h>

// Every helper silences HDF5's own error printing (per thread in a
// thread-safe build) and, when it fails, copies the innermost and the
// outermost description of the error stack into err.

typedef struct { char inner[256]; char outer[256]; int n; } sl_errs;

static herr_t sl_walk(unsigned n, const H5E_error2_t *e, void *data) {
	sl_errs *s = data;
	const char *d = e->desc ? e->desc : "";
	if (!*d) return 0;
	if (s->n == 0) { strncpy(s->inner, d, sizeof s->inner - 1); }
	strncpy(s->outer, d, sizeof s->outer - 1);
	s->n++;
	return 0;
}

static void sl_error(char *err, size_t cap) {
	sl_errs s;
	memset(&s, 0, sizeof s);
	H5Ewalk2(H5E_DEFAULT, H5E_WALK_UPWARD, sl_walk, &s);
	H5Eclear2(H5E_DEFAULT);
	if (s.n == 0) snprintf(err, cap, "HDF5 library error");
	else if (s.n == 1 || strcmp(s.inner, s.outer) == 0) snprintf(err, cap, "%s", s.inner);
	else snprintf(err, cap, "%s (%s)", s.outer, s.inner);
}

static void sl_quiet(void) { H5Eset_auto2(H5E_DEFAULT, NULL, NULL); }

static hid_t sl_fopen(const char *name, char *err, size_t cap) {
	sl_quiet();
	hid_t f = H5Fopen(name, H5F_ACC_RDONLY, H5P_DEFAULT);
	if (f < 0) sl_error(err, cap);
	return f;
}

// sl_kind: 0 missing, 1 group, 2 dataset, 3 other. Each prefix of the path
// is checked, since H5Lexists fails on a missing intermediate group.
static int sl_kind(hid_t f, const char *p) {
	sl_quiet();
	size_t n = strlen(p);
	if (n == 0) return 0;
	if (strcmp(p, "/") != 0) {
		char *q = malloc(n + 1);
		if (!q) return 0;
		for (size_t i = 1; i <= n; i++) {
			if (i == n || p[i] == '/') {
				memcpy(q, p, i); q[i] = 0;
				if (H5Lexists(f, q, H5P_DEFAULT) <= 0) { free(q); H5Eclear2(H5E_DEFAULT); return 0; }
			}
		}
		free(q);
	}
	hid_t o = H5Oopen(f, p, H5P_DEFAULT);
	if (o < 0) { H5Eclear2(H5E_DEFAULT); return 0; }
	int k = 3;
	switch (H5Iget_type(o)) {
	case H5I_GROUP: k = 1; break;
	case H5I_DATASET: k = 2; break;
	default: break;
	}
	H5Oclose(o);
	return k;
}

// sl_attr reads attribute name of the object at path p (or of the open
// object obj when p is NULL). Returns 0 absent, 1 read, -1 HDF5 error, -2
// a type or size we do not read. A string comes back in *str (free it).
static int sl_attr(hid_t f, const char *p, const char *name, int *isstr, char **str, double *nums, int maxn, int *n, char *err, size_t cap) {
	sl_quiet();
	*str = NULL; *n = 0; *isstr = 0;
	hid_t o = H5Oopen(f, p, H5P_DEFAULT);
	if (o < 0) { sl_error(err, cap); return -1; }
	htri_t ex = H5Aexists(o, name);
	if (ex <= 0) { H5Oclose(o); if (ex < 0) { sl_error(err, cap); return -1; } return 0; }
	int rc = -1;
	hid_t a = H5Aopen(o, name, H5P_DEFAULT);
	hid_t t = a < 0 ? -1 : H5Aget_type(a);
	hid_t s = a < 0 ? -1 : H5Aget_space(a);
	if (a < 0 || t < 0 || s < 0) { sl_error(err, cap); goto done; }
	hssize_t np = H5Sget_simple_extent_npoints(s);
	switch (H5Tget_class(t)) {
	case H5T_STRING:
		*isstr = 1;
		if (np != 1) { rc = -2; break; }
		if (H5Tis_variable_str(t) > 0) {
			hid_t mt = H5Tcopy(H5T_C_S1);
			H5Tset_size(mt, H5T_VARIABLE);
			H5Tset_cset(mt, H5Tget_cset(t));
			char *v = NULL;
			if (H5Aread(a, mt, &v) < 0) { sl_error(err, cap); H5Tclose(mt); break; }
			*str = strdup(v ? v : "");
			H5free_memory(v);
			H5Tclose(mt);
		} else {
			size_t sz = H5Tget_size(t);
			if (sz == 0 || sz > 65536) { rc = -2; break; }
			char *v = calloc(sz + 1, 1);
			if (!v) break;
			if (H5Aread(a, t, v) < 0) { sl_error(err, cap); free(v); break; }
			*str = v;
		}
		rc = 1;
		break;
	case H5T_INTEGER:
	case H5T_FLOAT:
		if (np < 1 || np > maxn) { rc = -2; break; }
		if (H5Aread(a, H5T_NATIVE_DOUBLE, nums) < 0) { sl_error(err, cap); break; }
		*n = (int)np;
		rc = 1;
		break;
	default:
		rc = -2;
	}
done:
	if (s >= 0) H5Sclose(s);
	if (t >= 0) H5Tclose(t);
	if (a >= 0) H5Aclose(a);
	H5Oclose(o);
	return rc;
}

static hid_t sl_dopen(hid_t f, const char *p, size_t cache, size_t slots, char *err, size_t cap) {
	sl_quiet();
	hid_t dapl = H5Pcreate(H5P_DATASET_ACCESS);
	if (dapl < 0) { sl_error(err, cap); return -1; }
	H5Pset_chunk_cache(dapl, slots, cache, 1.0);
	hid_t d = H5Dopen2(f, p, dapl);
	if (d < 0) sl_error(err, cap);
	H5Pclose(dapl);
	return d;
}

// sl_dinfo describes a dataset: rank and dims (up to 8), type class
// (H5T_class_t), size in bytes, sign (1 signed), layout (1 chunked) and
// chunk dims.
static int sl_dinfo(hid_t d, int *rank, hsize_t *dims, int *cls, size_t *size, int *sign, int *chunked, hsize_t *chunk, int *nfilt, char *err, size_t cap) {
	sl_quiet();
	hid_t s = H5Dget_space(d);
	if (s < 0) { sl_error(err, cap); return -1; }
	*rank = H5Sget_simple_extent_ndims(s);
	if (*rank < 0 || *rank > 8) { H5Sclose(s); *rank = -1; return 0; }
	H5Sget_simple_extent_dims(s, dims, NULL);
	H5Sclose(s);
	hid_t t = H5Dget_type(d);
	if (t < 0) { sl_error(err, cap); return -1; }
	*cls = H5Tget_class(t);
	*size = H5Tget_size(t);
	*sign = *cls == H5T_INTEGER ? (H5Tget_sign(t) == H5T_SGN_2) : 0;
	H5Tclose(t);
	hid_t pl = H5Dget_create_plist(d);
	if (pl < 0) { sl_error(err, cap); return -1; }
	*chunked = H5Pget_layout(pl) == H5D_CHUNKED;
	if (*chunked && *rank > 0) H5Pget_chunk(pl, *rank, chunk);
	*nfilt = H5Pget_nfilters(pl);
	H5Pclose(pl);
	return 0;
}

// sl_filter returns the id of filter i of d and its name; *avail is
// H5Zfilter_avail (which loads a dynamic plugin when one is found); when
// it is 0, err says why (e.g. the dlopen error of a broken plugin).
static int sl_filter(hid_t d, unsigned i, char *name, size_t namecap, int *avail, char *err, size_t cap) {
	sl_quiet();
	hid_t pl = H5Dget_create_plist(d);
	if (pl < 0) return -1;
	unsigned flags = 0, conf = 0;
	size_t ncd = 0;
	name[0] = 0;
	H5Z_filter_t id = H5Pget_filter2(pl, i, &flags, &ncd, NULL, namecap, name, &conf);
	H5Pclose(pl);
	err[0] = 0;
	*avail = H5Zfilter_avail(id) > 0;
	if (!*avail) sl_error(err, cap);
	H5Eclear2(H5E_DEFAULT);
	return (int)id;
}

// sl_read reads the hyperslab [z0, z0+nz) × [y0, y0+ny) × [0, nx) into buf
// as kind 1 uint8, 2 uint16 or 3 float32 in the machine's byte order
// (HDF5 converts from the file's type and order).
static int sl_read(hid_t d, int kind, hsize_t z0, hsize_t y0, hsize_t nz, hsize_t ny, hsize_t nx, void *buf, char *err, size_t cap) {
	sl_quiet();
	hid_t mt = kind == 1 ? H5T_NATIVE_UINT8 : kind == 2 ? H5T_NATIVE_UINT16 : H5T_NATIVE_FLOAT;
	hsize_t start[3] = {z0, y0, 0}, count[3] = {nz, ny, nx};
	hid_t fs = H5Dget_space(d);
	if (fs < 0) { sl_error(err, cap); return -1; }
	if (H5Sselect_hyperslab(fs, H5S_SELECT_SET, start, NULL, count, NULL) < 0) { sl_error(err, cap); H5Sclose(fs); return -1; }
	hid_t ms = H5Screate_simple(3, count, NULL);
	if (ms < 0) { sl_error(err, cap); H5Sclose(fs); return -1; }
	herr_t rc = H5Dread(d, mt, ms, fs, H5P_DEFAULT, buf);
	if (rc < 0) sl_error(err, cap);
	H5Sclose(ms);
	H5Sclose(fs);
	return rc < 0 ? -1 : 0;
}

static void sl_close(hid_t d, hid_t f) {
	sl_quiet();
	if (d >= 0) H5Dclose(d);
	if (f >= 0) H5Fclose(f);
	H5Eclear2(H5E_DEFAULT);
}
*/
import "C"

import (
	"errors"
	"fmt"
	"strings"
	"sync"
	"unsafe"

	"sluice/pkg/volume"
)

// HDF5Support reports whether this build reads HDF5 files (built with
// cgo, the HDF5 C library and the build tag hdf5; `make build` does that
// when pkg-config finds the library).
const HDF5Support = true

// h5mu serialises every call into the HDF5 library: our helpers make
// several calls in a row, and a library built without thread safety must
// not be entered twice.
var h5mu sync.Mutex

// h5ChunkCacheMax bounds the chunk cache of one open dataset. A band read
// touches a whole layer of chunks; while the layer fits, each chunk is
// decompressed once however thin the bands are.
const h5ChunkCacheMax = 256 << 20

type h5Err [512]C.char

func (e *h5Err) ptr() (*C.char, C.size_t) { return &e[0], C.size_t(len(e)) }
func (e *h5Err) String() string           { return C.GoString(&e[0]) }

type hdf5Stream struct {
	name    string
	file    C.hid_t
	ds      C.hid_t
	dataset string
	kind    C.int
	h       Header
	limit   int64
}

// h5tree adapts an open file to hdf5Tree (h5mu held by the caller).
type h5tree struct{ f C.hid_t }

func (t h5tree) kind(p string) int {
	cp := C.CString(p)
	defer C.free(unsafe.Pointer(cp))
	return int(C.sl_kind(t.f, cp))
}

func (t h5tree) attr(p, name string) (h5Attr, error) {
	cp, cn := C.CString(p), C.CString(name)
	defer C.free(unsafe.Pointer(cp))
	defer C.free(unsafe.Pointer(cn))
	var isStr, n C.int
	var str *C.char
	nums := make([]C.double, 8)
	var e h5Err
	ep, ec := e.ptr()
	rc := C.sl_attr(t.f, cp, cn, &isStr, &str, &nums[0], C.int(len(nums)), &n, ep, ec)
	if str != nil {
		defer C.free(unsafe.Pointer(str))
	}
	switch rc {
	case 0:
		return h5Attr{}, nil
	case -1:
		return h5Attr{}, fmt.Errorf("attribute %s of %s: %s", name, p, e.String())
	case -2:
		return h5Attr{}, fmt.Errorf("attribute %s of %s is not a single string or up to %d numbers", name, p, len(nums))
	}
	a := h5Attr{present: true, isStr: isStr != 0}
	if a.isStr {
		a.str = strings.TrimRight(C.GoString(str), " \x00")
	} else {
		for _, v := range nums[:n] {
			a.nums = append(a.nums, float64(v))
		}
	}
	return a, nil
}

func (t h5tree) attrString(p, name string) (string, bool, error) {
	a, err := t.attr(p, name)
	if err != nil || !a.present {
		return "", false, err
	}
	if !a.isStr {
		return "", false, fmt.Errorf("attribute %s is not a string", name)
	}
	return a.str, true, nil
}

// openHDF5 opens the dataset of an HDF5 file for slab-wise reading (see
// the package doc).
func openHDF5(name string, opt Options) (Stream, error) {
	h5mu.Lock()
	defer h5mu.Unlock()
	cname := C.CString(name)
	defer C.free(unsafe.Pointer(cname))
	var e h5Err
	ep, ec := e.ptr()
	f := C.sl_fopen(cname, ep, ec)
	if f < 0 {
		kind := ErrFormat
		if strings.Contains(e.String(), "truncated") {
			kind = ErrTruncated
		}
		return nil, fileErr(name, kind, "cannot open as HDF5: %s", e.String())
	}
	s := &hdf5Stream{name: name, file: f, ds: -1, limit: opt.limit()}
	if err := s.open(opt); err != nil {
		C.sl_close(s.ds, s.file)
		return nil, err
	}
	return s, nil
}

func (s *hdf5Stream) fail(kind error, format string, a ...any) error {
	return fileErr(s.name, kind, "dataset %s: %s", s.dataset, fmt.Sprintf(format, a...))
}

func (s *hdf5Stream) open(opt Options) error {
	t := h5tree{s.file}
	var err error
	if opt.Dataset != "" {
		if s.dataset, err = cleanHDF5Path(opt.Dataset); err != nil {
			return fileErr(s.name, ErrFormat, "%v", err)
		}
		switch t.kind(s.dataset) {
		case h5Dataset:
		case h5Missing:
			return fileErr(s.name, ErrFormat, "no dataset %s in the file", s.dataset)
		default:
			return fileErr(s.name, ErrFormat, "%s is a group, not a dataset", s.dataset)
		}
	} else if s.dataset, err = resolveHDF5Dataset(t); err != nil {
		return fileErr(s.name, ErrFormat, "%v", err)
	}
	cp := C.CString(s.dataset)
	defer C.free(unsafe.Pointer(cp))
	var e h5Err
	ep, ec := e.ptr()
	var (
		rank, cls, sign, chunked, nfilt C.int
		size                            C.size_t
		dims, chunk                     [8]C.hsize_t
	)
	// Describe the dataset with a default cache first; the cache is sized
	// from the chunk layer below.
	d := C.sl_dopen(s.file, cp, 0, 0, ep, ec)
	if d < 0 {
		return s.fail(ErrFormat, "cannot open: %s", e.String())
	}
	rc := C.sl_dinfo(d, &rank, &dims[0], &cls, &size, &sign, &chunked, &chunk[0], &nfilt, ep, ec)
	if rc < 0 {
		C.sl_close(d, -1)
		return s.fail(ErrFormat, "%s", e.String())
	}
	// Every filter must be there before a voxel is read: a missing plugin
	// would otherwise fail in the middle of an ingest.
	for i := 0; i < int(nfilt); i++ {
		var fname [128]C.char
		var avail C.int
		id := C.sl_filter(d, C.uint(i), &fname[0], C.size_t(len(fname)), &avail, ep, ec)
		if avail == 0 {
			C.sl_close(d, -1)
			why := ""
			if m := e.String(); strings.Contains(m, "dlopen") {
				why = " [" + m + "]"
			}
			return s.fail(ErrFormat, "compressed with HDF5 filter %d (%s), which this HDF5 library cannot load%s: install its plugin (Debian: hdf5-filter-plugin for LZ4/BZip2, hdf5-filter-plugin-blosc-serial for Blosc, hdf5-plugin-lzf for LZF) or point HDF5_PLUGIN_PATH at it",
				int(id), h5FilterName(int(id), C.GoString(&fname[0])), why)
		}
	}
	if rank != 3 {
		C.sl_close(d, -1)
		if rank < 0 {
			return s.fail(ErrFormat, "not a simple dataspace of up to 8 dimensions")
		}
		dd := make([]string, rank)
		for i := range dd {
			dd[i] = fmt.Sprint(uint64(dims[i]))
		}
		return s.fail(ErrFormat, "has %d dimensions (%s), want 3 (z, y, x)", int(rank), strings.Join(dd, "×"))
	}
	var shape [3]int
	for i := range shape {
		if uint64(dims[i]) > uint64(s.limit) {
			C.sl_close(d, -1)
			return s.fail(ErrTooLarge, "%d×%d×%d voxels exceed the limit of %d", uint64(dims[0]), uint64(dims[1]), uint64(dims[2]), s.limit)
		}
		shape[i] = int(dims[i])
	}
	if _, ok := mulLimit(shape, s.limit); !ok {
		C.sl_close(d, -1)
		if shape[0] == 0 || shape[1] == 0 || shape[2] == 0 {
			return s.fail(ErrFormat, "is empty (%d×%d×%d)", shape[0], shape[1], shape[2])
		}
		return s.fail(ErrTooLarge, "%d×%d×%d voxels exceed the limit of %d", shape[0], shape[1], shape[2], s.limit)
	}
	dt, kind, err := h5DType(int(cls), int(size), sign != 0)
	if err != nil {
		C.sl_close(d, -1)
		return s.fail(ErrFormat, "%v", err)
	}
	s.kind = kind
	if chunked != 0 {
		// Cache one layer of chunks (all chunks of one chunk row in z).
		layer := int64(chunk[0]) * int64(shape[1]+int(chunk[1])) * int64(shape[2]+int(chunk[2])) * int64(size)
		per := int64(chunk[0]) * int64(chunk[1]) * int64(chunk[2]) * int64(size)
		cache := min(layer, h5ChunkCacheMax)
		if cache > 1<<20 && per > 0 {
			C.sl_close(d, -1)
			n := cache/per + 1
			d = C.sl_dopen(s.file, cp, C.size_t(cache), C.size_t(min(n*10+1, 1<<20)), ep, ec)
			if d < 0 {
				return s.fail(ErrFormat, "cannot open: %s", e.String())
			}
		}
	}
	s.ds = d
	get := func(n string) (h5Attr, error) { return t.attr(s.dataset, n) }
	vs, ts, hasTime, err := h5Meta(get)
	if errors.Is(err, errUnitless) && opt.VoxelSize > 0 {
		// The user gave the voxel size: the unitless attribute is not used.
		vs, ts, hasTime, err = h5Meta(func(n string) (h5Attr, error) {
			if n == "voxel_size" {
				return h5Attr{}, nil
			}
			return get(n)
		})
	}
	if err != nil {
		return s.fail(ErrFormat, "%v", err)
	}
	if vs == 0 {
		vs = opt.VoxelSize
	}
	s.h = Header{Format: "hdf5", Shape: shape, DType: dt, VoxelSize: vs, TimeS: ts, HasTime: hasTime}
	return nil
}

// h5DType maps an HDF5 type class (H5T_class_t), size and sign to the
// voxel type read: unsigned 8/16-bit integers as they are; signed 8/16-bit
// integers as float32 (exact); 32/64-bit floats as float32 (64-bit ones
// rounded to nearest, as HDF5 converts). Wider integers, which float32
// cannot hold exactly, and other classes are refused.
func h5DType(cls, size int, signed bool) (volume.DType, C.int, error) {
	switch {
	case cls == C.H5T_INTEGER && !signed && size == 1:
		return volume.Uint8, 1, nil
	case cls == C.H5T_INTEGER && !signed && size == 2:
		return volume.Uint16, 2, nil
	case cls == C.H5T_INTEGER && signed && (size == 1 || size == 2):
		return volume.Float32, 3, nil
	case cls == C.H5T_FLOAT && (size == 4 || size == 8):
		return volume.Float32, 3, nil
	case cls == C.H5T_INTEGER:
		sg := "unsigned"
		if signed {
			sg = "signed"
		}
		return 0, 0, fmt.Errorf("holds %d-bit %s integers; sluice reads 8/16-bit integers and 32/64-bit floats (store the scan as uint16 or float32)", size*8, sg)
	case cls == C.H5T_FLOAT:
		return 0, 0, fmt.Errorf("holds %d-bit floats; sluice reads 32- and 64-bit floats", size*8)
	}
	return 0, 0, fmt.Errorf("holds neither integers nor floats (HDF5 type class %d)", cls)
}

// h5FilterName names the registered HDF5 filters seen in beamline files
// (ids from The HDF Group's registered filter list; from memory).
func h5FilterName(id int, lib string) string {
	names := map[int]string{1: "gzip", 2: "shuffle", 3: "fletcher32", 4: "szip", 5: "nbit", 6: "scaleoffset",
		307: "bzip2", 32000: "LZF", 32001: "Blosc", 32004: "LZ4", 32008: "bitshuffle", 32013: "ZFP", 32015: "Zstandard", 32026: "Blosc2"}
	if n, ok := names[id]; ok {
		return n
	}
	if lib != "" {
		return lib
	}
	return "unregistered"
}

func (s *hdf5Stream) Header() Header { return s.h }

func (s *hdf5Stream) Close() error {
	h5mu.Lock()
	defer h5mu.Unlock()
	C.sl_close(s.ds, s.file)
	s.ds, s.file = -1, -1
	return nil
}

func (s *hdf5Stream) ReadSlab(z0, z1 int) (volume.Any, error) {
	if z0 < 0 || z1 > s.h.Shape[0] || z0 >= z1 {
		return nil, fileErr(s.name, ErrFormat, "slab %d:%d outside 0:%d", z0, z1, s.h.Shape[0])
	}
	return s.ReadBandInto(nil, z0, z1, 0, s.h.Shape[1])
}

// ReadBand reads one hyperslab of rows (see BandReader); HDF5 reads only
// the chunks it touches.
func (s *hdf5Stream) ReadBand(z0, z1, y0, y1 int) (volume.Any, error) {
	return s.ReadBandInto(nil, z0, z1, y0, y1)
}

// ReadBandInto is ReadBand reusing dst's voxels when it fits.
func (s *hdf5Stream) ReadBandInto(dst volume.Any, z0, z1, y0, y1 int) (volume.Any, error) {
	sh := s.h.Shape
	if z0 < 0 || z1 > sh[0] || z0 >= z1 || y0 < 0 || y1 > sh[1] || y0 >= y1 {
		return nil, fileErr(s.name, ErrFormat, "band %d:%d × %d:%d outside 0:%d × 0:%d", z0, z1, y0, y1, sh[0], sh[1])
	}
	if _, ok := mulLimit([3]int{z1 - z0, y1 - y0, sh[2]}, s.limit); !ok {
		return nil, fileErr(s.name, ErrTooLarge, "slab %d:%d of %d×%d voxels per slice exceeds the limit of %d", z0, z1, y1-y0, sh[2], s.limit)
	}
	v := reuseVolume(dst, s.h.DType, volume.Box{Min: [3]int{z0, y0, 0}, Max: [3]int{z1, y1, sh[2]}}, s.h.VoxelSize)
	buf := volumeBytes(v)
	h5mu.Lock()
	defer h5mu.Unlock()
	if s.ds < 0 {
		return nil, fileErr(s.name, ErrFormat, "read after close")
	}
	var e h5Err
	ep, ec := e.ptr()
	rc := C.sl_read(s.ds, s.kind, C.hsize_t(z0), C.hsize_t(y0), C.hsize_t(z1-z0), C.hsize_t(y1-y0), C.hsize_t(sh[2]), unsafe.Pointer(&buf[0]), ep, ec)
	if rc < 0 {
		kind := ErrFormat
		msg := e.String()
		if strings.Contains(msg, "truncated") || strings.Contains(msg, "addr overflow") || strings.Contains(msg, "read failed") {
			kind = ErrTruncated
		}
		return nil, s.fail(kind, "reading slices %d:%d: %s", z0, z1, msg)
	}
	return v, nil
}
