package volio

import (
	"encoding/binary"
	"fmt"
	"math"

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

// decodeVoxels fills dst from src (len(src) == len(dst)*size) in byte order o.
func decodeVoxels[T volume.Voxel](dst []T, src []byte, o binary.ByteOrder) {
	switch d := any(dst).(type) {
	case []uint8:
		copy(d, src)
	case []uint16:
		for i := range d {
			d[i] = o.Uint16(src[2*i:])
		}
	case []float32:
		for i := range d {
			d[i] = math.Float32frombits(o.Uint32(src[4*i:]))
		}
	}
}

// encodeVoxels writes src into dst (len(dst) == len(src)*size) in byte order o.
func encodeVoxels[T volume.Voxel](dst []byte, src []T, o binary.ByteOrder) {
	switch s := any(src).(type) {
	case []uint8:
		copy(dst, s)
	case []uint16:
		for i, v := range s {
			o.PutUint16(dst[2*i:], v)
		}
	case []float32:
		for i, v := range s {
			o.PutUint32(dst[4*i:], math.Float32bits(v))
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
