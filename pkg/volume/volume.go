// Package volume is sluice's model of a dense 3-D image: a block of voxels
// indexed [z][y][x] in C order, with an edge length in metres and a position
// in the global grid of the scan it was cut from.
//
// A Volume may be a whole scan or a tile of one (its core plus a halo). The
// Box of a Volume always holds global voxel coordinates, so code that measures
// a tile reads the same coordinates it would read on the whole scan; only the
// range of valid indices differs.
package volume

import (
	"errors"
	"fmt"
)

// Voxel is the set of voxel types sluice stores.
type Voxel interface {
	~uint8 | ~uint16 | ~float32
}

// DType names a voxel type on disk and in messages.
type DType uint8

// The voxel types.
const (
	Uint8 DType = iota + 1
	Uint16
	Float32
)

// Size returns the number of bytes of one voxel.
func (d DType) Size() int {
	switch d {
	case Uint8:
		return 1
	case Uint16:
		return 2
	case Float32:
		return 4
	}
	return 0
}

func (d DType) String() string {
	switch d {
	case Uint8:
		return "uint8"
	case Uint16:
		return "uint16"
	case Float32:
		return "float32"
	}
	return fmt.Sprintf("dtype(%d)", uint8(d))
}

// ParseDType parses "uint8", "uint16" or "float32".
func ParseDType(s string) (DType, error) {
	switch s {
	case "uint8", "u8":
		return Uint8, nil
	case "uint16", "u16":
		return Uint16, nil
	case "float32", "f32":
		return Float32, nil
	}
	return 0, fmt.Errorf("volume: unknown dtype %q (want uint8, uint16 or float32)", s)
}

// DTypeOf returns the DType of T.
func DTypeOf[T Voxel]() DType {
	var v T
	switch any(v).(type) {
	case uint8:
		return Uint8
	case uint16:
		return Uint16
	case float32:
		return Float32
	}
	return 0
}

// Volume is a dense block of voxels.
type Volume[T Voxel] struct {
	// Pix holds the voxels in C order. The voxel at global coordinates
	// (z, y, x) inside Box is
	//
	//	Pix[((z-Box.Min[0])*NY + (y-Box.Min[1]))*NX + (x-Box.Min[2])]
	//
	// where NZ, NY, NX = Box.Size(). The x stride is 1, the y stride NX and
	// the z stride NY*NX. len(Pix) == Box.Voxels().
	Pix []T
	// Box is the region of the global grid this volume covers.
	Box Box
	// VoxelSize is the voxel edge length in metres (voxels are cubic).
	// Zero means unknown.
	VoxelSize float64
}

// New allocates a zeroed volume covering box.
func New[T Voxel](box Box, voxelSize float64) *Volume[T] {
	return &Volume[T]{Pix: make([]T, box.Voxels()), Box: box, VoxelSize: voxelSize}
}

// NewShape allocates a zeroed volume of shape (nz, ny, nx) at the origin.
func NewShape[T Voxel](nz, ny, nx int, voxelSize float64) *Volume[T] {
	return New[T](Box{Max: [3]int{nz, ny, nx}}, voxelSize)
}

// Shape returns (NZ, NY, NX).
func (v *Volume[T]) Shape() [3]int { return v.Box.Size() }

// Index returns the offset in Pix of global voxel (z, y, x). It does not
// check bounds; use Box.Contains first when unsure.
func (v *Volume[T]) Index(z, y, x int) int {
	s := v.Box.Size()
	return ((z-v.Box.Min[0])*s[1]+(y-v.Box.Min[1]))*s[2] + (x - v.Box.Min[2])
}

// At returns the voxel at global (z, y, x); it panics outside Box.
func (v *Volume[T]) At(z, y, x int) T { return v.Pix[v.Index(z, y, x)] }

// Set stores a voxel at global (z, y, x); it panics outside Box.
func (v *Volume[T]) Set(z, y, x int, val T) { v.Pix[v.Index(z, y, x)] = val }

// AtOr returns the voxel at global (z, y, x), or def outside Box.
func (v *Volume[T]) AtOr(z, y, x int, def T) T {
	if !v.Box.Contains(z, y, x) {
		return def
	}
	return v.Pix[v.Index(z, y, x)]
}

// Crop copies the part of v inside box into a new volume covering box.
// Voxels of box outside v.Box are set to fill.
func (v *Volume[T]) Crop(box Box, fill T) *Volume[T] {
	out := New[T](box, v.VoxelSize)
	if fill != 0 {
		for i := range out.Pix {
			out.Pix[i] = fill
		}
	}
	in := box.Intersect(v.Box)
	if in.Empty() {
		return out
	}
	n := in.Max[2] - in.Min[2]
	for z := in.Min[0]; z < in.Max[0]; z++ {
		for y := in.Min[1]; y < in.Max[1]; y++ {
			copy(out.Pix[out.Index(z, y, in.Min[2]):][:n], v.Pix[v.Index(z, y, in.Min[2]):][:n])
		}
	}
	return out
}

// Paste copies the voxels of src that lie inside both src.Box and v.Box
// into v.
func (v *Volume[T]) Paste(src *Volume[T]) {
	in := src.Box.Intersect(v.Box)
	if in.Empty() {
		return
	}
	n := in.Max[2] - in.Min[2]
	for z := in.Min[0]; z < in.Max[0]; z++ {
		for y := in.Min[1]; y < in.Max[1]; y++ {
			copy(v.Pix[v.Index(z, y, in.Min[2]):][:n], src.Pix[src.Index(z, y, in.Min[2]):][:n])
		}
	}
}

// Clone returns a deep copy of v.
func (v *Volume[T]) Clone() *Volume[T] {
	return &Volume[T]{Pix: append([]T(nil), v.Pix...), Box: v.Box, VoxelSize: v.VoxelSize}
}

// Validate reports whether len(Pix) matches Box.
func (v *Volume[T]) Validate() error {
	if v.Box.Empty() {
		return ErrEmpty
	}
	if len(v.Pix) != v.Box.Voxels() {
		return fmt.Errorf("volume: %d voxels for box %v of %d", len(v.Pix), v.Box, v.Box.Voxels())
	}
	return nil
}

// ErrEmpty is returned for volumes without voxels.
var ErrEmpty = errors.New("volume: empty volume")

// Labels is a segmented volume: each voxel holds a phase code.
type Labels = Volume[uint8]

// Any is a volume of any voxel type: *Volume[uint8], *Volume[uint16] or
// *Volume[float32]. Use a type switch to get the concrete volume.
type Any interface {
	Bounds() Box
	DType() DType
	EdgeLength() float64
}

// Bounds returns v.Box.
func (v *Volume[T]) Bounds() Box { return v.Box }

// DType returns the voxel type of v.
func (v *Volume[T]) DType() DType { return DTypeOf[T]() }

// EdgeLength returns v.VoxelSize.
func (v *Volume[T]) EdgeLength() float64 { return v.VoxelSize }

// Float returns v converted to float32 (a copy, or v itself for float32).
func Float(a Any) *Volume[float32] {
	switch v := a.(type) {
	case *Volume[float32]:
		return v
	case *Volume[uint8]:
		return convert[uint8, float32](v)
	case *Volume[uint16]:
		return convert[uint16, float32](v)
	}
	panic(fmt.Sprintf("volume: unsupported volume type %T", a))
}

func convert[S, D Voxel](v *Volume[S]) *Volume[D] {
	out := New[D](v.Box, v.VoxelSize)
	for i, p := range v.Pix {
		out.Pix[i] = D(p)
	}
	return out
}

// SetVoxelSize sets the voxel edge length (metres) of a volume of any type.
func SetVoxelSize(a Any, m float64) {
	switch v := a.(type) {
	case *Volume[uint8]:
		v.VoxelSize = m
	case *Volume[uint16]:
		v.VoxelSize = m
	case *Volume[float32]:
		v.VoxelSize = m
	}
}
