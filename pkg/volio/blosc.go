package volio

import (
	"bytes"
	"compress/zlib"
	"encoding/binary"
	"errors"
	"fmt"
	"io"

	"github.com/klauspost/compress/zstd"
	"github.com/pierrec/lz4/v4"
)

// Blosc (version 1 chunk format, as c-blosc 1.x and numcodecs write it;
// Blosc chunk format description, "README_CHUNK_FORMAT" of c-blosc):
//
//	byte 0   format version (1 or 2)
//	byte 1   version of the inner codec's format
//	byte 2   flags: 0x01 byte shuffle, 0x02 stored without compression
//	         (memcpyed), 0x04 bit shuffle, 0x10 blocks not split, bits 5–7
//	         the inner codec (0 blosclz, 1 lz4/lz4hc, 2 snappy, 3 zlib, 4 zstd)
//	byte 3   typesize (bytes per element, for the shuffles)
//	4..7     nbytes, the decompressed size (uint32 little endian)
//	8..11    blocksize
//	12..15   cbytes, the whole compressed size including this header
//
// Unless memcpyed, nblocks int32 offsets (from the start of the buffer) of
// the blocks follow. A block of blocksize bytes (the last one may be
// shorter) is, unless the 0x10 flag is set, split into typesize streams of
// blocksize/typesize bytes (a short last block never is); each stream is
// an int32 compressed length and that many bytes, stored as they are when
// the length equals the stream's decompressed size. After decompression a
// block is unshuffled (byte or bit) with the header's typesize.

const bloscHeader = 16

// Flag bits and codec codes of the Blosc header.
const (
	bloscShuffle    = 0x01
	bloscMemcpyed   = 0x02
	bloscBitShuffle = 0x04
	bloscNoSplit    = 0x10
)

var bloscCodecs = [8]string{"blosclz", "lz4", "snappy", "zlib", "zstd", "code 5", "code 6", "code 7"}

// errBlosc marks a malformed Blosc buffer, errBloscShort one that ends
// before the data its header promises.
var (
	errBlosc      = errors.New("bad Blosc buffer")
	errBloscShort = errors.New("truncated Blosc buffer")
)

func bloscErr(format string, args ...any) error {
	return fmt.Errorf("%w: %s", errBlosc, fmt.Sprintf(format, args...))
}

// bloscSize returns the decompressed size a Blosc buffer declares.
func bloscSize(src []byte) (int, error) {
	if len(src) < bloscHeader {
		return 0, bloscErr("%d bytes, shorter than the 16-byte header", len(src))
	}
	return int(binary.LittleEndian.Uint32(src[4:])), nil
}

// bloscDecode decompresses a Blosc buffer whose decompressed size must be
// exactly want bytes. zdec decodes zstd streams (shared by the caller).
func bloscDecode(src []byte, want int, zdec *zstd.Decoder) ([]byte, error) {
	if len(src) < bloscHeader {
		return nil, bloscErr("%d bytes, shorter than the 16-byte header", len(src))
	}
	version, flags, typesize := src[0], src[2], int(src[3])
	nbytes := int(binary.LittleEndian.Uint32(src[4:]))
	blocksize := int(binary.LittleEndian.Uint32(src[8:]))
	cbytes := int(binary.LittleEndian.Uint32(src[12:]))
	switch {
	case version == 0 || version > 2:
		return nil, bloscErr("format version %d (this reader takes the Blosc 1 formats 1 and 2)", version)
	case nbytes != want:
		return nil, bloscErr("holds %d bytes, want %d", nbytes, want)
	case cbytes != len(src):
		if cbytes > len(src) {
			return nil, fmt.Errorf("%w: %d bytes, the header declares %d", errBloscShort, len(src), cbytes)
		}
		return nil, bloscErr("%d bytes, header says %d", len(src), cbytes)
	case typesize == 0:
		return nil, bloscErr("typesize 0")
	}
	out := make([]byte, nbytes)
	if flags&bloscMemcpyed != 0 {
		if len(src)-bloscHeader != nbytes {
			return nil, bloscErr("stored buffer of %d bytes, want %d", len(src)-bloscHeader, nbytes)
		}
		copy(out, src[bloscHeader:])
		return out, nil
	}
	if nbytes == 0 {
		return out, nil
	}
	if blocksize <= 0 {
		return nil, bloscErr("blocksize %d", blocksize)
	}
	codec := int(flags >> 5)
	switch codec {
	case 0, 1, 3, 4:
	default:
		return nil, bloscErr("inner codec %s not supported (want blosclz, lz4, lz4hc, zlib or zstd)", bloscCodecs[codec])
	}
	nblocks := (nbytes + blocksize - 1) / blocksize
	if nblocks > (len(src)-bloscHeader)/4 {
		return nil, bloscErr("%d blocks do not fit in %d bytes", nblocks, len(src))
	}
	tmp := make([]byte, min(blocksize, nbytes))
	for b := 0; b < nblocks; b++ {
		start := int(binary.LittleEndian.Uint32(src[bloscHeader+4*b:]))
		bsize := min(blocksize, nbytes-b*blocksize)
		leftover := bsize < blocksize
		nsplits := 1
		if flags&bloscNoSplit == 0 && !leftover && typesize > 1 && bsize%typesize == 0 {
			nsplits = typesize
		}
		if start < bloscHeader+4*nblocks || start > len(src) {
			return nil, bloscErr("block %d starts at %d, outside %d bytes", b, start, len(src))
		}
		shuffled := flags&bloscShuffle != 0 && typesize > 1 || flags&bloscBitShuffle != 0 && bsize >= typesize
		dst := out[b*blocksize : b*blocksize+bsize]
		if shuffled {
			dst = tmp[:bsize]
		}
		pos := start
		neblock := bsize / nsplits
		for s := 0; s < nsplits; s++ {
			if pos+4 > len(src) {
				return nil, fmt.Errorf("%w: block %d ends early", errBloscShort, b)
			}
			csize := int(int32(binary.LittleEndian.Uint32(src[pos:])))
			pos += 4
			if csize < 0 || csize > len(src)-pos {
				return nil, bloscErr("block %d stream %d of %d bytes outside the buffer", b, s, csize)
			}
			stream := src[pos : pos+csize]
			pos += csize
			part := dst[s*neblock : (s+1)*neblock]
			if csize == neblock {
				copy(part, stream)
				continue
			}
			if err := bloscInner(codec, stream, part, zdec); err != nil {
				return nil, fmt.Errorf("%w: block %d: %v", errBlosc, b, err)
			}
		}
		if shuffled {
			final := out[b*blocksize : b*blocksize+bsize]
			if flags&bloscShuffle != 0 && typesize > 1 {
				byteUnshuffle(final, dst, typesize)
			} else {
				bitUnshuffle(final, dst, typesize)
			}
		}
	}
	return out, nil
}

// bloscInner decompresses one stream into dst, which it must fill exactly.
func bloscInner(codec int, src, dst []byte, zdec *zstd.Decoder) error {
	var n int
	var err error
	switch codec {
	case 0:
		n, err = blosclzDecode(src, dst)
	case 1:
		n, err = lz4.UncompressBlock(src, dst)
	case 3:
		var r io.ReadCloser
		if r, err = zlib.NewReader(bytes.NewReader(src)); err == nil {
			n, err = io.ReadFull(r, dst)
			if err == nil {
				// Nothing may follow.
				var one [1]byte
				if m, _ := r.Read(one[:]); m != 0 {
					err = fmt.Errorf("zlib stream longer than %d bytes", len(dst))
				}
			}
			r.Close()
		}
	case 4:
		if zdec == nil {
			return fmt.Errorf("no zstd decoder")
		}
		var b []byte
		b, err = zdec.DecodeAll(src, make([]byte, 0, len(dst)))
		if err == nil && len(b) != len(dst) {
			err = fmt.Errorf("zstd stream of %d bytes, want %d", len(b), len(dst))
		}
		n = copy(dst, b)
	}
	if err != nil {
		return fmt.Errorf("%s: %v", bloscCodecs[codec], err)
	}
	if n != len(dst) {
		return fmt.Errorf("%s: %d bytes, want %d", bloscCodecs[codec], n, len(dst))
	}
	return nil
}

// byteUnshuffle undoes Blosc's byte shuffle of one block: byte j of element
// i was stored at j*n + i (n whole elements); a tail shorter than one
// element is stored as it is.
func byteUnshuffle(dst, src []byte, typesize int) {
	n := len(src) / typesize
	switch typesize {
	case 2: // uint16 scans: two planes interleaved, without the general loop's index arithmetic
		lo, hi, d := src[:n], src[n:2*n], dst[:2*n]
		for i := range lo {
			d[2*i] = lo[i]
			d[2*i+1] = hi[i]
		}
		copy(dst[2*n:], src[2*n:])
		return
	case 4:
		p0, p1, p2, p3, d := src[:n], src[n:2*n], src[2*n:3*n], src[3*n:4*n], dst[:4*n]
		for i := range p0 {
			d[4*i] = p0[i]
			d[4*i+1] = p1[i]
			d[4*i+2] = p2[i]
			d[4*i+3] = p3[i]
		}
		copy(dst[4*n:], src[4*n:])
		return
	}
	for j := 0; j < typesize; j++ {
		plane := src[j*n : (j+1)*n]
		for i, c := range plane {
			dst[i*typesize+j] = c
		}
	}
	copy(dst[n*typesize:], src[n*typesize:])
}

// bitUnshuffle undoes the bit shuffle (Masui et al. 2015, Astronomy and
// Computing 12:181, as c-blosc applies it): of n elements, bit k of byte j
// of element i was stored at bit position (j*8+k)*n + i, least significant
// bit first within each byte; bytes after the last whole element are
// stored as they are. c-blosc leaves a block whose element count is not a
// multiple of 8 unshuffled (found against numcodecs: a 40037-byte block
// of typesize 1 is stored as it is).
func bitUnshuffle(dst, src []byte, typesize int) {
	n := len(src) / typesize
	if n%8 != 0 {
		copy(dst, src)
		return
	}
	clear(dst[:n*typesize])
	for j := 0; j < typesize; j++ {
		for k := 0; k < 8; k++ {
			row := src[(j*8+k)*n/8 : (j*8+k+1)*n/8]
			mask := byte(1) << k
			for ib, c := range row {
				if c == 0 {
					continue
				}
				for b := 0; b < 8; b++ {
					if c&(1<<b) != 0 {
						dst[(ib*8+b)*typesize+j] |= mask
					}
				}
			}
		}
	}
	copy(dst[n*typesize:], src[n*typesize:])
}

// blosclzDecode decodes one BloscLZ stream into dst (an LZ77 format after
// FastLZ level 2, described in c-blosc's blosclz.c): the first byte's low 5
// bits are the first control byte. A control byte below 32 starts a run of
// ctrl+1 literal bytes; otherwise it is a match: length (ctrl>>5)+2, with 7
// meaning more length bytes follow (each added, 255 continues), then a
// distance byte; distance = (ctrl&31)<<8 + byte + 1, and when both are at
// their maximum (31, 255) two more big-endian bytes give a far distance
// 8191 + their value + 1. Matches may overlap their output.
func blosclzDecode(src, dst []byte) (int, error) {
	if len(src) == 0 {
		return 0, fmt.Errorf("empty stream")
	}
	ip, op := 1, 0
	ctrl := int(src[0] & 31)
	for {
		if ctrl >= 32 {
			length := (ctrl >> 5) - 1
			ofs := (ctrl & 31) << 8
			if length == 6 {
				for {
					if ip >= len(src) {
						return op, fmt.Errorf("stream ends in a match length")
					}
					c := int(src[ip])
					ip++
					length += c
					if c != 255 {
						break
					}
					if length > len(dst) {
						return op, fmt.Errorf("match longer than the output")
					}
				}
			}
			if ip >= len(src) {
				return op, fmt.Errorf("stream ends in a match distance")
			}
			code := int(src[ip])
			ip++
			length += 3
			dist := ofs + code + 1
			if code == 255 && ofs == 31<<8 {
				if ip+2 > len(src) {
					return op, fmt.Errorf("stream ends in a far distance")
				}
				dist = int(src[ip])<<8 + int(src[ip+1]) + 8191 + 1
				ip += 2
			}
			if dist > op {
				return op, fmt.Errorf("match distance %d before the start at %d", dist, op)
			}
			if length > len(dst)-op {
				return op, fmt.Errorf("match of %d bytes past the output end", length)
			}
			ref := op - dist
			if dist >= length {
				copy(dst[op:op+length], dst[ref:ref+length])
			} else {
				for i := 0; i < length; i++ {
					dst[op+i] = dst[ref+i]
				}
			}
			op += length
		} else {
			n := ctrl + 1
			if n > len(src)-ip {
				return op, fmt.Errorf("literal run past the stream end")
			}
			if n > len(dst)-op {
				return op, fmt.Errorf("literal run past the output end")
			}
			copy(dst[op:], src[ip:ip+n])
			ip += n
			op += n
		}
		if ip >= len(src) {
			break
		}
		ctrl = int(src[ip])
		ip++
	}
	return op, nil
}
