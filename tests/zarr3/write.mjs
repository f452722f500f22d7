// Writes Zarr v3 arrays with zarrita (an independent JavaScript Zarr v3
// implementation, pinned in package.json) for the checks of sluice's Zarr
// v3 reader (pkg/volio/zarr3_test.go, services/sluice), and beside each
// array the values it must read as, raw little-endian in the type sluice
// reads them into (uint8, uint16, else float32).
//
//   node write.mjs cases OUTDIR
//       every codec combination × data type; OUTDIR/cases.json lists them
//   node write.mjs array OUT.zarr SPEC.json
//       one array from a raw little-endian file, as SPEC.json says
//       ({"raw", "dtype", "shape", "chunk", "codecs", "sharding", "fill", "attributes"})
//
// Who encodes what (zarrita 0.7.5 and its numcodecs 0.3.2):
//   bytes (both endians), transpose          zarrita
//   zstd, blosc                              numcodecs (wasm builds of libzstd, c-blosc)
//   gzip                                     numcodecs' GZip (fflate): zarrita reads gzip but
//                                            does not write it
//   crc32c                                   this script (zarrita reads crc32c without
//                                            checking it and does not write it)
//   sharding_indexed                         this script lays out the shards: the inner
//                                            chunks are the chunk files zarrita writes for
//                                            a plain array of the inner chunk shape, the
//                                            index is (offset, nbytes) uint64 per inner
//                                            chunk; zarrita does not write shards
// Every array is read back with zarrita (zarr.get, zarrita's own decoders)
// and must equal the values written, fill value in missing chunks and
// padding included, before its raw copy is written — except shards with
// the index at the start, which zarrita cannot read (it reads only an index
// at the end); those hold the same shards as the "end" case of the same
// data, the index moved to the front.
import * as fs from "node:fs";
import * as path from "node:path";
import * as zarr from "zarrita";
import FileSystemStore from "@zarrita/storage/fs";
import GZip from "numcodecs/gzip";

// CRC-32C (Castagnoli, reflected polynomial 0x82F63B78), as the crc32c
// codec specifies. Check value: CRC-32C("123456789") = 0xE3069283 (the
// standard check value of CRC-32C, RFC 3720 family; from memory).
const CRC_TABLE = (() => {
	const t = new Uint32Array(256);
	for (let n = 0; n < 256; n++) {
		let c = n;
		for (let k = 0; k < 8; k++) c = c & 1 ? 0x82f63b78 ^ (c >>> 1) : c >>> 1;
		t[n] = c >>> 0;
	}
	return t;
})();
function crc32c(b) {
	let c = 0xffffffff;
	for (let i = 0; i < b.length; i++) c = CRC_TABLE[(c ^ b[i]) & 0xff] ^ (c >>> 8);
	return (c ^ 0xffffffff) >>> 0;
}
if (crc32c(new TextEncoder().encode("123456789")) !== 0xe3069283) throw new Error("crc32c check value");
function withCRC(b) {
	const out = new Uint8Array(b.length + 4);
	out.set(b);
	new DataView(out.buffer).setUint32(b.length, crc32c(b), true);
	return out;
}

// Writing codecs zarrita lacks, registered only while writing: reading
// goes through zarrita's own gzip and crc32c decoders.
const readers = { gzip: zarr.registry.get("gzip"), crc32c: zarr.registry.get("crc32c") };
const writers = {
	gzip: async () => GZip,
	crc32c: async () => ({
		fromConfig: () => ({
			kind: "bytes_to_bytes",
			encode: async (b) => withCRC(b),
			decode: async (b) => b.subarray(0, b.length - 4),
			computeEncodedSize: (n) => n + 4,
		}),
	}),
};
function forWriting(on) {
	for (const k of Object.keys(writers)) zarr.registry.set(k, on ? writers[k] : readers[k]);
}

const ARRAYS = {
	uint8: Uint8Array, uint16: Uint16Array, int8: Int8Array, int16: Int16Array,
	float32: Float32Array, float64: Float64Array,
};
const OUT_TYPE = { uint8: "uint8", uint16: "uint16" }; // else float32

// mulberry32: a small fixed-seed generator, so the data are reproducible.
function rng(seed) {
	let a = seed >>> 0;
	return () => {
		a = (a + 0x6d2b79f5) >>> 0;
		let t = a;
		t = Math.imul(t ^ (t >>> 15), t | 1);
		t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
		return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
	};
}

// values fills n elements of dtype: the whole integer range; floats with
// both signs, tiny and huge magnitudes, integers, and (float64) values with
// more mantissa bits than float32 holds. With smooth, 80 of every 97
// elements are a slow ramp instead, so that compressors find matches
// (noise alone makes Blosc store its blocks uncompressed).
function values(dtype, n, seed, smooth) {
	const r = rng(seed);
	const a = new ARRAYS[dtype](n);
	for (let i = 0; i < n; i++) {
		if (smooth && i % 97 < 80) {
			a[i] = ((i >> 3) % 50) * (dtype.startsWith("float") ? 0.25 : 1) + (dtype === "int8" || dtype === "int16" ? -20 : 0);
			continue;
		}
		switch (dtype) {
			case "uint8": a[i] = Math.floor(r() * 256); break;
			case "uint16": a[i] = Math.floor(r() * 65536); break;
			case "int8": a[i] = Math.floor(r() * 256) - 128; break;
			case "int16": a[i] = Math.floor(r() * 65536) - 32768; break;
			default:
				switch (i % 4) {
					case 0: a[i] = (r() - 0.5) * 6; break;
					case 1: a[i] = (r() - 0.5) * 2 ** Math.floor(r() * 200 - 100); break;
					case 2: a[i] = Math.floor(r() * 70000); break;
					default: a[i] = -r() * 1e3 - 1 / 3;
				}
		}
	}
	return a;
}

const FILL = { uint8: 0, uint16: 7, int8: -3, int16: -300, float32: NaN, float64: 0.1 };

function cOrder(chunk) {
	// zarr.get returns the array in its native order (transposed arrays
	// come back with permuted strides): copy it into C order.
	const [nz, ny, nx] = chunk.shape;
	const [sz, sy, sx] = chunk.stride;
	const out = new chunk.data.constructor(nz * ny * nx);
	let o = 0;
	for (let z = 0; z < nz; z++)
		for (let y = 0; y < ny; y++)
			for (let x = 0; x < nx; x++) out[o++] = chunk.data[z * sz + y * sy + x * sx];
	return out;
}

function sameBits(a, b) {
	const x = new Uint8Array(a.buffer, a.byteOffset, a.byteLength);
	const y = new Uint8Array(b.buffer, b.byteOffset, b.byteLength);
	if (x.length !== y.length) return false;
	for (let i = 0; i < x.length; i++) if (x[i] !== y[i]) return false;
	return true;
}

// rawOut returns the values as sluice reads them, little-endian.
function rawOut(dtype, a) {
	const t = OUT_TYPE[dtype] ?? "float32";
	const size = { uint8: 1, uint16: 2, float32: 4 }[t];
	const buf = new Uint8Array(a.length * size);
	const dv = new DataView(buf.buffer);
	for (let i = 0; i < a.length; i++) {
		if (t === "uint8") dv.setUint8(i, a[i]);
		else if (t === "uint16") dv.setUint16(2 * i, a[i], true);
		else dv.setFloat32(4 * i, a[i], true); // rounds to nearest float32
	}
	return buf;
}

// setBox sets the elements of box [lo, hi) of a C-order array to v.
function setBox(a, shape, lo, hi, v) {
	for (let z = lo[0]; z < Math.min(hi[0], shape[0]); z++)
		for (let y = lo[1]; y < Math.min(hi[1], shape[1]); y++)
			for (let x = lo[2]; x < Math.min(hi[2], shape[2]); x++) a[(z * shape[1] + y) * shape[2] + x] = v;
}

const key = (idx, sep, enc) => (enc === "v2" ? idx.join(sep) : ["c", ...idx].join(sep));

// Blosc's shuffle is a number for numcodecs and a name in Zarr v3
// metadata: arrays are written with the number, then the metadata says
// the name.
const SHUFFLE_NAME = ["noshuffle", "shuffle", "bitshuffle"];
function metaCodecs(codecs, dtype) {
	return codecs.map((c) =>
		c.name === "blosc"
			? { name: "blosc", configuration: { ...c.configuration, shuffle: SHUFFLE_NAME[c.configuration.shuffle], typesize: ARRAYS[dtype].BYTES_PER_ELEMENT, blocksize: 0 } }
			: c,
	);
}

function rewriteMeta(dir, f) {
	const p = path.join(dir, "zarr.json");
	const m = JSON.parse(fs.readFileSync(p, "utf8"));
	f(m);
	fs.writeFileSync(p, JSON.stringify(m, null, 2));
}

// writeRegular writes data as a plain (unsharded) array through zarrita.
async function writeRegular(dir, spec, data) {
	const store = new FileSystemStore(dir);
	forWriting(true);
	const arr = await zarr.create(store, {
		shape: spec.shape, chunkShape: spec.chunk, dtype: spec.dtype, codecs: spec.codecs,
		fillValue: spec.fill, chunkSeparator: spec.separator ?? "/",
		dimensionNames: spec.dimensionNames, attributes: spec.attributes ?? {},
	});
	const [nz, ny, nx] = spec.shape;
	await zarr.set(arr, null, { data, shape: spec.shape, stride: [ny * nx, nx, 1] });
	forWriting(false);
	rewriteMeta(dir, (m) => {
		m.codecs = metaCodecs(m.codecs, spec.dtype);
		if (spec.keyEncoding === "v2") m.chunk_key_encoding = { name: "v2", configuration: { separator: spec.separator ?? "." } };
	});
	if (spec.keyEncoding === "v2") {
		// zarrita wrote "c/…" keys: move them to the v2 names.
		const g = spec.shape.map((n, i) => Math.ceil(n / spec.chunk[i]));
		for (let a = 0; a < g[0]; a++)
			for (let b = 0; b < g[1]; b++)
				for (let c = 0; c < g[2]; c++) {
					const from = path.join(dir, key([a, b, c], spec.separator ?? "/", "default"));
					const to = path.join(dir, key([a, b, c], spec.separator ?? ".", "v2"));
					fs.mkdirSync(path.dirname(to), { recursive: true });
					fs.renameSync(from, to);
				}
		fs.rmSync(path.join(dir, "c"), { recursive: true, force: true });
	}
}

// writeSharded writes data as a sharded array. spec.sharding: {shard,
// inner, innerCodecs, indexCRC, indexEnd, indexBig}; spec.emptyInner lists
// inner chunks (global inner-grid indices) to store as empty (their data
// must already be the fill value).
async function writeSharded(dir, spec, data) {
	const sh = spec.sharding;
	const scratch = dir + ".inner";
	await writeRegular(scratch, { ...spec, chunk: sh.inner, codecs: sh.innerCodecs, separator: "/", keyEncoding: "default", dimensionNames: undefined }, data);
	const per = sh.shard.map((s, i) => s / sh.inner[i]);
	const grid = spec.shape.map((n, i) => Math.ceil(n / sh.shard[i]));
	const innerGrid = spec.shape.map((n, i) => Math.ceil(n / sh.inner[i]));
	const nPer = per[0] * per[1] * per[2];
	const indexBytes = 16 * nPer + (sh.indexCRC ? 4 : 0);
	const empty = new Set((spec.emptyInner ?? []).map((g) => g.join(",")));
	const sep = spec.separator ?? "/";
	for (let a = 0; a < grid[0]; a++)
		for (let b = 0; b < grid[1]; b++)
			for (let c = 0; c < grid[2]; c++) {
				const chunks = [];
				const index = new Uint8Array(16 * nPer);
				const dv = new DataView(index.buffer);
				let pos = sh.indexEnd ? 0 : indexBytes;
				let k = 0;
				let any = false;
				for (let i = 0; i < per[0]; i++)
					for (let j = 0; j < per[1]; j++)
						for (let l = 0; l < per[2]; l++, k++) {
							const g = [a * per[0] + i, b * per[1] + j, c * per[2] + l];
							const outside = g.some((v, d) => v >= innerGrid[d]);
							let bytes;
							if (!outside && !empty.has(g.join(","))) {
								bytes = fs.readFileSync(path.join(scratch, "c", ...g.map(String)));
							}
							if (bytes === undefined) {
								dv.setBigUint64(16 * k, 0xffffffffffffffffn, !sh.indexBig);
								dv.setBigUint64(16 * k + 8, 0xffffffffffffffffn, !sh.indexBig);
								continue;
							}
							dv.setBigUint64(16 * k, BigInt(pos), !sh.indexBig);
							dv.setBigUint64(16 * k + 8, BigInt(bytes.length), !sh.indexBig);
							chunks.push(bytes);
							pos += bytes.length;
							any = true;
						}
				if (!any) continue; // a shard of empty chunks is not stored
				const idx = sh.indexCRC ? withCRC(index) : index;
				const parts = sh.indexEnd ? [...chunks, idx] : [idx, ...chunks];
				const file = path.join(dir, key([a, b, c], sep, "default"));
				fs.mkdirSync(path.dirname(file), { recursive: true });
				fs.writeFileSync(file, Buffer.concat(parts));
			}
	fs.rmSync(scratch, { recursive: true });
	// The metadata: zarrita's create, then the sharding codec.
	const store = new FileSystemStore(dir);
	await zarr.create(store, {
		shape: spec.shape, chunkShape: sh.shard, dtype: spec.dtype, codecs: [],
		fillValue: spec.fill, chunkSeparator: sep, dimensionNames: spec.dimensionNames, attributes: spec.attributes ?? {},
	});
	const indexCodecs = [{ name: "bytes", configuration: { endian: sh.indexBig ? "big" : "little" } }];
	if (sh.indexCRC) indexCodecs.push({ name: "crc32c" });
	rewriteMeta(dir, (m) => {
		m.codecs = [{
			name: "sharding_indexed",
			configuration: {
				chunk_shape: sh.inner, codecs: metaCodecs(sh.innerCodecs, spec.dtype),
				index_codecs: indexCodecs, index_location: sh.indexEnd ? "end" : "start",
			},
		}];
	});
}

// writeCase writes one array, removes the chunks spec.missing names
// (files relative to the array), checks zarrita's reading where it can and
// writes NAME.expected. It returns the case's entry for cases.json.
async function writeCase(root, name, spec, data) {
	const dir = path.join(root, name + ".zarr");
	const want = data.slice();
	for (const box of spec.fillBoxes ?? []) setBox(want, spec.shape, box[0], box[1], spec.fill);
	for (const box of spec.fillBoxes ?? []) setBox(data, spec.shape, box[0], box[1], spec.fill);
	if (spec.sharding) await writeSharded(dir, spec, data);
	else await writeRegular(dir, spec, data);
	for (const m of spec.missing ?? []) {
		fs.rmSync(path.join(dir, m.file));
		setBox(want, spec.shape, m.box[0], m.box[1], spec.fill);
	}
	let checked = false;
	if (!spec.sharding || spec.sharding.indexEnd) {
		const arr = await zarr.open(new FileSystemStore(dir), { kind: "array" });
		const got = cOrder(await zarr.get(arr));
		if (!sameBits(got, want)) throw new Error(`${name}: zarrita reads other values than were written`);
		checked = true;
	}
	fs.writeFileSync(path.join(root, name + ".expected"), rawOut(spec.dtype, want));
	return { name, path: dir, expected: path.join(root, name + ".expected"), dtype: spec.dtype, out: OUT_TYPE[spec.dtype] ?? "float32", shape: spec.shape, zarrita_read: checked, missing: (spec.missing ?? []).map((m) => m.file) };
}

const LE = { name: "bytes", configuration: { endian: "little" } };
const BE = { name: "bytes", configuration: { endian: "big" } };
const T201 = { name: "transpose", configuration: { order: [2, 0, 1] } };
const T120 = { name: "transpose", configuration: { order: [1, 2, 0] } };
const GZ = { name: "gzip", configuration: { level: 5 } };
const ZS = { name: "zstd", configuration: { level: 3, checksum: false } };
const CRC = { name: "crc32c" };
const blosc = (cname, shuffle) => ({ name: "blosc", configuration: { cname, clevel: 5, shuffle } });

// Plain arrays: shape 9×10×11 in chunks 4×4×5 (partial chunks at every far
// edge), chunk (1,0,1) removed after writing.
const REGULAR = {
	le: { codecs: [LE] },
	be: { codecs: [BE] },
	t201_le: { codecs: [T201, LE] },
	t120_be_gzip: { codecs: [T120, BE, GZ] },
	gzip: { codecs: [LE, GZ] },
	zstd: { codecs: [LE, ZS] },
	be_zstd: { codecs: [BE, ZS] },
	blosc_lz4_shuffle: { codecs: [LE, blosc("lz4", 1)] },
	blosc_zstd_bitshuffle: { codecs: [LE, blosc("zstd", 2)] },
	blosc_blosclz_noshuffle: { codecs: [LE, blosc("blosclz", 0)] },
	blosc_zlib_shuffle: { codecs: [BE, blosc("zlib", 1)] },
	blosc_lz4hc_bitshuffle: { codecs: [LE, blosc("lz4hc", 2)] },
	crc32c: { codecs: [LE, CRC] },
	zstd_crc32c: { codecs: [LE, ZS, CRC] },
	v2_dot_gzip: { codecs: [LE, GZ], keyEncoding: "v2", separator: "." },
	v2_slash: { codecs: [LE], keyEncoding: "v2", separator: "/" },
	default_dot: { codecs: [LE, ZS], separator: "." },
};

// Sharded arrays: shape 13×10×17 in shards 8×8×12 of inner chunks 4×4×6
// (partial shards and inner chunks at the far edges; inner chunks wholly
// outside the array are empty); inner chunk (0,1,0) is stored empty (its
// data set to the fill value) and shard (1,0,1) removed after writing.
const SHARDED = {
	sh_le_crcidx: { innerCodecs: [LE], indexCRC: true, indexEnd: true },
	sh_be_zstd: { innerCodecs: [BE, ZS], indexCRC: false, indexEnd: true },
	sh_t201_gzip_crcidx: { innerCodecs: [T201, LE, GZ], indexCRC: true, indexEnd: true },
	sh_blosc_lz4_crcidx: { innerCodecs: [LE, blosc("lz4", 1)], indexCRC: true, indexEnd: true },
	sh_zstd_crc32c_crcidx: { innerCodecs: [LE, ZS, CRC], indexCRC: true, indexEnd: true },
	sh_le_crcidx_start: { innerCodecs: [LE], indexCRC: true, indexEnd: false },
	sh_zstd_bigidx_start: { innerCodecs: [LE, ZS], indexCRC: false, indexEnd: false, indexBig: true },
	sh_blosc_zstd_crcidx_start: { innerCodecs: [LE, blosc("zstd", 2)], indexCRC: true, indexEnd: false },
};

async function cases(root) {
	fs.mkdirSync(root, { recursive: true });
	const out = [];
	let seed = 1;
	for (const dtype of Object.keys(ARRAYS)) {
		for (const [label, c] of Object.entries(REGULAR)) {
			const shape = [9, 10, 11];
			const chunk = [4, 4, 5];
			const sep = c.separator ?? "/";
			const enc = c.keyEncoding ?? "default";
			const spec = {
				dtype, shape, chunk, codecs: c.codecs, fill: FILL[dtype], separator: sep, keyEncoding: enc,
				dimensionNames: label === "le" ? ["z", "y", "x"] : undefined,
				attributes: label === "le" ? { voxel_size: "2.5um", time_s: 12.5 } : {},
				missing: [{ file: key([1, 0, 1], sep, enc), box: [[4, 0, 5], [8, 4, 10]] }],
			};
			const smooth = c.codecs.some((x) => x.name !== "bytes" && x.name !== "transpose" && x.name !== "crc32c");
			out.push(await writeCase(root, `${dtype}_${label}`, spec, values(dtype, 9 * 10 * 11, seed++, smooth)));
		}
		for (const [label, s] of Object.entries(SHARDED)) {
			const shape = [13, 10, 17];
			const spec = {
				dtype, shape, fill: FILL[dtype],
				sharding: { shard: [8, 8, 12], inner: [4, 4, 6], ...s },
				emptyInner: [[0, 1, 0]],
				fillBoxes: [[[0, 4, 0], [4, 8, 6]]],
				missing: [{ file: "c/1/0/1", box: [[8, 0, 12], [16, 8, 24]] }],
			};
			// The "start" cases hold the data of the matching "end" case.
			const smooth = s.innerCodecs.some((x) => x.name !== "bytes" && x.name !== "transpose" && x.name !== "crc32c");
			out.push(await writeCase(root, `${dtype}_${label}`, spec, values(dtype, 13 * 10 * 17, 1000 + seed++, smooth)));
		}
	}
	fs.writeFileSync(path.join(root, "cases.json"), JSON.stringify(out, null, 1));
	console.log(out.length);
}

// array: one array from a raw file, for the command-line checks.
async function array(dir, specFile) {
	const s = JSON.parse(fs.readFileSync(specFile, "utf8"));
	const raw = fs.readFileSync(s.raw);
	const Ctor = ARRAYS[s.dtype];
	const data = new Ctor(raw.buffer.slice(raw.byteOffset, raw.byteOffset + raw.byteLength));
	if (data.length !== s.shape[0] * s.shape[1] * s.shape[2]) throw new Error(`${s.raw}: ${data.length} elements, shape ${s.shape}`);
	const root = path.dirname(dir);
	const name = path.basename(dir).replace(/\.zarr$/, "");
	const spec = { ...s, fill: s.fill ?? 0 };
	if (s.sharding) spec.sharding = { indexEnd: true, indexCRC: true, ...s.sharding };
	const c = await writeCase(root, name, spec, data);
	fs.rmSync(c.expected);
	if (c.path !== dir) fs.renameSync(c.path, dir);
}

const [mode, a, b] = process.argv.slice(2);
if (mode === "cases" && a) await cases(a);
else if (mode === "array" && a && b) await array(a, b);
else {
	console.error("usage: node write.mjs cases OUTDIR | node write.mjs array OUT.zarr SPEC.json");
	process.exit(2);
}
