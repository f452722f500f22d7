// Package volio reads and writes grey-value and label volumes: raw binary,
// stacks of 2-D TIFF slices and multi-page TIFF files, Zarr v2 arrays, Zarr
// v3 arrays (read only), and
// (read only, in builds with HDF5 support) 3-D datasets of HDF5 files.
//
// Every reader first reads a small header, checks shape × dtype against the
// file size and against Options.MaxVoxels, and only then allocates (the
// habit of image.DecodeConfig). OpenStream reads a volume slab by slab for
// ingest; Open reads it whole. Errors are one line naming the file:
//
//	volio: scan.raw: truncated raw volume: got 1048576 of 2097152 bytes
//
// and unwrap to ErrTruncated, ErrFormat, ErrTooLarge or an fs error.
//
// # Raw volumes
//
// A raw volume is nz·ny·nx voxels in C order (x fastest, then y, then z),
// each uint8, uint16 or float32 (IEEE 754) in little- or big-endian byte
// order, optionally after a fixed number of leading bytes. Its description
// comes from Options or from a JSON header of sluice's own design stored
// next to it as <file>.sluice.json:
//
//	{
//	  "shape": [nz, ny, nx],          required
//	  "dtype": "uint16",              required: uint8, uint16 or float32
//	  "byte_order": "little",         little (default) or big
//	  "voxel_size": "2.5um",          voxel edge with a unit: nm, um, mm or m
//	  "time_s": 1830.5,               acquisition time in seconds, optional
//	  "header_bytes": 0               bytes to skip before the first voxel
//	}
//
// Unknown fields are rejected (to catch typos). The file must hold exactly
// header_bytes + nz·ny·nx·size bytes: fewer is ErrTruncated, more is
// ErrFormat. WriteRaw writes both files.
//
// # TIFF stacks
//
// A directory of single-image TIFF files (.tif/.tiff), one per z slice,
// sorted in natural order of the file names ("z2" before "z10"). When the
// names differ only in one run of digits, the numbers must be consecutive
// (a gap is a missing slice); every slice's header is checked against the
// first when the stack is opened, before any voxel is read. Each slice
// is 8- or 16-bit unsigned grey or 32-bit IEEE float (SampleFormat 3), as in
// the TIFF 6.0 specification (Adobe, 1992). Uncompressed and Deflate strips
// (with or without horizontal-differencing predictor) are decoded by our own
// baseline reader, which checks every offset against the file size; other
// 8/16-bit encodings (LZW, PackBits, tiles) go through golang.org/x/image/tiff;
// any other compression (JPEG, CCITT, …) is refused when the slice is opened.
// A single .tif/.tiff file is a z-stack of its pages (IFDs), one page per
// z slice in file order; every page must have the first page's size, bit
// depth and sample format, and the whole chain of IFDs is read and checked
// against the voxel limit before any voxel is (a loop in the chain is an
// error). A slice of a stack directory must hold one page. BigTIFF (magic
// 43, 64-bit offsets, 20-byte IFD entries, LONG8 values) is read by our
// baseline reader when uncompressed or Deflate in strips; other BigTIFF
// encodings are refused when the file is opened.
// Voxel size and time, which TIFF tags do not carry, come from an optional
// stack.sluice.json inside the directory ({"shape", "dtype", "voxel_size",
// "time_s"}, all optional; shape and dtype must agree with the slices) or
// from Options. EncodeTIFF, EncodeTIFFPages (one file, one page per slice)
// and WriteTIFFStack write uncompressed,
// little-endian, single-strip baseline TIFF.
//
// # Zarr v2
//
// A 3-D array per the Zarr storage specification version 2
// (zarr.readthedocs.io, "Zarr Storage Specification Version 2"): a .zarray
// JSON document (zarr_format 2, shape, chunks, dtype "|u1", "<u2", ">u2",
// "<f4" or ">f4", compressor null or {"id": "zstd", "level": N} — zlib,
// gzip and blosc are also read — fill_value, order "C", filters null,
// dimension_separator "." or "/") and one key per chunk, "iz.iy.ix" or
// "iz/iy/ix". Chunks are always stored at full chunk shape, edge chunks
// padded with the fill value; missing chunks read as the fill value, unless
// Options.RequireChunks is set (a scan handed over for measurement is
// complete: the CLI and ingest set it). Chunks longer than the array along
// any axis are refused. We write
// "/" separators, little-endian dtypes and .zattrs holding "voxel_size"
// ("2.5um") and "time_s" besides any caller attributes. The zstd codec is
// the Zstandard frame format of RFC 8878 (github.com/klauspost/compress/zstd).
// Blosc chunks (zarr-python's default compressor) are decoded by our own
// reader of the Blosc 1 chunk format (blosc.go): header, block offsets,
// split streams, byte and bit unshuffle, with the inner codecs blosclz (our
// decoder), lz4 and lz4hc (github.com/pierrec/lz4/v4), zlib (standard
// library) and zstd; snappy is refused.
//
// Storage goes through Bucket, a two-method key-value interface; Dir is a
// Bucket on a local directory with atomic writes. An object store adapter
// only needs Get and Put.
//
// # Zarr v3
//
// A directory holding zarr.json (Zarr core specification 3.0,
// zarr-specs.readthedocs.io) with node_type "array" is read by our own
// reader (zarr3.go): shape of 3 dimensions (z, y, x); data_type uint8 and
// uint16 read as stored, int8, int16, float32 and float64 read as float32
// (float64 rounded to nearest); chunk_grid "regular"; chunk_key_encoding
// "default" ("c/iz/iy/ix", separator "/" or ".") or "v2" ("iz.iy.ix");
// fill_value as a number, "NaN", "Infinity", "-Infinity" or a hex bit
// pattern; dimension_names (refused when they are z, y, x in another
// order); "attributes" with voxel_size and time_s as for Zarr v2. Codecs:
// transpose (any permutation; composed), bytes (little or big endian), then
// gzip (RFC 1952), zstd (RFC 8878), blosc (the Blosc reader above; the
// chunk's header, not the metadata, says how it was compressed) and crc32c
// (CRC-32C appended little endian, checked); or sharding_indexed in place
// of bytes: inner chunks of chunk_shape with their own codec chain (no
// nested sharding), the index of (offset, nbytes) uint64 pairs per inner
// chunk in C order at the start or end of the shard, encoded with bytes and
// optionally crc32c (checked); an entry of two 2^64−1 is an empty chunk.
// ReadBox reads only the chunks — for sharded arrays each touched shard's
// index and then only the inner chunks — that the box meets, so bands and
// slabs are read with memory bounded by the band and one chunk per reader.
// A missing chunk or shard reads as the fill value even with
// Options.RequireChunks: Zarr v3 writers omit chunks that hold only the
// fill value. Anything else (other codecs, grids, data types, extension
// metadata without must_understand false, storage transformers) is refused
// with ErrFormat naming zarr.json.
//
// # HDF5
//
// A file starting with the HDF5 signature (at offset 0 or after a user
// block of 512·2^k bytes) is read through the HDF5 C library by a small cgo
// binding of our own (hdf5_cgo.go, build tag hdf5; `make build` sets it when
// pkg-config finds hdf5). A build without it refuses such a file in one line
// saying how to get one that reads it. The dataset is Options.Dataset, else
// the NeXus plottable data (root default → entry default → NXdata signal),
// else /exchange/data (Data Exchange). It must be 3-D; uint8 and uint16 are
// read as stored, int8, int16, float32 and float64 as float32 (HDF5 converts
// from any byte order); wider integers and other classes are refused. Every
// filter of the dataset must be loadable (H5Zfilter_avail, which loads
// plugins from HDF5_PLUGIN_PATH or the library's plugin directory) before
// it is opened. Slabs and bands are hyperslab reads; a chunked dataset gets
// a chunk cache of one layer of chunks (at most 256 MiB), so thin bands do
// not decompress a chunk twice. Voxel size and time come from the dataset's
// attributes only with their units (see h5Meta); a unitless voxel_size or
// time is an error (a unitless voxel_size is ignored when Options.VoxelSize
// is given).
//
// # Non-finite grey values
//
// The readers return float32 voxels as stored; CheckFinite reports NaN and
// ±Inf with their count and first position, and sluice refuses such scans
// before segmenting them.
//
// # Memory layout
//
// Volumes are volume.Volume[T] whose Pix is in C order,
// Pix[((z-z0)*NY + (y-y0))*NX + (x-x0)]; ReadSlab and ReadBox return
// volumes whose Box holds global coordinates.
package volio
