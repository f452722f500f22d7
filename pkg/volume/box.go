package volume

import "fmt"

// Box is a half-open box of global voxel coordinates, indexed [z, y, x]:
// it holds the voxels with Min[i] <= c[i] < Max[i].
type Box struct {
	Min, Max [3]int
}

// BoxOf returns the box at the origin with the given shape (nz, ny, nx).
func BoxOf(nz, ny, nx int) Box { return Box{Max: [3]int{nz, ny, nx}} }

// Size returns the extent along z, y and x (zero for empty boxes).
func (b Box) Size() [3]int {
	var s [3]int
	for i := range s {
		if d := b.Max[i] - b.Min[i]; d > 0 {
			s[i] = d
		}
	}
	return s
}

// Voxels returns the number of voxels in b.
func (b Box) Voxels() int {
	s := b.Size()
	return s[0] * s[1] * s[2]
}

// Empty reports whether b holds no voxel.
func (b Box) Empty() bool {
	return b.Min[0] >= b.Max[0] || b.Min[1] >= b.Max[1] || b.Min[2] >= b.Max[2]
}

// Contains reports whether voxel (z, y, x) lies in b.
func (b Box) Contains(z, y, x int) bool {
	return z >= b.Min[0] && z < b.Max[0] && y >= b.Min[1] && y < b.Max[1] && x >= b.Min[2] && x < b.Max[2]
}

// ContainsBox reports whether c lies inside b.
func (b Box) ContainsBox(c Box) bool {
	if c.Empty() {
		return true
	}
	for i := 0; i < 3; i++ {
		if c.Min[i] < b.Min[i] || c.Max[i] > b.Max[i] {
			return false
		}
	}
	return true
}

// Intersect returns the common part of b and c (possibly empty).
func (b Box) Intersect(c Box) Box {
	var r Box
	for i := 0; i < 3; i++ {
		r.Min[i] = max(b.Min[i], c.Min[i])
		r.Max[i] = min(b.Max[i], c.Max[i])
		if r.Max[i] < r.Min[i] {
			r.Max[i] = r.Min[i]
		}
	}
	return r
}

// Grow returns b widened by n voxels on every side (shrunk for n < 0).
func (b Box) Grow(n int) Box {
	for i := 0; i < 3; i++ {
		b.Min[i] -= n
		b.Max[i] += n
	}
	return b
}

// Translate returns b shifted by d.
func (b Box) Translate(d [3]int) Box {
	for i := 0; i < 3; i++ {
		b.Min[i] += d[i]
		b.Max[i] += d[i]
	}
	return b
}

func (b Box) String() string {
	return fmt.Sprintf("[%d:%d, %d:%d, %d:%d]", b.Min[0], b.Max[0], b.Min[1], b.Max[1], b.Min[2], b.Max[2])
}

// Tiling cuts a box into tiles of at most Tile voxels along each axis; the
// last tile along an axis may be shorter.
type Tiling struct {
	// Whole is the box being cut, usually the whole scan.
	Whole Box
	// Tile is the tile core edge along z, y and x.
	Tile [3]int
}

// Counts returns the number of tiles along z, y and x.
func (t Tiling) Counts() [3]int {
	s := t.Whole.Size()
	var n [3]int
	for i := range n {
		if t.Tile[i] > 0 {
			n[i] = (s[i] + t.Tile[i] - 1) / t.Tile[i]
		}
	}
	return n
}

// Len returns the number of tiles.
func (t Tiling) Len() int {
	n := t.Counts()
	return n[0] * n[1] * n[2]
}

// Index returns the tile index of tile grid position (iz, iy, ix).
func (t Tiling) Index(iz, iy, ix int) int {
	n := t.Counts()
	return (iz*n[1]+iy)*n[2] + ix
}

// Position returns the tile grid position of tile index i.
func (t Tiling) Position(i int) [3]int {
	n := t.Counts()
	return [3]int{i / (n[1] * n[2]), (i / n[2]) % n[1], i % n[2]}
}

// Core returns the core box of tile i.
func (t Tiling) Core(i int) Box {
	p := t.Position(i)
	var b Box
	for a := 0; a < 3; a++ {
		b.Min[a] = t.Whole.Min[a] + p[a]*t.Tile[a]
		b.Max[a] = min(b.Min[a]+t.Tile[a], t.Whole.Max[a])
	}
	return b
}

// Cores returns the core boxes of all tiles in index order.
func (t Tiling) Cores() []Box {
	out := make([]Box, t.Len())
	for i := range out {
		out[i] = t.Core(i)
	}
	return out
}
