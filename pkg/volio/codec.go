package volio

import (
	"encoding/binary"
	"fmt"
	"math"
	"unsafe"

	"sluice/pkg/volume"
)

// parseOrder maps "little"/"big" ("" = little) to a byte order.
func parseOrder(s string) (binary.ByteOrder, error) {
	switch s {
	case "", "little", "le":
		return binary.LittleEndian, nil
	case "big", "be":
		return binary.BigEndian, nil
	}
	return nil, fmt.Errorf("byte order %q (want little or big)", s)
}

func orderName(o binary.ByteOrder) string {
	if o == binary.ByteOrder(binary.BigEndian) {
		return "big"
	}
	return "little"
}

// mulLimit returns a*b*c, or ok=false if any factor is < 1 or the product
// exceeds limit (checked without overflow).
func mulLimit(s [3]int, limit int64) (int64, bool) {
	n := int64(1)
	for _, d := range s {
		if d < 1 || int64(d) > limit || n > limit/int64(d) {
			return 0, false
		}
		n *= int64(d)
	}
	return n, true
}

// newVolume allocates a zeroed volume of the given type over box.
func newVolume(dt volume.DType, box volume.Box, voxelSize float64) volume.Any {
	switch dt {
	case volume.Uint8:
		return volume.New[uint8](box, voxelSize)
	case volume.Uint16:
		return volume.New[uint16](box, voxelSize)
	case volume.Float32:
		return volume.New[float32](box, voxelSize)
	}
	panic("volio: unsupported dtype " + dt.String())
}

// hostLittle reports whether this machine stores multi-byte numbers
// little-endian (amd64, arm64, riscv64 …).
var hostLittle = func() bool {
	x := uint16(1)
	return *(*byte)(unsafe.Pointer(&x)) == 1
}()

// native reports whether byte order o is the machine's own: voxels then
// move between files and volumes as one memory copy.
func native(o binary.ByteOrder) bool {
	if o == binary.ByteOrder(binary.LittleEndian) {
		return hostLittle
	}
	return o == binary.ByteOrder(binary.BigEndian) && !hostLittle
}

// voxelBytes views the voxels of s as their bytes in machine order
// (len(s)·size bytes, no copy).
func voxelBytes[T volume.Voxel](s []T) []byte {
	if len(s) == 0 {
		return nil
	}
	return unsafe.Slice((*byte)(unsafe.Pointer(unsafe.SliceData(s))), len(s)*int(unsafe.Sizeof(s[0])))
}

// reuseVolume returns v moved to box when it has dtype dt and room for
// box's voxels (Pix is resliced; its voxels are kept, to be overwritten),
// else a new zeroed volume. Streaming readers pass their previous buffer,
// so the smaller bands at the volume's edges reuse it too.
func reuseVolume(v volume.Any, dt volume.DType, box volume.Box, voxelSize float64) volume.Any {
	n := box.Voxels()
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		if dt == volume.Uint8 && cap(t.Pix) >= n {
			t.Box, t.VoxelSize, t.Pix = box, voxelSize, t.Pix[:n]
			return t
		}
	case *volume.Volume[uint16]:
		if dt == volume.Uint16 && cap(t.Pix) >= n {
			t.Box, t.VoxelSize, t.Pix = box, voxelSize, t.Pix[:n]
			return t
		}
	case *volume.Volume[float32]:
		if dt == volume.Float32 && cap(t.Pix) >= n {
			t.Box, t.VoxelSize, t.Pix = box, voxelSize, t.Pix[:n]
			return t
		}
	}
	return newVolume(dt, box, voxelSize)
}

// volumeBytes views v.Pix as bytes in machine order (no copy).
func volumeBytes(v volume.Any) []byte {
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		return t.Pix
	case *volume.Volume[uint16]:
		return voxelBytes(t.Pix)
	case *volume.Volume[float32]:
		return voxelBytes(t.Pix)
	}
	return nil
}

// decodeVoxels fills dst from src (len(src) == len(dst)*size) in byte order
// o: a memory copy when o is the machine's order, else a loop on the
// concrete order (no interface call per voxel).
func decodeVoxels[T volume.Voxel](dst []T, src []byte, o binary.ByteOrder) {
	if native(o) {
		copy(voxelBytes(dst), src)
		return
	}
	big := o == binary.ByteOrder(binary.BigEndian)
	switch d := any(dst).(type) {
	case []uint8:
		copy(d, src)
	case []uint16:
		src = src[:2*len(d)]
		if big {
			for i := range d {
				d[i] = binary.BigEndian.Uint16(src[2*i:])
			}
		} else {
			for i := range d {
				d[i] = binary.LittleEndian.Uint16(src[2*i:])
			}
		}
	case []float32:
		src = src[:4*len(d)]
		if big {
			for i := range d {
				d[i] = math.Float32frombits(binary.BigEndian.Uint32(src[4*i:]))
			}
		} else {
			for i := range d {
				d[i] = math.Float32frombits(binary.LittleEndian.Uint32(src[4*i:]))
			}
		}
	}
}

// encodeVoxels writes src into dst (len(dst) == len(src)*size) in byte
// order o, as decodeVoxels reads it.
func encodeVoxels[T volume.Voxel](dst []byte, src []T, o binary.ByteOrder) {
	if native(o) {
		copy(dst, voxelBytes(src))
		return
	}
	big := o == binary.ByteOrder(binary.BigEndian)
	switch s := any(src).(type) {
	case []uint8:
		copy(dst, s)
	case []uint16:
		dst = dst[:2*len(s)]
		if big {
			for i, v := range s {
				binary.BigEndian.PutUint16(dst[2*i:], v)
			}
		} else {
			for i, v := range s {
				binary.LittleEndian.PutUint16(dst[2*i:], v)
			}
		}
	case []float32:
		dst = dst[:4*len(s)]
		if big {
			for i, v := range s {
				binary.BigEndian.PutUint32(dst[4*i:], math.Float32bits(v))
			}
		} else {
			for i, v := range s {
				binary.LittleEndian.PutUint32(dst[4*i:], math.Float32bits(v))
			}
		}
	}
}

// decodeAt decodes len(src)/size voxels from src into v.Pix starting at
// offset off (an index into Pix).
func decodeAt(v volume.Any, off int, src []byte, o binary.ByteOrder) {
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		decodeVoxels(t.Pix[off:off+len(src)], src, o)
	case *volume.Volume[uint16]:
		decodeVoxels(t.Pix[off:off+len(src)/2], src, o)
	case *volume.Volume[float32]:
		decodeVoxels(t.Pix[off:off+len(src)/4], src, o)
	}
}

// encodeAt encodes len(dst)/size voxels of v.Pix starting at off into dst.
func encodeAt(dst []byte, v volume.Any, off int, o binary.ByteOrder) {
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		encodeVoxels(dst, t.Pix[off:off+len(dst)], o)
	case *volume.Volume[uint16]:
		encodeVoxels(dst, t.Pix[off:off+len(dst)/2], o)
	case *volume.Volume[float32]:
		encodeVoxels(dst, t.Pix[off:off+len(dst)/4], o)
	}
}

// pixOffset returns the Pix index of global voxel (z, y, x) in v.
func pixOffset(v volume.Any, z, y, x int) int {
	b := v.Bounds()
	s := b.Size()
	return ((z-b.Min[0])*s[1]+(y-b.Min[1]))*s[2] + (x - b.Min[2])
}

// checkVolume reports whether v is one of the three concrete volume types
// with a consistent Pix length.
func checkVolume(v volume.Any) error {
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		return t.Validate()
	case *volume.Volume[uint16]:
		return t.Validate()
	case *volume.Volume[float32]:
		return t.Validate()
	case nil:
		return fmt.Errorf("nil volume")
	}
	return fmt.Errorf("unsupported volume type %T", v)
}
