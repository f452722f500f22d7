package volio

import (
	"context"
	"os"
	"path/filepath"
	"strings"

	"sluice/pkg/volume"
)

// DefaultMaxVoxels is the voxel limit used when Options.MaxVoxels is zero:
// 4·10⁹ voxels, a little over a 1600³ scan.
const DefaultMaxVoxels = 4_000_000_000

// Options say how to read a volume. Fields a file carries itself (a raw
// header, TIFF tags, Zarr metadata) take precedence over VoxelSize; Shape,
// DType, ByteOrder and HeaderBytes must agree with a raw header if both are
// given.
type Options struct {
	// Shape is the raw volume shape (nz, ny, nx).
	Shape [3]int
	// DType is the raw voxel type.
	DType volume.DType
	// ByteOrder of raw voxels: "little" (default) or "big".
	ByteOrder string
	// HeaderBytes is the number of bytes to skip at the start of a raw file.
	HeaderBytes int64
	// VoxelSize is the voxel edge in metres, used when the input carries none.
	VoxelSize float64
	// MaxVoxels bounds the size of any volume or slab read
	// (default DefaultMaxVoxels). Inputs above it fail with ErrTooLarge
	// before anything big is allocated.
	MaxVoxels int64
	// RequireChunks makes a missing Zarr chunk an ErrTruncated error naming
	// the chunk instead of voxels at the fill value (the Zarr v2 reading).
	// A scan handed over for measurement is complete, so a missing chunk
	// there is a transfer that did not finish; the CLI and ingest set it.
	RequireChunks bool
	// Dataset is the path of the 3-D dataset inside an HDF5 file
	// ("/entry/data/data"); empty means the NeXus default/signal
	// attributes, else /exchange/data.
	Dataset string
}

func (o Options) limit() int64 {
	if o.MaxVoxels > 0 {
		return o.MaxVoxels
	}
	return DefaultMaxVoxels
}

// Header describes a volume without its voxels.
type Header struct {
	Format    string // "raw", "tiff", "zarr" (v2), "zarr3" or "hdf5"
	Shape     [3]int // (nz, ny, nx)
	DType     volume.DType
	VoxelSize float64 // metres; 0 if unknown
	TimeS     float64 // acquisition time in seconds, if HasTime
	HasTime   bool
}

// Stream reads a volume slab by slab, never holding all of it.
type Stream interface {
	// Header returns shape, dtype and voxel size.
	Header() Header
	// ReadSlab returns the slices z0 <= z < z1 as a volume whose Box is
	// [z0:z1, 0:ny, 0:nx] in global coordinates.
	ReadSlab(z0, z1 int) (volume.Any, error)
	// Close releases open files.
	Close() error
}

// BandReader is a Stream that also reads bands narrower than a slab:
// slices z0 <= z < z1 and rows y0 <= y < y1 with every x, as a volume whose
// Box is [z0:z1, y0:y1, 0:nx]. Ingest stores one row of chunks at a time
// through it, so its memory follows the chunk edge, not the cross-section.
type BandReader interface {
	ReadBand(z0, z1, y0, y1 int) (volume.Any, error)
	// ReadBandInto is ReadBand that may reuse dst's memory (dst may be
	// nil); streaming callers pass the previous band back in.
	ReadBandInto(dst volume.Any, z0, z1, y0, y1 int) (volume.Any, error)
}

// Open reads a whole volume from path, detecting the format:
//   - a directory containing .zarray: a Zarr v2 array;
//   - a directory containing zarr.json: a Zarr v3 array;
//   - any other directory: a stack of 2-D TIFF slices;
//   - a file ending in .tif or .tiff: its pages, one per z slice;
//   - a file starting with the HDF5 signature: a 3-D dataset in it
//     (Options.Dataset; by default NeXus default/signal, else
//     /exchange/data), read when sluice was built with HDF5 support;
//   - any other file: raw voxels, described by <path>.sluice.json or opt
//     (a path ending in .sluice.json names the raw file beside it).
func Open(path string, opt Options) (volume.Any, error) {
	s, err := OpenStream(path, opt)
	if err != nil {
		return nil, err
	}
	defer s.Close()
	return s.ReadSlab(0, s.Header().Shape[0])
}

// ReadHeader reads only what is needed to describe the volume at path,
// validating shape × dtype against the file size and the voxel limit.
func ReadHeader(path string, opt Options) (Header, error) {
	s, err := OpenStream(path, opt)
	if err != nil {
		return Header{}, err
	}
	defer s.Close()
	return s.Header(), nil
}

// OpenStream opens the volume at path (formats as for Open) for slab-wise
// reading. It reads headers only; the voxel limit applies to the whole
// volume and to each slab.
func OpenStream(path string, opt Options) (Stream, error) {
	path = strings.TrimSuffix(path, headerSuffix)
	fi, err := os.Stat(path)
	if err != nil {
		return nil, osErr(path, err)
	}
	if fi.IsDir() {
		_, v2 := os.Stat(filepath.Join(path, ".zarray"))
		_, v3 := os.Stat(filepath.Join(path, zarr3Name))
		switch {
		case v2 == nil && v3 == nil:
			return nil, fileErr(path, ErrFormat, "holds both .zarray (Zarr v2) and zarr.json (Zarr v3): remove the one that does not belong")
		case v2 == nil:
			return openZarrStream(path, opt)
		case v3 == nil:
			return openZarr3Stream(path, opt)
		}
		return openStack(path, opt)
	}
	if isTIFFName(path) {
		return openStackFiles(path, []string{path}, false, opt)
	}
	if isHDF5(path) {
		return openHDF5(path, opt)
	}
	if opt.Dataset != "" {
		return nil, fileErr(path, ErrFormat, "a dataset (%s) was named, but the file is not HDF5 (no HDF5 signature)", opt.Dataset)
	}
	return openRaw(path, opt)
}

// boxReader is a Zarr array, v2 or v3.
type boxReader interface {
	ReadBox(ctx context.Context, box volume.Box) (volume.Any, error)
	bucketName() string
}

// zarrStream adapts a Zarr array to Stream.
type zarrStream struct {
	z boxReader
	h Header
}

func openZarrStream(path string, opt Options) (Stream, error) {
	z, err := OpenZarr(context.Background(), Dir(path), "")
	if err != nil {
		return nil, err
	}
	z.limit = opt.limit()
	z.requireChunks = opt.RequireChunks
	m := z.Meta()
	if _, ok := mulLimit(m.Shape, opt.limit()); !ok {
		return nil, fileErr(path, ErrTooLarge, "Zarr array of %d×%d×%d voxels exceeds the limit of %d",
			m.Shape[0], m.Shape[1], m.Shape[2], opt.limit())
	}
	vs := m.VoxelSize
	if vs == 0 {
		vs = opt.VoxelSize
	}
	return &zarrStream{z: z, h: Header{Format: "zarr", Shape: m.Shape, DType: m.DType, VoxelSize: vs, TimeS: m.TimeS, HasTime: m.HasTime}}, nil
}

func openZarr3Stream(path string, opt Options) (Stream, error) {
	z, err := OpenZarr3(path)
	if err != nil {
		return nil, err
	}
	z.limit = opt.limit()
	m := z.Meta()
	if _, ok := mulLimit(m.Shape, opt.limit()); !ok {
		return nil, fileErr(path, ErrTooLarge, "Zarr array of %d×%d×%d voxels exceeds the limit of %d",
			m.Shape[0], m.Shape[1], m.Shape[2], opt.limit())
	}
	vs := m.VoxelSize
	if vs == 0 {
		vs = opt.VoxelSize
	}
	return &zarrStream{z: z, h: Header{Format: "zarr3", Shape: m.Shape, DType: m.DType, VoxelSize: vs, TimeS: m.TimeS, HasTime: m.HasTime}}, nil
}

func (s *zarrStream) Header() Header { return s.h }
func (s *zarrStream) Close() error   { return nil }

func (s *zarrStream) ReadSlab(z0, z1 int) (volume.Any, error) {
	if z0 < 0 || z1 > s.h.Shape[0] || z0 >= z1 {
		return nil, fileErr(s.z.bucketName(), ErrFormat, "slab %d:%d outside 0:%d", z0, z1, s.h.Shape[0])
	}
	v, err := s.z.ReadBox(context.Background(), volume.Box{Min: [3]int{z0, 0, 0}, Max: [3]int{z1, s.h.Shape[1], s.h.Shape[2]}})
	if err != nil {
		return nil, err
	}
	setVoxelSize(v, s.h.VoxelSize)
	return v, nil
}

// ReadBand reads the chunks of a band of rows (see BandReader).
func (s *zarrStream) ReadBand(z0, z1, y0, y1 int) (volume.Any, error) {
	if z0 < 0 || z1 > s.h.Shape[0] || z0 >= z1 || y0 < 0 || y1 > s.h.Shape[1] || y0 >= y1 {
		return nil, fileErr(s.z.bucketName(), ErrFormat, "band %d:%d × %d:%d outside 0:%d × 0:%d", z0, z1, y0, y1, s.h.Shape[0], s.h.Shape[1])
	}
	v, err := s.z.ReadBox(context.Background(), volume.Box{Min: [3]int{z0, y0, 0}, Max: [3]int{z1, y1, s.h.Shape[2]}})
	if err != nil {
		return nil, err
	}
	setVoxelSize(v, s.h.VoxelSize)
	return v, nil
}

// ReadBandInto reads like ReadBand; Zarr chunks decode into a new volume.
func (s *zarrStream) ReadBandInto(_ volume.Any, z0, z1, y0, y1 int) (volume.Any, error) {
	return s.ReadBand(z0, z1, y0, y1)
}

func setVoxelSize(v volume.Any, vs float64) {
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		t.VoxelSize = vs
	case *volume.Volume[uint16]:
		t.VoxelSize = vs
	case *volume.Volume[float32]:
		t.VoxelSize = vs
	}
}
