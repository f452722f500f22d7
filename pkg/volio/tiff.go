package volio

import (
	"bytes"
	"compress/zlib"
	"encoding/binary"
	"errors"
	"fmt"
	"image"
	"io"
	"math"
	"strings"

	xtiff "golang.org/x/image/tiff"

	"sluice/pkg/volume"
)

// TIFF tag numbers and values used here (TIFF 6.0, Adobe 1992; SampleFormat
// from the same specification, section 19).
const (
	tagNewSubfileType  = 254
	tagImageWidth      = 256
	tagImageLength     = 257
	tagBitsPerSample   = 258
	tagCompression     = 259
	tagPhotometric     = 262
	tagStripOffsets    = 273
	tagSamplesPerPixel = 277
	tagRowsPerStrip    = 278
	tagStripByteCounts = 279
	tagPlanarConfig    = 284
	tagPredictor       = 317
	tagTileWidth       = 322
	tagSampleFormat    = 339

	compNone         = 1
	compDeflate      = 8
	compDeflateOld   = 32946
	compLZW          = 5     // read by golang.org/x/image/tiff
	compPackBits     = 32773 // read by golang.org/x/image/tiff
	photoWhiteIsZero = 0
	photoBlackIsZero = 1
	sampleUint       = 1
	sampleFloat      = 3

	typeShort = 3
	typeLong  = 4
	typeLong8 = 16 // BigTIFF
)

// tiffInfo is what we need from one image file directory (one page).
type tiffInfo struct {
	order         binary.ByteOrder
	big           bool // BigTIFF: 8-byte offsets and counts, 20-byte IFD entries
	width, height int
	bits          int
	spp           int
	sampleFormat  int
	compression   int
	photometric   int
	predictor     int
	rowsPerStrip  int
	tiled         bool
	subfile       int   // NewSubfileType; bit 0 marks a reduced-resolution copy
	ifd, next     int64 // offsets of this IFD and of the next one (0: none)
	stripOffsets  []uint64
	stripCounts   []uint64
}

func (t tiffInfo) dtype() volume.DType {
	switch {
	case t.bits == 8 && t.sampleFormat == sampleUint:
		return volume.Uint8
	case t.bits == 16 && t.sampleFormat == sampleUint:
		return volume.Uint16
	case t.bits == 32 && t.sampleFormat == sampleFloat:
		return volume.Float32
	}
	return 0
}

// compressionName names the common TIFF compression codes we do not read
// (TIFF 6.0 section 3 and Technical Note 2; 34712 is JPEG 2000 by common
// practice), for error messages.
func compressionName(c int) string {
	switch c {
	case 2, 3, 4:
		return " (CCITT fax)"
	case 6, 7:
		return " (JPEG)"
	case 34712:
		return " (JPEG 2000)"
	case compLZW:
		return " (LZW)"
	case compPackBits:
		return " (PackBits)"
	}
	return ""
}

// ownPath reports whether our baseline strip reader handles the image;
// otherwise 8/16-bit images go to golang.org/x/image/tiff.
func (t tiffInfo) ownPath() bool {
	return !t.tiled && t.spp == 1 && (t.compression == compNone || t.compression == compDeflate || t.compression == compDeflateOld) &&
		(t.predictor == 1 || (t.predictor == 2 && t.bits != 32))
}

var errTIFFShort = errors.New("short")

// readTIFFInfo parses the header and first IFD of a classic TIFF file of the
// given size. It checks every offset against size and the image against
// limit voxels before anything proportional to the image is allocated.
func readTIFFInfo(r io.ReaderAt, size int64, limit int64) (tiffInfo, error) {
	order, ifd, big, err := readTIFFHeader(r, size)
	if err != nil {
		return tiffInfo{}, err
	}
	return readIFD(r, size, limit, order, big, ifd)
}

// readTIFFHeader reads the byte order, the offset of the first IFD and
// whether the file is a BigTIFF (magic 43, offset size 8, a 16-byte header
// with a 64-bit IFD offset; BigTIFF design by Aware Systems, adopted by
// libtiff 4).
func readTIFFHeader(r io.ReaderAt, size int64) (binary.ByteOrder, int64, bool, error) {
	var hdr [16]byte
	if size < 8 {
		return nil, 0, false, fmt.Errorf("%w: file of %d bytes is shorter than a TIFF header", ErrTruncated, size)
	}
	if _, err := r.ReadAt(hdr[:8], 0); err != nil {
		return nil, 0, false, err
	}
	var order binary.ByteOrder
	big := false
	switch string(hdr[:4]) {
	case "II*\x00":
		order = binary.LittleEndian
	case "MM\x00*":
		order = binary.BigEndian
	case "II+\x00":
		order, big = binary.LittleEndian, true
	case "MM\x00+":
		order, big = binary.BigEndian, true
	default:
		return nil, 0, false, fmt.Errorf("%w: not a TIFF file (magic % x)", ErrFormat, hdr[:4])
	}
	if !big {
		return order, int64(order.Uint32(hdr[4:])), false, nil
	}
	if size < 16 {
		return nil, 0, false, fmt.Errorf("%w: file of %d bytes is shorter than a BigTIFF header", ErrTruncated, size)
	}
	if _, err := r.ReadAt(hdr[:], 0); err != nil {
		return nil, 0, false, err
	}
	if order.Uint16(hdr[4:]) != 8 || order.Uint16(hdr[6:]) != 0 {
		return nil, 0, false, fmt.Errorf("%w: BigTIFF offset size %d, want 8", ErrFormat, order.Uint16(hdr[4:]))
	}
	off := order.Uint64(hdr[8:])
	if off > uint64(size) {
		return nil, 0, false, fmt.Errorf("%w: IFD offset %d outside the file of %d bytes", ErrTruncated, off, size)
	}
	return order, int64(off), true, nil
}

// readIFD parses the image file directory at offset ifd (TIFF 6.0 section
// 2) and validates its image as readTIFFInfo does; the result's next is the
// offset of the following IFD, 0 at the end of the chain.
func readIFD(r io.ReaderAt, size int64, limit int64, order binary.ByteOrder, big bool, ifd int64) (tiffInfo, error) {
	t := tiffInfo{order: order, big: big, ifd: ifd}
	// Classic TIFF: a 2-byte entry count, 12-byte entries with 4-byte
	// counts and values, a 4-byte next offset; BigTIFF: 8, 20, 8 and 8.
	cs, es, vs := int64(2), int64(12), int64(4)
	if big {
		cs, es, vs = 8, 20, 8
	}
	if ifd < 8 || ifd+cs > size {
		return t, fmt.Errorf("%w: IFD offset %d outside the file of %d bytes", ErrTruncated, ifd, size)
	}
	var nb [8]byte
	if _, err := r.ReadAt(nb[:cs], ifd); err != nil {
		return t, err
	}
	var n int64
	if big {
		u := t.order.Uint64(nb[:])
		if u > uint64(size) {
			u = uint64(size)
		}
		n = int64(u)
	} else {
		n = int64(t.order.Uint16(nb[:]))
	}
	if n == 0 || n > 1<<16 || ifd+cs+es*n > size {
		return t, fmt.Errorf("%w: IFD of %d entries at %d does not fit in %d bytes", ErrTruncated, n, ifd, size)
	}
	// The entries and the offset of the next IFD; a file that ends right
	// after the entries has no next IFD.
	entries := make([]byte, es*n+vs)
	if ifd+cs+es*n+vs > size {
		entries = entries[:es*n]
	}
	if _, err := r.ReadAt(entries, ifd+cs); err != nil {
		return t, err
	}
	if len(entries) > int(es*n) {
		if big {
			nx := t.order.Uint64(entries[es*n:])
			if nx > uint64(size) {
				return t, fmt.Errorf("%w: next IFD offset %d outside the file of %d bytes", ErrTruncated, nx, size)
			}
			t.next = int64(nx)
		} else {
			t.next = int64(t.order.Uint32(entries[12*n:]))
		}
	}
	// Defaults of TIFF 6.0; a missing PhotometricInterpretation is read as
	// black-is-zero, the usual meaning for grey scientific images.
	t.spp, t.sampleFormat, t.compression, t.photometric, t.predictor = 1, sampleUint, compNone, photoBlackIsZero, 1
	bitsSeen := false
	for i := int64(0); i < n; i++ {
		e := entries[es*i : es*i+es]
		tag := t.order.Uint16(e)
		typ := t.order.Uint16(e[2:])
		var count int64
		valueAt := 8 // where the value or its offset starts in the entry
		if big {
			c := t.order.Uint64(e[4:])
			if c > uint64(size) {
				c = uint64(size) + 1 // refused below as too many values
			}
			count, valueAt = int64(c), 12
		} else {
			count = int64(t.order.Uint32(e[4:]))
		}
		// values reads the entry's SHORT or LONG values; max bounds count.
		values := func(max int64) ([]uint64, error) {
			var sz int64
			switch typ {
			case typeShort:
				sz = 2
			case typeLong:
				sz = 4
			case typeLong8:
				sz = 8
			default:
				return nil, fmt.Errorf("%w: tag %d has type %d, want SHORT, LONG or LONG8", ErrFormat, tag, typ)
			}
			if count < 1 || count > max {
				return nil, fmt.Errorf("%w: tag %d has %d values, want 1 to %d", ErrFormat, tag, count, max)
			}
			raw := e[valueAt : valueAt+int(vs)]
			if count*sz > vs {
				var off int64
				if big {
					o := t.order.Uint64(e[valueAt:])
					if o > uint64(size) {
						return nil, fmt.Errorf("%w: tag %d values at %d beyond the file of %d bytes", ErrTruncated, tag, o, size)
					}
					off = int64(o)
				} else {
					off = int64(t.order.Uint32(e[8:]))
				}
				if off+count*sz > size {
					return nil, fmt.Errorf("%w: tag %d values at %d+%d beyond the file of %d bytes", ErrTruncated, tag, off, count*sz, size)
				}
				raw = make([]byte, count*sz)
				if _, err := r.ReadAt(raw, off); err != nil {
					return nil, err
				}
			}
			out := make([]uint64, count)
			for k := range out {
				switch sz {
				case 2:
					out[k] = uint64(t.order.Uint16(raw[2*k:]))
				case 4:
					out[k] = uint64(t.order.Uint32(raw[4*k:]))
				default:
					out[k] = t.order.Uint64(raw[8*k:])
				}
			}
			return out, nil
		}
		one := func() (int, error) {
			v, err := values(4)
			if err != nil {
				return 0, err
			}
			return int(v[0]), nil
		}
		var err error
		switch tag {
		case tagImageWidth:
			t.width, err = one()
		case tagImageLength:
			t.height, err = one()
		case tagBitsPerSample:
			var v []uint64
			v, err = values(4)
			if err == nil {
				t.bits, bitsSeen = int(v[0]), true
				for _, b := range v {
					if int(b) != t.bits {
						err = fmt.Errorf("%w: mixed bits per sample %v", ErrFormat, v)
					}
				}
			}
		case tagCompression:
			t.compression, err = one()
		case tagPhotometric:
			t.photometric, err = one()
		case tagSamplesPerPixel:
			t.spp, err = one()
		case tagRowsPerStrip:
			t.rowsPerStrip, err = one()
		case tagPredictor:
			t.predictor, err = one()
		case tagSampleFormat:
			t.sampleFormat, err = one()
		case tagTileWidth:
			t.tiled = true
		case tagNewSubfileType:
			t.subfile, err = one()
		case tagStripOffsets:
			// Each strip holds at least one row, so there are at most
			// size/4 of them in any file that fits (checked again below).
			t.stripOffsets, err = values(size / 2)
		case tagStripByteCounts:
			t.stripCounts, err = values(size / 2)
		}
		if err != nil {
			return t, err
		}
	}
	if !bitsSeen {
		t.bits = 1
	}
	if t.width < 1 || t.height < 1 {
		return t, fmt.Errorf("%w: image of %d×%d pixels", ErrFormat, t.width, t.height)
	}
	if _, ok := mulLimit([3]int{1, t.height, t.width}, limit); !ok {
		return t, fmt.Errorf("%w: slice of %d×%d pixels exceeds the limit of %d voxels", ErrTooLarge, t.width, t.height, limit)
	}
	if t.spp != 1 {
		return t, fmt.Errorf("%w: %d samples per pixel, want 1 (grey)", ErrFormat, t.spp)
	}
	switch t.compression {
	case compNone, compDeflate, compDeflateOld, compLZW, compPackBits:
	default:
		return t, fmt.Errorf("%w: compression %d%s not supported (want none, Deflate, LZW or PackBits)", ErrFormat, t.compression, compressionName(t.compression))
	}
	if t.photometric != photoBlackIsZero && t.photometric != photoWhiteIsZero {
		return t, fmt.Errorf("%w: photometric interpretation %d, want grey (0 or 1)", ErrFormat, t.photometric)
	}
	if t.dtype() == 0 {
		return t, fmt.Errorf("%w: %d-bit samples of format %d, want 8/16-bit unsigned or 32-bit float", ErrFormat, t.bits, t.sampleFormat)
	}
	if t.photometric == photoWhiteIsZero && t.bits == 32 {
		return t, fmt.Errorf("%w: white-is-zero float image", ErrFormat)
	}
	if t.big && !t.ownPath() {
		// golang.org/x/image/tiff reads classic TIFF only: refuse at open.
		return t, fmt.Errorf("%w: BigTIFF with compression %d%s, predictor %d or tiles is not supported (BigTIFF is read uncompressed or Deflate, in strips)", ErrFormat, t.compression, compressionName(t.compression), t.predictor)
	}
	if !t.tiled {
		if t.rowsPerStrip < 1 || t.rowsPerStrip > t.height {
			t.rowsPerStrip = t.height
		}
		strips := (t.height + t.rowsPerStrip - 1) / t.rowsPerStrip
		if len(t.stripOffsets) != strips || len(t.stripCounts) != strips {
			return t, fmt.Errorf("%w: %d strip offsets and %d byte counts for %d strips", ErrFormat, len(t.stripOffsets), len(t.stripCounts), strips)
		}
		for k := range t.stripOffsets {
			if t.stripOffsets[k]+t.stripCounts[k] > uint64(size) {
				return t, fmt.Errorf("%w: strip %d at %d+%d beyond the file of %d bytes", ErrTruncated, k, t.stripOffsets[k], t.stripCounts[k], size)
			}
		}
	}
	return t, nil
}

// readTIFFPages walks the IFD chain of a multi-page TIFF: each page is one
// z slice and must have the first page's size, bit depth and sample format.
// It returns the first page and every page's IFD offset, checking the
// running voxel count against limit page by page, so neither a long chain
// nor a loop in it can make it allocate more than the file's size allows.
func readTIFFPages(r io.ReaderAt, size int64, limit int64) (tiffInfo, []int64, error) {
	first, err := readTIFFInfo(r, size, limit)
	if err != nil {
		return first, nil, err
	}
	ifds := []int64{first.ifd}
	seen := map[int64]int{first.ifd: 1}
	for next := first.next; next != 0; {
		page := len(ifds) + 1
		if p, ok := seen[next]; ok {
			return first, nil, fmt.Errorf("%w: page %d links back to page %d (a loop in the IFD chain)", ErrFormat, page-1, p)
		}
		if _, ok := mulLimit([3]int{page, first.height, first.width}, limit); !ok {
			return first, nil, fmt.Errorf("%w: %d or more pages of %d×%d pixels exceed the limit of %d voxels", ErrTooLarge, page, first.width, first.height, limit)
		}
		t, err := readIFD(r, size, limit, first.order, first.big, next)
		if err != nil {
			return first, nil, pageErr(page, err)
		}
		if t.width != first.width || t.height != first.height || t.bits != first.bits || t.sampleFormat != first.sampleFormat {
			what := ""
			if t.subfile&1 != 0 {
				what = " (a reduced-resolution copy)"
			}
			return first, nil, fmt.Errorf("%w: page %d of %d is %d×%d %v%s, page 1 is %d×%d %v; every page is one z slice and must match the first",
				ErrFormat, page, countPages(r, size, first.order, first.big, next, page), t.width, t.height, t.dtype(), what, first.width, first.height, first.dtype())
		}
		seen[next] = page
		ifds = append(ifds, next)
		next = t.next
	}
	return first, ifds, nil
}

// countPages counts the pages of the chain from the IFD at off (page
// number page) for an error message, stopping at a loop, a bad offset or
// 1<<20 pages.
func countPages(r io.ReaderAt, size int64, order binary.ByteOrder, big bool, off int64, page int) int {
	cs, es, vs := int64(2), int64(12), int64(4)
	if big {
		cs, es, vs = 8, 20, 8
	}
	seen := map[int64]bool{}
	for off >= 8 && off+cs <= size && !seen[off] && page < 1<<20 {
		seen[off] = true
		var nb [8]byte
		if _, err := r.ReadAt(nb[:cs], off); err != nil {
			break
		}
		var n uint64
		if big {
			n = order.Uint64(nb[:])
		} else {
			n = uint64(order.Uint16(nb[:]))
		}
		if n > uint64(size) {
			break
		}
		at := off + cs + es*int64(n)
		var b [8]byte
		if at+vs > size {
			break
		}
		if _, err := r.ReadAt(b[:vs], at); err != nil {
			break
		}
		if big {
			u := order.Uint64(b[:])
			if u > uint64(size) {
				break
			}
			off = int64(u)
		} else {
			off = int64(order.Uint32(b[:]))
		}
		if off == 0 {
			break
		}
		page++
	}
	return page
}

// pageErr puts the page number into an error of readIFD, keeping its kind.
func pageErr(page int, err error) error {
	for _, s := range []error{ErrTruncated, ErrFormat, ErrTooLarge} {
		if errors.Is(err, s) {
			return fmt.Errorf("%w: page %d: %s", s, page, strings.TrimPrefix(err.Error(), s.Error()+": "))
		}
	}
	return fmt.Errorf("page %d: %w", page, err)
}

// pageView shows one page of a multi-page TIFF as the first image of the
// file: golang.org/x/image/tiff decodes the first IFD only, so the header's
// IFD offset (bytes 4 to 8) reads as the page's.
type pageView struct {
	r    io.ReaderAt
	head [8]byte
}

func newPageView(r io.ReaderAt, t tiffInfo) pageView {
	p := pageView{r: r}
	if t.order == binary.BigEndian {
		copy(p.head[:], "MM\x00*")
	} else {
		copy(p.head[:], "II*\x00")
	}
	t.order.PutUint32(p.head[4:], uint32(t.ifd))
	return p
}

func (p pageView) ReadAt(b []byte, off int64) (int, error) {
	n, err := p.r.ReadAt(b, off)
	for i := off; i < 8 && i < off+int64(n); i++ {
		b[i-off] = p.head[i]
	}
	return n, err
}

// decodeTIFF reads the page t of the TIFF in r (of size bytes) into the
// z-slice z of v, whose y and x extents must equal the image's.
func decodeTIFF(r io.ReaderAt, size int64, t tiffInfo, v volume.Any, z int) error {
	if t.ownPath() {
		return decodeStrips(r, t, v, z)
	}
	if t.bits == 32 {
		return fmt.Errorf("%w: float TIFF with compression %d, predictor %d or tiles is not supported", ErrFormat, t.compression, t.predictor)
	}
	if t.big {
		// golang.org/x/image/tiff reads classic TIFF only.
		return fmt.Errorf("%w: BigTIFF with compression %d%s, predictor %d or tiles is not supported (BigTIFF is read uncompressed or Deflate, in strips)", ErrFormat, t.compression, compressionName(t.compression), t.predictor)
	}
	// x/image/tiff parses the IFD again; check its idea of the size before
	// it allocates.
	r = newPageView(r, t)
	cfg, err := xtiff.DecodeConfig(io.NewSectionReader(r, 0, size))
	if err != nil {
		return fmt.Errorf("%w: %w", ErrFormat, err)
	}
	if cfg.Width != t.width || cfg.Height != t.height {
		return fmt.Errorf("%w: image is %d×%d or %d×%d", ErrFormat, t.width, t.height, cfg.Width, cfg.Height)
	}
	img, err := xtiff.Decode(io.NewSectionReader(r, 0, size))
	if err != nil {
		return fmt.Errorf("%w: %w", ErrFormat, err)
	}
	b := img.Bounds()
	if b.Dx() != t.width || b.Dy() != t.height {
		return fmt.Errorf("%w: decoded %v, header says %d×%d", ErrFormat, b, t.width, t.height)
	}
	off := pixOffset(v, z, 0, 0)
	switch m := img.(type) {
	case *image.Gray:
		vv, ok := v.(*volume.Volume[uint8])
		if !ok {
			return fmt.Errorf("%w: 8-bit image into a %v volume", ErrFormat, v.DType())
		}
		for y := 0; y < t.height; y++ {
			copy(vv.Pix[off+y*t.width:][:t.width], m.Pix[y*m.Stride:][:t.width])
		}
	case *image.Gray16:
		vv, ok := v.(*volume.Volume[uint16])
		if !ok {
			return fmt.Errorf("%w: 16-bit image into a %v volume", ErrFormat, v.DType())
		}
		for y := 0; y < t.height; y++ {
			row := m.Pix[y*m.Stride:]
			for x := 0; x < t.width; x++ {
				vv.Pix[off+y*t.width+x] = uint16(row[2*x])<<8 | uint16(row[2*x+1])
			}
		}
	default:
		return fmt.Errorf("%w: decoded a %T, want grey", ErrFormat, img)
	}
	return nil
}

// decodeStrips reads uncompressed or Deflate strips (baseline TIFF 6.0,
// section 3 and 9; Deflate per the Adobe TIFF technical note 2002) with
// predictor 1 or 2 (horizontal differencing, section 14).
func decodeStrips(r io.ReaderAt, t tiffInfo, v volume.Any, z int) error {
	bps := t.bits / 8
	rowBytes := t.width * bps
	off := pixOffset(v, z, 0, 0)
	var buf []byte
	for k := range t.stripOffsets {
		y0 := k * t.rowsPerStrip
		rows := min(t.rowsPerStrip, t.height-y0)
		want := rows * rowBytes
		if cap(buf) < want {
			buf = make([]byte, want)
		}
		buf = buf[:want]
		sr := io.NewSectionReader(r, int64(t.stripOffsets[k]), int64(t.stripCounts[k]))
		if t.compression == compNone {
			if int(t.stripCounts[k]) < want {
				return fmt.Errorf("%w: strip %d has %d bytes, want %d", ErrTruncated, k, t.stripCounts[k], want)
			}
			if _, err := io.ReadFull(sr, buf); err != nil {
				return fmt.Errorf("%w: strip %d: %w", ErrTruncated, k, err)
			}
		} else {
			zr, err := zlib.NewReader(sr)
			if err != nil {
				return fmt.Errorf("%w: strip %d: %w", ErrFormat, k, err)
			}
			_, err = io.ReadFull(zr, buf)
			zr.Close()
			if err != nil {
				return fmt.Errorf("%w: strip %d inflates to fewer than %d bytes: %w", ErrTruncated, k, want, err)
			}
		}
		if t.predictor == 2 {
			undoHorizontal(buf, rows, t.width, bps, t.order)
		}
		decodeAt(v, off+y0*t.width, buf, t.order)
	}
	if t.photometric == photoWhiteIsZero {
		invert(v, off, t.width*t.height)
	}
	return nil
}

// undoHorizontal reverses TIFF predictor 2 on rows of 8- or 16-bit samples.
func undoHorizontal(buf []byte, rows, width, bps int, o binary.ByteOrder) {
	for y := 0; y < rows; y++ {
		row := buf[y*width*bps:][:width*bps]
		if bps == 1 {
			for x := 1; x < width; x++ {
				row[x] += row[x-1]
			}
			continue
		}
		for x := 1; x < width; x++ {
			o.PutUint16(row[2*x:], o.Uint16(row[2*x:])+o.Uint16(row[2*x-2:]))
		}
	}
}

func invert(v volume.Any, off, n int) {
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		for i := off; i < off+n; i++ {
			t.Pix[i] = math.MaxUint8 - t.Pix[i]
		}
	case *volume.Volume[uint16]:
		for i := off; i < off+n; i++ {
			t.Pix[i] = math.MaxUint16 - t.Pix[i]
		}
	}
}

// EncodeTIFF writes slice z of v as a baseline, uncompressed, little-endian
// TIFF with one strip: 8- or 16-bit unsigned grey, or 32-bit IEEE float
// (SampleFormat 3).
func EncodeTIFF(w io.Writer, v volume.Any, z int) error {
	if err := checkVolume(v); err != nil {
		return fmt.Errorf("volio: %w", err)
	}
	b := v.Bounds()
	if z < b.Min[0] || z >= b.Max[0] {
		return fmt.Errorf("volio: slice %d outside %v", z, b)
	}
	return encodePages(w, v, z, z+1)
}

// EncodeTIFFPages writes every z slice of v as one page of a single
// multi-page TIFF (pages in z order, each as EncodeTIFF writes a slice),
// the layout OpenStream reads back as a z-stack.
func EncodeTIFFPages(w io.Writer, v volume.Any) error {
	if err := checkVolume(v); err != nil {
		return fmt.Errorf("volio: %w", err)
	}
	b := v.Bounds()
	return encodePages(w, v, b.Min[0], b.Max[0])
}

// encodePages writes slices z0 <= z < z1 of v as consecutive pages: each
// IFD followed by its strip, padded to an even offset (TIFF 6.0 wants IFDs
// on word boundaries), the last IFD ending the chain with offset 0.
func encodePages(w io.Writer, v volume.Any, z0, z1 int) error {
	b := v.Bounds()
	s := b.Size()
	height, width := s[1], s[2]
	bps := v.DType().Size()
	data := int64(width) * int64(height) * int64(bps)
	format := sampleUint
	if v.DType() == volume.Float32 {
		format = sampleFloat
	}
	type entry struct{ tag, typ, val uint32 }
	entries := []entry{ // sorted by tag, as TIFF requires
		{tagImageWidth, typeLong, uint32(width)},
		{tagImageLength, typeLong, uint32(height)},
		{tagBitsPerSample, typeShort, uint32(8 * bps)},
		{tagCompression, typeShort, compNone},
		{tagPhotometric, typeShort, photoBlackIsZero},
		{tagStripOffsets, typeLong, 0}, // set per page below
		{tagSamplesPerPixel, typeShort, 1},
		{tagRowsPerStrip, typeLong, uint32(height)},
		{tagStripByteCounts, typeLong, uint32(data)},
		{tagPlanarConfig, typeShort, 1},
		{tagSampleFormat, typeShort, uint32(format)},
	}
	ifdLen := int64(2 + 12*len(entries) + 4)
	pageLen := ifdLen + data + data%2
	if 8+int64(z1-z0)*pageLen > math.MaxUint32-1024 {
		return fmt.Errorf("volio: %d pages of %d bytes are too big for a classic TIFF", z1-z0, data)
	}
	le := binary.LittleEndian
	head := make([]byte, 8)
	copy(head, "II*\x00")
	le.PutUint32(head[4:], 8)
	if _, err := w.Write(head); err != nil {
		return err
	}
	ifd := make([]byte, ifdLen)
	row := make([]byte, width*bps)
	for z := z0; z < z1; z++ {
		at := 8 + int64(z-z0)*pageLen // this page's IFD
		le.PutUint16(ifd, uint16(len(entries)))
		for i, e := range entries {
			p := ifd[2+12*i:]
			le.PutUint16(p, uint16(e.tag))
			le.PutUint16(p[2:], uint16(e.typ))
			le.PutUint32(p[4:], 1)
			if e.tag == tagStripOffsets {
				e.val = uint32(at + ifdLen)
			}
			le.PutUint32(p[8:], 0)
			if e.typ == typeShort {
				le.PutUint16(p[8:], uint16(e.val))
			} else {
				le.PutUint32(p[8:], e.val)
			}
		}
		next := uint32(0)
		if z+1 < z1 {
			next = uint32(at + pageLen)
		}
		le.PutUint32(ifd[ifdLen-4:], next)
		if _, err := w.Write(ifd); err != nil {
			return err
		}
		for y := 0; y < height; y++ {
			encodeAt(row, v, pixOffset(v, z, b.Min[1]+y, b.Min[2]), le)
			if _, err := w.Write(row); err != nil {
				return err
			}
		}
		if data%2 == 1 {
			if _, err := w.Write([]byte{0}); err != nil {
				return err
			}
		}
	}
	return nil
}

// decodeTIFFBytes reads a TIFF held in memory, every page one z slice (used
// by the fuzz test and handy for small volumes).
func decodeTIFFBytes(data []byte, limit int64) (volume.Any, error) {
	r := bytes.NewReader(data)
	size := int64(len(data))
	t, ifds, err := readTIFFPages(r, size, limit)
	if err != nil {
		return nil, err
	}
	v := newVolume(t.dtype(), volume.BoxOf(len(ifds), t.height, t.width), 0)
	for z, ifd := range ifds {
		if z > 0 {
			if t, err = readIFD(r, size, limit, t.order, t.big, ifd); err != nil {
				return nil, pageErr(z+1, err)
			}
		}
		if err := decodeTIFF(r, size, t, v, z); err != nil {
			return nil, pageErr(z+1, err)
		}
	}
	return v, nil
}
