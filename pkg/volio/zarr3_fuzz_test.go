package volio

import (
	"encoding/binary"
	"errors"
	"testing"
)

// FuzzZarr3Meta: any zarr.json is either refused with ErrFormat or gives
// metadata the reader can use without further checks: a 3-D shape, a
// supported type, chunks within the byte bound (inner chunks when
// sharded), shards that divide into inner chunks, and a byte order.
func FuzzZarr3Meta(f *testing.F) {
	seedFiles(f, "zarr3_*.json")
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := parseZarr3("zarr.json", data)
		if err != nil {
			if !errors.Is(err, ErrFormat) {
				t.Fatalf("error without ErrFormat: %v", err)
			}
			return
		}
		if m.typ.size == 0 || m.DType.Size() == 0 {
			t.Fatalf("accepted type %q", m.DataType)
		}
		for i := 0; i < 3; i++ {
			if m.Shape[i] < 1 || m.Chunks[i] < 1 {
				t.Fatalf("accepted shape %v chunks %v", m.Shape, m.Chunks)
			}
		}
		if m.Separator != "/" && m.Separator != "." {
			t.Fatalf("separator %q", m.Separator)
		}
		c, chunk := m.codecs, m.Chunks
		if sh := c.shard; sh != nil {
			for i := 0; i < 3; i++ {
				if sh.chunk[i] < 1 || sh.per[i]*sh.chunk[i] != m.Chunks[i] {
					t.Fatalf("shard %v of inner chunks %v × %v", m.Chunks, sh.chunk, sh.per)
				}
			}
			if sh.indexOrder == nil || sh.inner.shard != nil || sh.inner.endian == nil {
				t.Fatalf("shard codecs %+v", sh)
			}
			if n := sh.per[0] * sh.per[1] * sh.per[2]; n > maxShardChunks {
				t.Fatalf("%d inner chunks per shard", n)
			}
			c, chunk = sh.inner, sh.chunk
		} else if c.endian == nil {
			t.Fatalf("no bytes codec accepted: %+v", c)
		}
		if n, ok := mulLimit(chunk, maxChunkBytes/int64(m.typ.size)); !ok || n < 1 {
			t.Fatalf("chunks %v beyond the byte bound", chunk)
		}
		if c.order != nil && len(c.order) != 3 {
			t.Fatalf("order %v", c.order)
		}
	})
}

// FuzzShardIndex: a shard index is refused (ErrFormat or ErrTruncated) or
// every entry is empty (both 2^64−1) or lies inside the data bytes.
func FuzzShardIndex(f *testing.F) {
	var b []byte
	for _, e := range []uint64{0, 32, emptyChunk, emptyChunk, 32, 10} {
		b = binary.LittleEndian.AppendUint64(b, e)
	}
	f.Add(b, uint8(3), false, uint16(42))
	f.Add(crcAppend(b), uint8(3), true, uint16(42))
	f.Add(b[:40], uint8(2), false, uint16(100))
	f.Fuzz(func(t *testing.T, buf []byte, n uint8, crc bool, size uint16) {
		lo, hi := uint64(size)/4, uint64(size)
		e, err := parseShardIndex("shard", buf, int(n), binary.LittleEndian, crc, lo, hi)
		if err != nil {
			if !errors.Is(err, ErrFormat) && !errors.Is(err, ErrTruncated) {
				t.Fatalf("error without a sentinel: %v", err)
			}
			return
		}
		if len(e) != 2*int(n) {
			t.Fatalf("%d entries for %d chunks", len(e), n)
		}
		for i := 0; i < int(n); i++ {
			off, nb := e[2*i], e[2*i+1]
			if off == emptyChunk && nb == emptyChunk {
				continue
			}
			if off < lo || off+nb > hi || off+nb < off {
				t.Fatalf("entry %d (%d, %d) outside %d..%d", i, off, nb, lo, hi)
			}
		}
	})
}
