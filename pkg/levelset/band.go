package levelset

import (
	"encoding/binary"
	"math"
	"sync"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Mixed returns, on box ∩ lab.Box, 1 where the cube of radius r (Chebyshev
// distance, the voxel itself included) holds a voxel of a and a voxel of b,
// and 0 elsewhere; voxels beyond lab.Box are missing. The cube is three 1-D
// windows (x, y, z), each a running count of the a and b voxels packed in
// the low and high byte of a uint16 (counts ≤ 2r+1 ≤ 255).
func Mixed(lab *volume.Labels, a, b *phase.Set, box volume.Box, r int) *volume.Volume[uint8] {
	out := Holds(lab, a, b, box, r)
	for i, v := range out.Pix {
		if v == 3 {
			out.Pix[i] = 1
		} else {
			out.Pix[i] = 0
		}
	}
	return out
}

// Holds returns, on box ∩ lab.Box, bit 0 set where the cube of radius r
// (Chebyshev distance, the voxel itself included) holds a voxel of a and
// bit 1 where it holds a voxel of b (so 3 where Mixed is 1); voxels beyond
// lab.Box are missing.
func Holds(lab *volume.Labels, a, b *phase.Set, box volume.Box, r int) *volume.Volume[uint8] {
	box = box.Intersect(lab.Box)
	out := volume.New[uint8](box, lab.VoxelSize)
	if box.Empty() || r < 0 || 2*r+1 > 255 {
		return out
	}
	var code [256]uint16
	for v := range code {
		if a[v] {
			code[v] |= 1
		}
		if b[v] {
			code[v] |= 1 << 8
		}
	}
	src := box.Grow(r).Intersect(lab.Box)
	s := src.Size()
	// cur and nxt are recycled: every element is written before it is
	// read (pass x writes all of nxt, each later pass all of the other).
	nv := src.Voxels()
	all := counts.get(2*nv + s[1]*s[2])
	defer counts.put(all)
	cur, nxt, cnt := all[:nv:nv], all[nv:2*nv:2*nv], all[2*nv:]
	// Pass x, fused with reading the codes: a running count along each row
	// of src, turned into packed 0/1 flags (bit 0 a, bit 8 b).
	nx := s[2]
	i := 0
	for z := src.Min[0]; z < src.Max[0]; z++ {
		for y := src.Min[1]; y < src.Max[1]; y++ {
			row := lab.Pix[lab.Index(z, y, src.Min[2]):][:nx]
			dst := cur[i:][:nx]
			i += nx
			var c uint16
			for t := 0; t < min(r, nx); t++ {
				c += code[row[t]]
			}
			for t := range dst {
				if t+r < nx {
					c += code[row[t+r]]
				}
				if t-r-1 >= 0 {
					c -= code[row[t-r-1]]
				}
				dst[t] = flags(c)
			}
		}
	}
	// Passes y and z: a window sum along the axis over the whole of src
	// (the other axes keep their extent), then the flags; only box is kept
	// at the end. A line along axis has n voxels at stride st; inner lines
	// side by side are contiguous (inner = st), outer groups follow each
	// other.
	for axis := 1; axis >= 0; axis-- {
		n := s[axis]
		st := [3]int{s[1] * s[2], s[2], 1}[axis]
		outer := len(cur) / (n * st)
		c := cnt[:st]
		for o := 0; o < outer; o++ {
			base := o * n * st
			clear(c)
			for t := 0; t < min(r, n); t++ {
				addRow(c, cur[base+t*st:][:st])
			}
			for t := 0; t < n; t++ {
				if t+r < n {
					addRow(c, cur[base+(t+r)*st:][:st])
				}
				if t-r-1 >= 0 {
					subRow(c, cur[base+(t-r-1)*st:][:st])
				}
				dst := nxt[base+t*st:][:st]
				for x, v := range c {
					dst[x] = flags(v)
				}
			}
		}
		cur, nxt = nxt, cur
	}
	i = 0
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			row := cur[((z-src.Min[0])*s[1]+(y-src.Min[1]))*s[2]+box.Min[2]-src.Min[2]:][:box.Max[2]-box.Min[2]]
			for _, c := range row {
				out.Pix[i] = uint8(c&1) | uint8(c>>8)<<1
				i++
			}
		}
	}
	return out
}

// flags turns packed counts (a in the low, b in the high byte) into
// packed 0/1 flags.
func flags(c uint16) uint16 {
	var f uint16
	if c&0xff != 0 {
		f = 1
	}
	if c>>8 != 0 {
		f |= 1 << 8
	}
	return f
}

func addRow(c, v []uint16) {
	v = v[:len(c)]
	for x := range c {
		c[x] += v[x]
	}
}

func subRow(c, v []uint16) {
	v = v[:len(c)]
	for x := range c {
		c[x] -= v[x]
	}
}

// counts recycles the uint16 buffers of Holds between calls (one slab
// per call, cut into its three buffers).
var counts slabPool[uint16]

// slabPool recycles one slab per call between calls. A pooled slab too
// small for a request is dropped and a new one made with half again the
// room, so calls of somewhat different sizes (a tile's boxes) settle on
// one slab each.
type slabPool[T any] struct{ p sync.Pool }

func (f *slabPool[T]) get(n int) []T {
	if v, ok := f.p.Get().(*[]T); ok && cap(*v) >= n {
		return (*v)[:n]
	}
	return make([]T, n, n+n/2)
}

func (f *slabPool[T]) put(b []T) { f.p.Put(&b) }

// maxScratchRadius is the largest kernel radius FractionOn handles itself
// (σ ≤ 10); wider kernels fall back to Fraction.
const maxScratchRadius = 30

// scratch recycles the float32 pass buffers of FractionOn between calls
// (their contents are not cleared: only masked voxels are written and read).
var scratch slabPool[float32]

// masks recycles the uint8 mask buffers of FractionOn.
var masks slabPool[uint8]

// FractionOn returns Fraction(lab, num, den, box, sigma) on the voxels of
// box where need is non-zero (need covers box), with the same float32
// values bit for bit; the other voxels are NaN. It runs the three
// separable passes of Smooth on both indicators at once, each pass only on
// the voxels the later passes read: need, then need widened by r along z,
// then that widened by r along y.
func FractionOn(lab *volume.Labels, num, den *phase.Set, box volume.Box, sigma float64, need *volume.Volume[uint8]) *volume.Volume[float32] {
	box = box.Intersect(lab.Box)
	out := volume.New[float32](box, lab.VoxelSize)
	nan := float32(math.NaN())
	for i := range out.Pix {
		out.Pix[i] = nan
	}
	if box.Empty() {
		return out
	}
	r := Radius(sigma)
	if r > maxScratchRadius {
		f := Fraction(lab, num, den, box, sigma)
		for i, m := range need.Pix {
			if m != 0 {
				out.Pix[i] = f.Pix[i]
			}
		}
		return out
	}
	k := Kernel(sigma)
	b0 := box.Grow(r).Intersect(lab.Box)
	// Boxes of the pass outputs, as in Smooth: x narrowed, then y, then z.
	bx := b0
	bx.Min[2], bx.Max[2] = box.Min[2], box.Max[2]
	by := bx
	by.Min[1], by.Max[1] = box.Min[1], box.Max[1]
	nx := box.Max[2] - box.Min[2]
	// Masks: mz on box (= need), my on by (mz widened along z), mx on bx
	// (my widened along y); rows flags say whether a row has any voxel.
	// mz is need itself when it lies on box; my and mx come from a
	// recycled slab, cleared (widen ORs into them).
	nm := by.Voxels() + bx.Voxels()
	if need.Box != box {
		nm += box.Voxels()
	}
	mslab := masks.get(nm)
	defer masks.put(mslab)
	clear(mslab)
	mcut := func(n int) []uint8 {
		b := mslab[:n:n]
		mslab = mslab[n:]
		return b
	}
	mz := need.Pix
	if need.Box != box {
		mz = mcut(box.Voxels())
		for z := box.Min[0]; z < box.Max[0]; z++ {
			for y := box.Min[1]; y < box.Max[1]; y++ {
				copy(mz[((z-box.Min[0])*(box.Max[1]-box.Min[1])+(y-box.Min[1]))*nx:][:nx], need.Pix[need.Index(z, y, box.Min[2]):][:nx])
			}
		}
	}
	widen := func(src []uint8, sb volume.Box, db volume.Box, axis int) []uint8 {
		// dst on db: OR of src over ±r along axis (src on sb, sb ⊂ db on
		// that axis, equal on the others).
		ds := db.Size()
		dst := mcut(db.Voxels())
		ss := sb.Size()
		for z := sb.Min[0]; z < sb.Max[0]; z++ {
			for y := sb.Min[1]; y < sb.Max[1]; y++ {
				row := src[((z-sb.Min[0])*ss[1]+(y-sb.Min[1]))*ss[2]:][:ss[2]]
				if !anySet(row) {
					continue
				}
				c := [2]int{z, y}[axis]
				lo, hi := max(c-r, db.Min[axis]), min(c+r, db.Max[axis]-1)
				for t := lo; t <= hi; t++ {
					zz, yy := z, y
					if axis == 0 {
						zz = t
					} else {
						yy = t
					}
					orRow(dst[((zz-db.Min[0])*ds[1]+(yy-db.Min[1]))*ds[2]:][:ds[2]], row)
				}
			}
		}
		return dst
	}
	my := widen(mz, box, by, 0)
	mx := widen(my, by, bx, 1)

	// Pass x: indicator sums, taps inside lab only, increasing offset.
	var ind [256]uint8
	for v := range ind {
		if num[v] {
			ind[v] |= 1
		}
		if den[v] {
			ind[v] |= 2
		}
	}
	sx := bx.Size()
	// One slab for the six pass buffers: x pass on bx, y on by, z on box.
	nbx, nby, nbz := bx.Voxels(), by.Voxels(), box.Voxels()
	slab := scratch.get(2 * (nbx + nby + nbz))
	defer scratch.put(slab)
	cut := func(n int) []float32 {
		b := slab[:n:n]
		slab = slab[n:]
		return b
	}
	xn, xd := cut(nbx), cut(nbx)
	lo, hi := lab.Box.Min[2], lab.Box.Max[2]
	i := 0
	for z := bx.Min[0]; z < bx.Max[0]; z++ {
		for y := bx.Min[1]; y < bx.Max[1]; y++ {
			m := mx[i : i+sx[2]]
			if !anySet(m) {
				i += sx[2]
				continue
			}
			row := lab.Pix[lab.Index(z, y, lo):][:hi-lo]
			for x := bx.Min[2]; x < bx.Max[2]; x++ {
				if m[x-bx.Min[2]] == 0 {
					continue
				}
				a, b := max(x-r, lo), min(x+r, hi-1)
				var sn, sd float64
				for t := a; t <= b; t++ {
					c := ind[row[t-lo]]
					w := k[t-x+r]
					if c&1 != 0 {
						sn += w
					}
					if c&2 != 0 {
						sd += w
					}
				}
				xn[i+x-bx.Min[2]] = float32(sn)
				xd[i+x-bx.Min[2]] = float32(sd)
			}
			i += sx[2]
		}
	}
	// Passes y and z: per masked voxel, the taps in increasing order,
	// accumulated in float64 as Smooth does row by row. Scratch values off
	// the masks are never read.
	colPass := func(srcN, srcD []float32, sb volume.Box, db volume.Box, mask []uint8, axis int) ([]float32, []float32) {
		ss, ds := sb.Size(), db.Size()
		dn, dd := cut(db.Voxels()), cut(db.Voxels())
		lo, hi := sb.Min[axis], sb.Max[axis]
		var offs [2*maxScratchRadius + 1]int
		var ws [2*maxScratchRadius + 1]float64
		j := 0
		for z := db.Min[0]; z < db.Max[0]; z++ {
			for y := db.Min[1]; y < db.Max[1]; y++ {
				m := mask[j : j+ds[2]]
				j0 := j
				j += ds[2]
				if !anySet(m) {
					continue
				}
				c := [2]int{z, y}[axis]
				a, b := max(c-r, lo), min(c+r, hi-1)
				nt := 0
				for t := a; t <= b; t++ {
					zz, yy := z, y
					if axis == 0 {
						zz = t
					} else {
						yy = t
					}
					offs[nt] = ((zz-sb.Min[0])*ss[1] + (yy - sb.Min[1])) * ss[2]
					ws[nt] = k[t-c+r]
					nt++
				}
				on, od := dn[j0:][:ds[2]], dd[j0:][:ds[2]]
				for x, v := range m {
					if v == 0 {
						continue
					}
					var an, ad float64
					for t := 0; t < nt; t++ {
						o := offs[t] + x
						an += ws[t] * float64(srcN[o])
						ad += ws[t] * float64(srcD[o])
					}
					on[x] = float32(an)
					od[x] = float32(ad)
				}
			}
		}
		return dn, dd
	}
	yn, yd := colPass(xn, xd, bx, by, my, 1)
	zn, zd := colPass(yn, yd, by, box, mz, 0)
	for i, v := range mz {
		if v == 0 {
			continue
		}
		if w := zd[i]; w < MinWeight {
			out.Pix[i] = nan
		} else {
			out.Pix[i] = float32(float64(zn[i]) / float64(w))
		}
	}
	return out
}

// anySet reports whether m has a non-zero byte, eight bytes at a time.
func anySet(m []uint8) bool {
	i := 0
	for ; i+8 <= len(m); i += 8 {
		if binary.LittleEndian.Uint64(m[i:]) != 0 {
			return true
		}
	}
	for _, v := range m[i:] {
		if v != 0 {
			return true
		}
	}
	return false
}

// orRow sets d[x] |= s[x], eight bytes at a time.
func orRow(d, s []uint8) {
	s = s[:len(d)]
	i := 0
	for ; i+8 <= len(d); i += 8 {
		binary.LittleEndian.PutUint64(d[i:], binary.LittleEndian.Uint64(d[i:])|binary.LittleEndian.Uint64(s[i:]))
	}
	for ; i < len(d); i++ {
		d[i] |= s[i]
	}
}
