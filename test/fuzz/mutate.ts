/**
 * Mutations of seed archives. Two layers:
 *
 * - structural: on the decoded model (payload bytes, the raw data inside
 *   DEFLATE sections, coded streams and the words around them, the fixed
 *   part of payloads, header and index
 *   values, MessagePack encodings, container words), after which offsets,
 *   lengths and CRCs are recomputed so the mutation reaches the checks
 *   behind them, down to the tile decoder;
 * - byte-level: on the finished file (bit flips, boundary bytes, truncation,
 *   duplicated, deleted and spliced regions), sometimes with the header,
 *   index and tail CRCs recomputed afterwards.
 *
 * Every choice comes from the given Rng, so a case is replayed from its seed.
 */
import * as zlib from 'node:zlib';
import { deflateSync, inflateSync } from 'fflate';
import { Lying, Num, Raw, RawMap, encodeValue } from './msgpack.js';
import { decodeClasses, decodeInts } from '../../src/codec/code-decode.js';
import { encodeClasses, encodeInts } from '../../src/codec/code-encode.js';
import { decodeSymbols } from '../../src/codec/code-symbols.js';
import { encodeSymbols } from '../../src/codec/code-symbols-encode.js';
import { crc32 } from '../../src/format/crc32.js';
import { cloneModel, directoryValue, headerValue, layout, pageValues, PayloadFlag, readVarint, replaceStream, resealTail, serialize, setCentre, setLength, setResidualStep, splice, TAIL, tileDims, varintBytes, walk, type Block, type Model, type PartRef, type PayloadLayout } from './model.js';
import type { Rng } from './rng.js';

/** Numbers that sit on a boundary of some check. */
export const BOUNDARY_NUMBERS = [
  0, -0, 1, -1, 2, 3, 7, 8, 0.5, 1.5, -2.5, 255, 256, 1023, 1024, 1025, 4096, 65535, 65536, 0x7fffffff, 2 ** 31, 0xffffffff, 2 ** 32, 2 ** 20,
  2 ** 20 + 1, 2 ** 22, 2 ** 22 + 1, 2 ** 30, 2 ** 40, 2 ** 40 + 1, 2 ** 53 - 1, 2 ** 53, 2 ** 64, 1e308, -1e308, Number.MAX_VALUE, 5e-324, 2.2250738585072014e-308,
  NaN, Infinity, -Infinity, -(2 ** 31), -(2 ** 53),
];

const BOUNDARY_BYTES = [0x00, 0xff, 0x7f, 0x80, 0x01, 0xfe];

/** A value of the wrong type, or of an absurd size. */
function absurdValue(rng: Rng): unknown {
  return rng.weighted<() => unknown>([
    [10, () => rng.pick(BOUNDARY_NUMBERS)],
    [2, () => rng.pick(['', 'x', 'f32', 'f64', 'abs', 'rel', 'rmse', 'psnr', 'rankfield', '__proto__'])],
    [1, () => 'long '.repeat(rng.range(10, 3000))],
    [2, () => rng.pick([[], [1], [1, 2], [1, 2, 3], [NaN, 1], ['a', 'b'], [[1, 2]], [{}]])],
    [2, () => rng.pick([{}, { a: 1 }, { offset: [] }, { mode: 'abs' }])],
    [2, () => rng.pick([null, true, false, undefined])],
    [2, () => rng.pick([new Uint8Array(0), new Uint8Array(8), new Uint8Array(8).fill(0xff), new Uint8Array(9), Uint8Array.of(0, 0, 0, 0, 0, 0, 0xf8, 0x7f)])],
    [1, () => new Lying('array', rng.pick([2 ** 32 - 1, 2 ** 22, 2 ** 16, 100]), [1])],
    [1, () => new Lying('map', rng.pick([2 ** 32 - 1, 2 ** 16, 100]), ['a', 1])],
    [1, () => new Lying('str', rng.pick([2 ** 32 - 1, 2 ** 20, 50]), new Uint8Array(3))],
    [1, () => nested(rng.range(2, 40))],
    [2, () => new Num(rng.pick([0, 1, 2, 3, 16, 64, 2 ** 31, 2 ** 33, -1, 0.5]), rng.pick(['f32', 'f64', 'u8', 'u16', 'u32', 'u64', 'i8', 'i16', 'i32', 'i64'] as const))],
    [1, () => new Raw(rng.pick([Uint8Array.of(0xc1), Uint8Array.of(0xd4, 0, 0), Uint8Array.of(0xc7, 4, 1, 0, 0, 0, 0), Uint8Array.of(0xd6, 0xff, 0, 0, 0, 0)]))],
  ])();
}

function nested(depth: number): unknown {
  let v: unknown = 1;
  for (let i = 0; i < depth; i++) v = i % 2 ? [v] : { k: v };
  return v;
}

/** A number near `v`, or a boundary number. */
function nearNumber(v: unknown, rng: Rng): unknown {
  if (typeof v !== 'number' || !rng.chance(0.6)) return rng.pick(BOUNDARY_NUMBERS);
  return rng.pick([v + 1, v - 1, v * 2, v / 2, -v, v + 0.5, v * 1e6, Math.floor(v / 3)]);
}

/** Every path (keys and array positions) into a decoded value, up to a depth. */
function paths(v: unknown, prefix: (string | number)[] = [], out: (string | number)[][] = [], depth = 0): (string | number)[][] {
  if (depth > 6) return out;
  if (Array.isArray(v)) {
    const n = v.length;
    // Long arrays (index columns): a few positions only.
    const idx = n <= 8 ? [...Array(n).keys()] : [0, 1, n - 1, Math.floor(n / 2)];
    for (const i of idx) {
      out.push([...prefix, i]);
      paths(v[i], [...prefix, i], out, depth + 1);
    }
  } else if (typeof v === 'object' && v !== null && Object.getPrototypeOf(v) === Object.prototype) {
    // Plain maps only: the writer's special nodes (RawMap, Lying, ...) are leaves.
    for (const k of Object.keys(v)) {
      out.push([...prefix, k]);
      paths((v as Record<string, unknown>)[k], [...prefix, k], out, depth + 1);
    }
  }
  return out;
}

function getAt(root: Block, path: (string | number)[]): Block {
  let v = root;
  for (const k of path) v = v?.[k];
  return v;
}

/** Set, delete or replace the value at a random path of a decoded block; returns a description. */
function editValue(root: Block, rng: Rng, what: string): string {
  const all = paths(root);
  if (all.length === 0) return `${what}: nothing to edit`;
  const path = rng.pick(all);
  const parent = getAt(root, path.slice(0, -1));
  const key = path[path.length - 1];
  const old = parent[key];
  const op = rng.weighted<string>([
    [6, 'absurd'],
    [4, 'near'],
    [1, 'delete'],
    [1, 'extra key'],
    [1, 'duplicate key'],
    [1, 'append'],
  ]);
  const name = `${what}.${path.join('.')}`;
  if (op === 'absurd') parent[key] = absurdValue(rng);
  else if (op === 'near') parent[key] = nearNumber(old, rng);
  else if (op === 'delete') {
    if (Array.isArray(parent)) parent.splice(key as number, 1);
    else delete parent[key];
  } else if (op === 'extra key') {
    if (typeof old === 'object' && old !== null && Object.getPrototypeOf(old) === Object.prototype) old[`extra_${rng.int(100)}`] = absurdValue(rng);
    else parent[key] = absurdValue(rng);
  } else if (op === 'duplicate key') {
    if (Array.isArray(parent)) {
      parent.push(old);
      return `${name} copied to the end of its array`;
    }
    const entries: [unknown, unknown][] = Object.entries(parent);
    const i = entries.findIndex(([k]) => k === key);
    // The repeated key holds the same value half the time: a reader that keeps the last one would accept it.
    entries.splice(i + 1, 0, [rng.chance(0.7) ? key : rng.pick([1, 0, -1, 1.5, null, true]), rng.chance(0.5) ? old : absurdValue(rng)]);
    // Replace the map by one that repeats a key (or has a non-string key): only a RawMap can say that.
    const grand = path.length >= 2 ? getAt(root, path.slice(0, -2)) : null;
    const pkey = path[path.length - 2];
    if (path.length === 1) return `${name}: top-level map left alone`;
    grand[pkey] = new RawMap(entries);
    return `${name} repeated key or non-string key in its map`;
  } else if (Array.isArray(old)) old.push(absurdValue(rng));
  else parent[key] = [old, old];
  return `${name} ${op}`;
}

/** Mutate bytes in place or return new bytes: flips, boundary values, numbers written over, runs, cuts, growth. */
export function mutateBytes(b: Uint8Array, rng: Rng, focus = b.length): Uint8Array {
  if (b.length === 0) return rng.chance(0.5) ? b : Uint8Array.of(rng.int(256));
  const pos = () => (rng.chance(0.6) ? rng.int(Math.min(b.length, Math.max(1, focus))) : rng.int(b.length));
  const op = rng.weighted<string>([
    [5, 'flip'],
    [4, 'boundary'],
    [3, 'number'],
    [1, 'run'],
    [1, 'cut'],
    [1, 'grow'],
    [1, 'random'],
  ]);
  if (op === 'flip') {
    for (let k = rng.range(1, 3); k > 0; k--) {
      const p = pos();
      b[p] ^= 1 << rng.int(8);
    }
  } else if (op === 'boundary') b[pos()] = rng.pick(BOUNDARY_BYTES);
  else if (op === 'number') {
    const p = pos();
    const d = new DataView(b.buffer, b.byteOffset, b.byteLength);
    const v = rng.pick(BOUNDARY_NUMBERS);
    const width = rng.pick([1, 2, 4, 8]);
    if (p + width <= b.length) {
      if (width === 8) d.setFloat64(p, v, true);
      else if (width === 4) d.setUint32(p, Number.isFinite(v) ? v >>> 0 : 0xffffffff, true);
      else if (width === 2) d.setUint16(p, Number.isFinite(v) ? v & 0xffff : 0xffff, true);
      else b[p] = Number.isFinite(v) ? v & 0xff : 0xff;
    }
  } else if (op === 'run') {
    const p = pos();
    b.fill(rng.pick(BOUNDARY_BYTES), p, Math.min(b.length, p + rng.range(2, 64)));
  } else if (op === 'cut') {
    return b.slice(0, rng.int(b.length));
  } else if (op === 'grow') {
    const extra = new Uint8Array(rng.range(1, 16)).map(() => (rng.chance(0.5) ? 0 : rng.int(256)));
    const at = rng.chance(0.5) ? b.length : pos();
    return Uint8Array.of(...b.subarray(0, at), ...extra, ...b.subarray(at));
  } else {
    for (let k = rng.range(1, 8); k > 0; k--) b[pos()] = rng.int(256);
  }
  return b;
}

/** Pick a (field, tile) whose payload exists. */
function pickPayload(m: Model, rng: Rng): [number, number] | null {
  const fields = m.payloads.map((p, i) => [p.length, i]).filter(([n]) => n > 0);
  if (fields.length === 0) return null;
  const f = rng.pick(fields)[1];
  return [f, rng.int(m.payloads[f].length)];
}

function setU32(b: Uint8Array, at: number, v: number): void {
  new DataView(b.buffer, b.byteOffset, b.byteLength).setUint32(at, v >>> 0, true);
}

/** A DEFLATE section: varints of the raw length and of the stored length, then the stored bytes (spec/FORMAT.md 10.2). */
function sectionBytes(raw: number, stored: Uint8Array): Uint8Array {
  return Uint8Array.of(...varintBytes(raw), ...varintBytes(stored.length), ...stored);
}

/** A DEFLATE stream of `raw` made some other valid way (stored blocks, zlib strategies, fflate levels). */
function otherStream(raw: Uint8Array, rng: Rng): Uint8Array {
  const how = rng.int(3);
  if (how === 0) {
    // Stored blocks of random sizes (RFC 1951, 3.2.4), the last one final.
    const parts: number[] = [];
    let at = 0;
    do {
      const n = Math.min(raw.length - at, rng.range(0, 300));
      const last = at + n >= raw.length;
      parts.push(last ? 1 : 0, n & 0xff, n >> 8, ~n & 0xff, (~n >> 8) & 0xff, ...raw.subarray(at, at + n));
      at += n;
    } while (at < raw.length);
    return Uint8Array.from(parts);
  }
  if (how === 1) {
    const strategy = rng.pick([zlib.constants.Z_DEFAULT_STRATEGY, zlib.constants.Z_FILTERED, zlib.constants.Z_HUFFMAN_ONLY, zlib.constants.Z_RLE, zlib.constants.Z_FIXED]);
    return new Uint8Array(zlib.deflateRawSync(raw, { level: rng.range(0, 9), strategy, memLevel: rng.range(1, 9) }));
  }
  return deflateSync(raw, { level: rng.range(0, 9) as 0 });
}

/** Obligation suffixes of operation descriptions (see expectationOf). */
const REFUSE = ' (must be refused)';
const CAUGHT = ' (changed values must be caught)';

/** Rewrite one DEFLATE section of a payload: mutate its raw data, or its stream, or its declared lengths. */
function mutateDeflate(p: Uint8Array, s: PartRef, rng: Rng): { payload: Uint8Array; what: string } {
  const stored = p.subarray(s.streamStart, s.end);
  let raw: Uint8Array = inflateSync(stored);
  let what = `section ${s.name}`;
  let declared: number | null = null;
  let next: Uint8Array;
  const kind = rng.weighted<string>([
    [8, 'raw'],
    [2, 'restream'],
    [2, 'stream bytes'],
    [1, 'trailing'],
    [1, 'lengths'],
  ]);
  if (kind === 'raw') {
    for (let k = rng.range(1, 3); k > 0; k--) raw = mutateBytes(raw, rng, 24);
    next = rng.chance(0.8) ? deflateSync(raw, { level: 6 }) : otherStream(raw, rng);
    declared = rng.chance(0.9) ? raw.length : rng.pick([raw.length + 1, raw.length - 1, 0, 2 ** 32 - 1, 1032 * next.length + 1]);
    // A declared raw length other than the data's is refused; the same length may still decode to other values.
    what += ` raw data (${raw.length} bytes, declared ${declared})${declared === raw.length ? CAUGHT : REFUSE}`;
  } else if (kind === 'restream') {
    next = otherStream(raw, rng);
    declared = raw.length;
    what += ' written as another valid stream';
  } else if (kind === 'stream bytes') {
    next = mutateBytes(stored.slice(), rng);
    declared = readVarint(p, s.start).value;
    what += ` stream bytes${CAUGHT}`;
  } else if (kind === 'trailing') {
    next = Uint8Array.of(...stored, ...new Uint8Array(rng.range(1, 4)).map(() => rng.int(256)));
    declared = raw.length;
    what += ` with bytes after its stream${REFUSE}`;
  } else {
    next = stored.slice();
    declared = rng.pick([0, 1, 2 ** 31, 2 ** 32 - 1, readVarint(p, s.start).value + rng.pick([-1, 1])]) >>> 0;
    const lieStored = rng.chance(0.5);
    what += lieStored ? ` stored length${CAUGHT}` : ` raw length ${declared}${REFUSE}`;
    if (lieStored) return { payload: setLength(p, s.lengthAt, rng.pick([0, 1, stored.length + 1, stored.length - 1, 2 ** 32 - 1]) >>> 0), what };
  }
  return { payload: splice(p, s.start, s.end, sectionBytes(declared ?? raw.length, next)), what };
}

/** What a coded stream holds: the grid it codes and, for the residual, which cells it skips. */
interface Grid {
  m: number;
  n: number;
  codes: Uint8Array | null;
}

/** The grid of a coded stream of a payload whose tile is m x n (the mask's classes decoded for the residual). */
function gridOf(p: Uint8Array, layout: PayloadLayout, part: PartRef, m: number, n: number): Grid {
  if (part.name === 'mask') return { m, n, codes: null };
  if (part.name === 'residual') return { m, n, codes: classesOf(p, layout, m, n) };
  const g = layout.groups[Number(part.name.slice('group '.length))];
  return { m: 1, n: g.size * (m + n), codes: null };
}

/** The class map of a payload's coded mask (decoded by the library's decoder), or null without a mask. */
export function classesOf(p: Uint8Array, layout: PayloadLayout, m: number, n: number): Uint8Array | null {
  const mask = layout.parts.find((x) => x.name === 'mask');
  if (!mask) return null;
  const out = new Uint8Array(m * n);
  decodeClasses(p.subarray(mask.streamStart, mask.end), m, n, out);
  return out;
}

/** Decode a coded stream of a seed payload, let `edit` change the values, and code them again. */
export function recode(p: Uint8Array, layout: PayloadLayout, part: PartRef, m: number, n: number, edit: (v: Int32Array | Uint8Array, g: Grid) => void): Uint8Array {
  const g = gridOf(p, layout, part, m, n);
  // A group size an earlier edit of this payload made up: not worth decoding (the case is 'any' by then).
  if (g.m * g.n > 2 ** 20) throw new Error(`a grid of ${g.m}x${g.n} is too large to code again`);
  const stream = p.subarray(part.streamStart, part.end);
  let next: Uint8Array;
  if (part.name === 'mask') {
    const classes = new Uint8Array(m * n);
    decodeClasses(stream, m, n, classes);
    edit(classes, g);
    next = encodeClasses(classes, m, n);
  } else {
    // A residual with coder bit 3 set is a symbol-coded stream (spec/FORMAT.md 10.3.8, 10.6.5).
    const symbols = part.name === 'residual' && layout.residualByteAt !== undefined && (p[layout.residualByteAt] & 0x08) !== 0;
    const values = new Int32Array(g.m * g.n);
    (symbols ? decodeSymbols : decodeInts)(stream, g.m, g.n, g.codes, values);
    edit(values, g);
    next = (symbols ? encodeSymbols : encodeInts)(values, g.m, g.n, g.codes);
  }
  return replaceStream(p, part, next);
}

/**
 * Mutate one coded stream (mask class map, factor group, residual). The
 * decoder (src/codec/code-decode.ts) reads exactly the bytes the encoder
 * wrote, and reads byte k at the same point whatever the bytes after k are,
 * so a stream cut short (it must read a missing byte), one followed by
 * bytes (they are left over), or a length word that is off (one of the two)
 * is refused whatever the bytes; flipped bits and re-coded values may
 * decode to other valid values, which the value CRC then catches.
 */
function mutateCoded(p: Uint8Array, layout: PayloadLayout, s: PartRef, m: number, n: number, rng: Rng): { payload: Uint8Array; what: string } {
  const stream = p.subarray(s.streamStart, s.end);
  const what = `coded ${s.name}`;
  const kind = rng.weighted<string>([
    [4, 'flip'],
    [2, 'bytes'],
    [3, 'values'],
    [2, 'length off by one'],
    [1, 'truncated'],
    [1, 'trailing'],
    [1, 'huge length'],
    [1, 'long varint'],
    [1, 'empty'],
  ]);
  if (kind === 'flip') {
    const next = stream.slice();
    for (let k = rng.range(1, 3); k > 0; k--) next[rng.int(next.length)] ^= 1 << rng.int(8);
    return { payload: replaceStream(p, s, next), what: `${what} stream bits flipped${CAUGHT}` };
  }
  if (kind === 'bytes') return { payload: replaceStream(p, s, mutateBytes(stream.slice(), rng)), what: `${what} stream bytes${CAUGHT}` };
  if (kind === 'values') {
    const out = recode(p, layout, s, m, n, (v, g) => {
      const cells = [...Array(v.length).keys()].filter((c) => g.codes === null || g.codes[c] === 0);
      for (let k = rng.range(1, 2); k > 0 && cells.length > 0; k--) {
        const c = rng.pick(cells);
        // Mask classes stay in 0..5 here (a class above 5 is a semantic mutation); codes stay within +-2^30.
        if (v instanceof Uint8Array) v[c] = (v[c] + rng.range(1, 5)) % 6;
        else v[c] = rng.pick([v[c] + 1, v[c] - 1, -v[c], 0, 2 ** 30, -(2 ** 30), 2 ** 29 + 1, rng.range(-1000, 1000)]);
      }
    });
    return { payload: out, what: `${what} values changed and coded again${CAUGHT}` };
  }
  if (kind === 'length off by one') {
    const off = rng.pick([-1, 1]);
    return { payload: setLength(p, s.lengthAt, (stream.length + off) >>> 0), what: `${what} length ${off > 0 ? '+1' : '-1'}${REFUSE}` };
  }
  if (kind === 'truncated') {
    const cut = rng.range(1, Math.min(3, stream.length));
    return { payload: replaceStream(p, s, stream.slice(0, stream.length - cut)), what: `${what} stream cut ${cut} byte(s) short${REFUSE}` };
  }
  if (kind === 'trailing') {
    const extra = new Uint8Array(rng.range(1, 3)).map(() => rng.int(256));
    return { payload: replaceStream(p, s, Uint8Array.of(...stream, ...extra)), what: `${what} with bytes after its stream${REFUSE}` };
  }
  if (kind === 'huge length') {
    return { payload: setLength(p, s.lengthAt, rng.pick([2 ** 32 - 1, 2 ** 31, p.length - s.streamStart + 1])), what: `${what} length past the payload${REFUSE}` };
  }
  if (kind === 'long varint') {
    // The right length in a longer form than its shortest (a last byte of 0), or a varint of 6 bytes, or one holding 2^32 or more: spec/FORMAT.md section 2.
    const short = varintBytes(stream.length);
    const bytes = rng.pick([[...short.map((b) => b | 0x80), 0], [0x80, 0x80, 0x80, 0x80, 0x80, 0x00], [0x80, 0x80, 0x80, 0x80, 0x10]]);
    return { payload: splice(p, s.lengthAt, s.lengthAt + readVarint(p, s.lengthAt).bytes, Uint8Array.from(bytes)), what: `${what} length varint ${bytes.map((b) => b.toString(16)).join(' ')}${REFUSE}` };
  }
  return { payload: replaceStream(p, s, new Uint8Array(0)), what: `${what} stream empty${REFUSE}` };
}

/** The raw NaN bits after a coded mask: a length word that is off, or bits added or taken away. */
function mutateRawNaN(p: Uint8Array, layout: PayloadLayout, width: number, rng: Rng): { payload: Uint8Array; what: string } {
  const mask = layout.mask!;
  const have = mask.rawEnd - mask.rawStart;
  const kind = rng.pick(['word', 'more bits', 'fewer bits']);
  if (kind === 'word' || (kind === 'fewer bits' && have === 0)) {
    const lie = rng.pick([have + 1, have - 1, have + width, have - width, 2 ** 32 - 1]) >>> 0;
    return { payload: setLength(p, mask.rawLengthAt, lie), what: `mask raw NaN length ${lie} for ${have} bytes${REFUSE}` };
  }
  // Length word and bits agree, but not with the number of raw NaN cells in the class map.
  const bits = kind === 'more bits' ? new Uint8Array(width).fill(0xff) : new Uint8Array(0);
  const out = setLength(splice(p, kind === 'more bits' ? mask.rawEnd : mask.rawEnd - width, mask.rawEnd, bits), mask.rawLengthAt, have + (kind === 'more bits' ? width : -width));
  return { payload: out, what: `mask raw NaN bits: ${kind === 'more bits' ? 'one value more' : 'one value fewer'} than its raw NaN cells${REFUSE}` };
}

/** Mutate one part of tile t of field f: a DEFLATE section, a coded stream, the raw NaN bits, or the FactorDelta flag. */
function mutatePart(mdl: Model, seed: Model, f: number, t: number, rng: Rng): string {
  const p = mdl.payloads[f][t];
  const layout = walk(p);
  // Tile sizes and dtype from the seed's header: an earlier edit of this case may have made the header anything.
  const h = seed.header.fields[f];
  const [m, n] = tileDims(h, t);
  const width = h.dtype === 'f64' ? 8 : 4;
  const choice = rng.weighted<string>([
    [10, 'part'],
    [layout.mask ? 1 : 0, 'raw NaN'],
    [layout.method === 1 ? 1 : 0, 'delta flag'],
  ]);
  let r: { payload: Uint8Array; what: string };
  if (choice === 'raw NaN') r = mutateRawNaN(p, layout, width, rng);
  else if (choice === 'delta flag') {
    const out = p.slice();
    out[1] ^= PayloadFlag.FactorDelta;
    const set = (out[1] & PayloadFlag.FactorDelta) !== 0;
    // Rank 0 with the flag is refused; on rank > 0 the codes are read as values or as differences, other values.
    r = { payload: out, what: `FactorDelta flag ${set ? 'set' : 'cleared'} on rank ${layout.rank}${set && layout.rank === 0 ? REFUSE : CAUGHT}` };
  } else if (layout.parts.length === 0) r = { payload: p, what: 'no section' };
  else {
    const s = rng.pick(layout.parts);
    r = s.kind === 'deflate' ? mutateDeflate(p, s, rng) : mutateCoded(p, layout, s, m, n, rng);
  }
  mdl.payloads[f][t] = r.payload;
  return `payload ${f}/${t} ${r.what}`;
}

/** Change the fixed part of a payload (method, flags, rank, centre, group count), keeping the index's method and rank in step. */
function mutateFixed(m: Model, f: number, t: number, rng: Rng): string {
  let p = m.payloads[f][t];
  const ix = m.index.fields[f];
  const which = rng.pick(['method', 'flags', 'rank', 'centre', 'groups']);
  const layout = (): PayloadLayout | null => {
    try {
      return walk(p);
    } catch {
      return null;
    }
  };
  const l = layout();
  if (which === 'method') p[0] = rng.pick([0, 1, 2, 255]);
  else if (which === 'flags') p[1] = rng.chance(0.5) ? p[1] ^ (1 << rng.int(8)) : rng.int(256);
  else if (which === 'rank' && l !== null && l.method === 1) {
    // A new rank varint (of any length), or the same rank in a longer form than its shortest.
    const v = rng.pick([0, 1, 2, 3, 4, 7, 8, 16, 17, 127, 128, 65535, 2 ** 21, l.rank + 1]);
    const bytes = rng.chance(0.2) ? [...varintBytes(l.rank).map((b) => b | 0x80), 0] : varintBytes(v);
    p = splice(p, 2, l.centreAt, Uint8Array.from(bytes));
    m.payloads[f][t] = p;
  } else if (which === 'centre' && l !== null && l.method === 1) {
    p = setCentre(p, rng.pick(BOUNDARY_NUMBERS));
    m.payloads[f][t] = p;
  }
  else if (which === 'groups' && l !== null && l.groupCountAt >= 0) p[l.groupCountAt] = rng.pick([0, 1, 2, 255]);
  if (rng.chance(0.8) && p.length >= 1) {
    ix.method[t] = p[0];
    let rank = 0;
    if (p[0] === 1) {
      try {
        rank = readVarint(p, 2).value;
      } catch {
        rank = 0;
      }
    }
    ix.rank[t] = rank;
  }
  return `payload ${f}/${t} ${which}${CAUGHT}`;
}

/**
 * Targeted edits that leave every structure well-formed but break one rule
 * a decoder must enforce (spec/FORMAT.md, section 15): a fill cell in a field
 * without a fill value, raw NaN bits that are a number, a mask class above
 * 5, a coded value above 2^30 or factor differences that sum past it, the
 * FactorDelta flag on rank 0, an exception that is NaN or the fill value, a
 * NaN residual step or centre, a tile grid that no longer matches the index.
 * Each must be refused.
 */
function semantic(m: Model, seed: Model, rng: Rng): string {
  const f = rng.int(m.payloads.length);
  const h = m.header.fields[f];
  const wide = h.dtype === 'f64';
  const width = wide ? 8 : 4;
  const t = rng.int(m.payloads[f].length);
  const p = m.payloads[f][t];
  const layout = walk(p);
  const find = (name: string) => layout.parts.find((x) => x.name === name);
  /** Rewrite a DEFLATE section's raw data. */
  const rewrite = (name: string, edit: (raw: Uint8Array) => boolean): boolean => {
    const s = find(name);
    if (!s) return false;
    const raw = inflateSync(p.subarray(s.streamStart, s.end));
    if (!edit(raw)) return false;
    m.payloads[f][t] = splice(p, s.start, s.end, sectionBytes(raw.length, deflateSync(raw, { level: 6 })));
    return true;
  };
  // Tile sizes from the seed's header (an earlier edit may have made this case's header anything).
  const [rows, cols] = tileDims(seed.header.fields[f], t);
  /** Decode a coded stream, edit its values (false: nothing to break here) and code them again. */
  const recoded = (name: string, edit: (v: Int32Array | Uint8Array, g: { m: number; n: number; codes: Uint8Array | null }) => boolean): boolean => {
    const s = find(name);
    if (!s) return false;
    let changed = false;
    const out = recode(p, layout, s, rows, cols, (v, g) => void (changed = edit(v, g)));
    if (changed) m.payloads[f][t] = out;
    return changed;
  };
  const fillBits = (): Uint8Array | null => {
    if (!(h.fill instanceof Uint8Array)) return null;
    const v = new DataView(h.fill.buffer, h.fill.byteOffset, 8).getFloat64(0, true);
    if (Number.isNaN(v)) return null;
    const b = new Uint8Array(width);
    if (wide) new DataView(b.buffer).setFloat64(0, v, true);
    else new DataView(b.buffer).setFloat32(0, v, true);
    return b;
  };
  const tries: [string, () => boolean][] = [
    [
      'fill cell without a fill value',
      () =>
        h.fill === null &&
        recoded('mask', (v) => {
          // A cell of another class that needs no raw bits (a valid cell would also shift the residual).
          const other = [...v.keys()].filter((c) => v[c] >= 2 && v[c] <= 4);
          v[other.length > 0 ? rng.pick(other) : rng.int(v.length)] = 1;
          return true;
        }),
    ],
    [
      'raw NaN bits that are a number',
      () => {
        if (!layout.mask || layout.mask.rawEnd === layout.mask.rawStart) return false;
        const d = new DataView(p.buffer, p.byteOffset, p.byteLength);
        const at = layout.mask.rawStart + width * rng.int((layout.mask.rawEnd - layout.mask.rawStart) / width);
        if (wide) d.setFloat64(at, 1.5, true);
        else d.setFloat32(at, 1.5, true);
        return true;
      },
    ],
    [
      'a class above 5 in the mask',
      // In the last row: the coder takes the class of the cell above as a context, which must be 0..5
      // (a larger one indexes past its model and never ends), so no cell may sit below the bad one.
      () => recoded('mask', (v) => ((v[(rows - 1) * cols + rng.int(cols)] = rng.range(6, 8)), true)),
    ],
    [
      'a code above 2^30 in a coded stream',
      () => {
        const streams = layout.parts.filter((x) => x.kind === 'coded' && x.name !== 'mask');
        if (streams.length === 0) return false;
        return recoded(rng.pick(streams).name, (v, g) => {
          const cells = [...v.keys()].filter((c) => g.codes === null || g.codes[c] === 0);
          if (cells.length === 0) return false;
          // The coder writes any magnitude below 2^31 (class 30 and 30 bits below the leading one); the decoder allows 2^30.
          v[rng.pick(cells)] = rng.pick([1, -1]) * rng.pick([2 ** 30 + 1, 2 ** 31 - 1]);
          return true;
        });
      },
    ],
    [
      'factor differences that sum past 2^30',
      () =>
        (layout.flags & PayloadFlag.FactorDelta) !== 0 &&
        rows >= 2 &&
        recoded('group 0', (v) => {
          // The first two entries of left factor 0: their running sum is 2^31.
          v[0] = 2 ** 30;
          v[1] = 2 ** 30;
          return true;
        }),
    ],
    [
      'FactorDelta flag on rank 0',
      () => {
        if (layout.method !== 1 || layout.rank !== 0) return false;
        p[1] |= PayloadFlag.FactorDelta;
        return true;
      },
    ],
    [
      'an exception that is NaN or the fill value',
      () =>
        rewrite('exceptions', (raw) => {
          const d = new DataView(raw.buffer);
          const count = d.getUint32(0, true);
          if (count === 0) return false;
          const at = 4 + 4 * count + width * rng.int(count);
          const fb = fillBits();
          if (fb && rng.chance(0.5)) raw.set(fb, at);
          else if (wide) d.setFloat64(at, NaN, true);
          else d.setFloat32(at, NaN, true);
          return true;
        }),
    ],
    [
      'a NaN residual step',
      () => {
        if (layout.residualStepAt === undefined) return false;
        m.payloads[f][t] = setResidualStep(p, NaN);
        return true;
      },
    ],
    [
      'a NaN centre',
      () => {
        if (p[0] !== 1) return false;
        m.payloads[f][t] = setCentre(p, NaN);
        return true;
      },
    ],
    [
      'a tile grid that does not match the index',
      () => {
        const old = h.tile;
        h.tile = [h.tile[0] * 2 >= h.shape[0] && h.tile[1] * 2 >= h.shape[1] ? Math.max(1, h.tile[0] >> 1) : h.tile[0] * 2, h.tile[1]];
        const tiles = Math.ceil(h.shape[0] / h.tile[0]) * Math.ceil(h.shape[1] / h.tile[1]);
        if (tiles !== m.payloads[f].length) return true;
        h.tile = old;
        return false;
      },
    ],
  ];
  const start = rng.int(tries.length);
  for (let k = 0; k < tries.length; k++) {
    const [what, apply] = tries[(start + k) % tries.length];
    if (apply()) return `field ${f} payload ${f}/${t}: ${what} (must be refused)`;
  }
  return `field ${f} payload ${f}/${t}: no rule to break here`;
}

/** Changes to the header that keep it self-consistent, so they reach the decoder. */
function consistentHeader(m: Model, rng: Rng): string {
  const fields = m.header.fields;
  const f = rng.int(fields.length);
  const h = fields[f];
  const which = rng.weighted<string>([
    [3, 'scale'],
    [2, 'dtype'],
    [2, 'fill'],
    [2, 'bound'],
    [1, 'transpose'],
    [1, 'rename'],
    [2, 'layer'],
  ]);
  if (which === 'layer') return layerEdit(m, f, rng);
  if (which === 'scale') {
    // Scaling shape and tile by the same integers keeps the tile grid; the payloads then meet larger tiles.
    const cells = h.tile[0] * h.tile[1];
    const big = rng.chance(0.02);
    const limit = big ? 2 ** 20 : 2 ** 12;
    const room = Math.max(1, Math.floor(Math.sqrt(limit / cells)));
    const k1 = rng.range(1, Math.max(1, room));
    const k2 = rng.range(1, Math.max(1, Math.floor(limit / cells / k1)));
    h.shape = [h.shape[0] * k1, h.shape[1] * k2];
    h.tile = [h.tile[0] * k1, h.tile[1] * k2];
    return `field ${f} scaled by ${k1}x${k2}`;
  }
  if (which === 'dtype') h.dtype = h.dtype === 'f32' ? 'f64' : 'f32';
  else if (which === 'fill') {
    const b = new Uint8Array(8);
    new DataView(b.buffer).setFloat64(0, rng.pick([0, -0, -999, NaN, Infinity, 1e20, 5e-324]), true);
    h.fill = rng.pick([null, b, rng.pick(BOUNDARY_NUMBERS)]);
  } else if (which === 'bound') {
    const k = rng.pick(['mode', 'value', 'tolerance', 'range']);
    h.bound[k] = k === 'mode' ? rng.pick(['abs', 'rel', 'rmse', 'psnr']) : k === 'range' ? rng.pick([null, [0, 0], [1, -1], [-1e308, 1e308]]) : nearNumber(h.bound[k], rng);
  } else if (which === 'transpose') {
    h.shape = [h.shape[1], h.shape[0]];
    h.tile = [h.tile[1], h.tile[0]];
  } else h.name = fields.length > 1 && rng.chance(0.5) ? fields[(f + 1) % fields.length].name : rng.pick(['', 'x'.repeat(1025), 'ok', '\u0000']);
  return `field ${f} ${which}`;
}

/**
 * An edit of a field layer (element 8 of a field entry, spec/FORMAT.md
 * 6.2.2): in an archive with a layer, a rule of Section 15 items 17b and
 * 17c broken (refused), the layer's flag bit cleared (refused), or the
 * layer removed (its field's low-rank tiles then decode to other values,
 * which check() must report); in any archive, a layer that names the field
 * itself, no field, or has rank 0 (refused).
 */
function layerEdit(m: Model, f: number, rng: Rng): string {
  const fields = m.header.fields;
  const at = fields.findIndex((g: Block) => Array.isArray(g.layer));
  if (at < 0 || rng.chance(0.2)) {
    const other = (f + 1) % fields.length;
    fields[f].layer = rng.pick([
      [1, f, other],
      [1, other, fields.length],
      [0, other, other === f ? f : other],
      [1, -1, other],
    ]);
    return `field ${f} layer ${JSON.stringify(fields[f].layer)}${REFUSE}`;
  }
  const g = fields[at];
  const [k, left, right] = g.layer as number[];
  const rows = (g.slices ?? 1) * g.shape[0];
  const cols = g.shape[1];
  const which = rng.pick(['rank 0', 'rank too high', 'self', 'same', 'past the list', 'swapped', 'not an array', 'no flag', 'removed', 'rank + 1']);
  if (which === 'removed') {
    delete g.layer;
    return `field ${at} layer removed${CAUGHT}`;
  }
  if (which === 'no flag') {
    m.flags &= ~0x2;
    return `flag bit 1 (layer) cleared${REFUSE}`;
  }
  const edits: Record<string, unknown> = {
    'rank 0': [0, left, right],
    'rank too high': [Math.min(rows, cols) + 1, left, right],
    self: [k, at, right],
    same: [k, left, left],
    'past the list': [k, left, fields.length + rng.int(3)],
    swapped: [k, right, left],
    'not an array': rng.pick([k, 'layer', { rank: k }, [k, left], [k, left, right + 0.5]]),
    // The factor fields' width is k: another rank no longer matches their shape.
    'rank + 1': [k + 1, left, right],
  };
  g.layer = edits[which];
  // Swapped factors match only when the field has as many stacked rows as columns.
  return `field ${at} layer ${which}${which === 'swapped' && rows === cols ? '' : REFUSE}`;
}

/** MessagePack-level tricks on the header or index bytes (applied last, to the final header or index). */
function msgpackBlock(m: Model, rng: Rng, block: 'header' | 'index'): string {
  // The index is the directory or one of its pages (since version 2): each is a block of its own.
  let target: string = block;
  let value: unknown = headerValue(m);
  if (block === 'index') {
    const pages = pageValues(m);
    const f = rng.int(pages.length + 1);
    if (f === pages.length || pages[f].length === 0) {
      target = 'index directory';
      value = directoryValue(m);
    } else {
      const p = rng.int(pages[f].length);
      target = `index page ${f}/${p}`;
      value = pages[f][p];
    }
  }
  const trick = rng.pick(['bytes', 'bytes', 'trailing', 'wrapped', 'widths', 'truncated']);
  let bytes = encodeValue(value);
  if (trick === 'bytes') for (let k = rng.range(1, 3); k > 0; k--) bytes = mutateBytes(bytes, rng);
  else if (trick === 'trailing') bytes = Uint8Array.of(...bytes, rng.pick([0xc0, 0x00, 0x90]));
  else if (trick === 'wrapped') bytes = encodeValue(rng.chance(0.5) ? [value] : new RawMap([['fields', value]]));
  else if (trick === 'widths') bytes = encodeValue(widen(value, rng));
  else bytes = bytes.slice(0, rng.int(bytes.length));
  if (block === 'header') m.headerBytes = bytes;
  else if (target === 'index directory') m.indexBytes = bytes;
  else (m.pageBytes ??= {})[target.slice(11)] = bytes;
  return `${target} msgpack ${trick}`;
}

/** The same value with numbers written in other (valid) widths: a reader must accept them all. */
function widen(v: unknown, rng: Rng): unknown {
  if (typeof v === 'number') {
    if (Number.isInteger(v) && v >= 0 && v < 2 ** 32 && rng.chance(0.5)) return new Num(v, rng.pick(['u32', 'u64', 'f64'] as const));
    if (!Object.is(v, -0) && rng.chance(0.3)) return new Num(v, 'f64');
    return v;
  }
  if (Array.isArray(v)) return v.map((x) => widen(x, rng));
  if (typeof v === 'object' && v !== null && !(v instanceof Uint8Array)) {
    const out: Record<string, unknown> = {};
    for (const [k, x] of Object.entries(v)) out[k] = widen(x, rng);
    return out;
  }
  return v;
}

/** Structural index edits that need the final offsets: applied after a first layout pass. */
function postIndex(m: Model, rng: Rng): string {
  const fields = m.index.fields;
  const f = rng.int(fields.length);
  const ix = fields[f];
  const n = ix.offset.length;
  const t = rng.int(n);
  const u = rng.int(n);
  const other = fields[rng.int(fields.length)];
  const v = rng.int(other.offset.length);
  const which = rng.pick(['swap', 'alias', 'alias other field', 'shift', 'into header', 'crc of other', 'grow']);
  if (which === 'swap') {
    for (const c of ['offset', 'length', 'crc', 'method', 'rank']) [ix[c][t], ix[c][u]] = [ix[c][u], ix[c][t]];
  } else if (which === 'alias' || which === 'alias other field') {
    const src = which === 'alias' ? ix : other;
    const k = which === 'alias' ? u : v;
    const g = which === 'alias' ? f : fields.indexOf(other);
    ix.offset[t] = src.offset[k];
    ix.length[t] = src.length[k];
    ix.crc[t] = src.crc[k];
    return g === f && k === t ? `index field ${f} tile ${t} aliased to itself` : `index field ${f} tile ${t} aliased to the payload of field ${g} tile ${k}`;
  } else if (which === 'shift') ix.offset[t] += rng.pick([-1, 1, -2, 2, 8]);
  else if (which === 'into header') ix.offset[t] = Math.max(0, ix.offset[n - 1] + ix.length[n - 1]);
  else if (which === 'crc of other') ix.crc[t] = ix.crc[u];
  else ix.length[t] += rng.pick([1, 2, 100]);
  m.fixIndex = false;
  return `index field ${f} tile ${t} ${which}`;
}

/**
 * Move the first recorded prefix of a progressive tile off its factor group
 * boundary by one byte, with a CRC that matches the bytes it now covers: a
 * progressive read takes that prefix (./harness.ts reads at a bound every
 * prefix meets) and must refuse it (spec/FORMAT.md 18.2).
 */
function prefixCut(m: Model, rng: Rng, touch: (key: string) => void): string {
  const tiles: [number, number][] = [];
  m.index.fields.forEach((ix: Block, f: number) => {
    if (Array.isArray(ix?.prefix)) ix.prefix.forEach((q: unknown, t: number) => Array.isArray(q) && q.length >= 4 && tiles.push([f, t]));
  });
  if (tiles.length === 0) return 'index prefix: nothing to edit';
  const [f, t] = rng.pick(tiles);
  touch(`payload ${f}/${t}`);
  const ix = m.index.fields[f];
  const q = ix.prefix[t];
  const next = q.length >= 8 ? q[4] : ix.length[t];
  const cuts = [q[0] - 1, q[0] + 1].filter((x) => x > 0 && x < next);
  if (cuts.length === 0) return 'index prefix: nothing to edit';
  q[0] = rng.pick(cuts);
  q[1] = crc32(m.payloads[f][t].subarray(0, q[0]));
  return `index field ${f} tile ${t} prefix 0 cut at ${q[0]}, off its factor group boundary, CRC recomputed${REFUSE}`;
}

/** Container-level words: versions, flags, block order, a gap, a stale CRC. */
function containerWords(m: Model, rng: Rng): string {
  const which = rng.pick(['version', 'flags', 'order', 'gap', 'stale crc', 'tail version']);
  if (which === 'version') m.version = rng.pick([0, 1, 2, 3, 4, 5, 6, 7, 0xffff]);
  // Bits 0-2 (slices, layer, symbols) are known: an unknown one must be refused, and so must a file whose residuals use the
  // symbol coder with bit 2 cleared (spec/FORMAT.md 4).
  else if (which === 'flags') m.flags = (m.flags & 0x4) !== 0 && rng.chance(0.5) ? m.flags & ~0x4 : 1 << (3 + rng.int(13));
  else if (which === 'order') m.headerFirst = true;
  else if (which === 'gap') m.gap = new Uint8Array(rng.range(1, 64)).map(() => rng.int(256));
  else if (which === 'stale crc') m.fixCrcs = false;
  else m.tailVersion = rng.pick([0, 1, 2, 3, 4, 5, 6, 7]);
  return `container ${which}`;
}

/** Byte-level mutations of a whole file. */
function fileBytes(b: Uint8Array, others: Uint8Array[], rng: Rng): { bytes: Uint8Array; what: string } {
  const which = rng.weighted<string>([
    [4, 'mutate'],
    [2, 'truncate'],
    [1, 'duplicate'],
    [1, 'delete'],
    [2, 'splice'],
    [2, 'tail field'],
  ]);
  if (which === 'mutate') return { bytes: mutateBytes(b.slice(), rng), what: 'file bytes' };
  if (which === 'truncate') return { bytes: b.slice(0, rng.int(b.length)), what: 'file truncated' };
  const a = rng.int(b.length);
  const e = Math.min(b.length, a + rng.range(1, 200));
  if (which === 'duplicate') {
    const at = rng.int(b.length);
    return { bytes: Uint8Array.of(...b.subarray(0, at), ...b.subarray(a, e), ...b.subarray(at)), what: `file region ${a}..${e} duplicated at ${at}` };
  }
  if (which === 'delete') return { bytes: Uint8Array.of(...b.subarray(0, a), ...b.subarray(e)), what: `file region ${a}..${e} deleted` };
  if (which === 'splice') {
    const o = rng.pick(others);
    const oa = rng.int(o.length);
    const oe = Math.min(o.length, oa + (e - a));
    const out = b.slice();
    out.set(o.subarray(oa, oe).subarray(0, out.length - a), a);
    return { bytes: out, what: `file region ${a}..${e} spliced from another archive` };
  }
  // A tail field (the header and directory lengths) set to a boundary value.
  const out = b.slice();
  if (out.length >= TAIL) {
    const t = out.length - TAIL;
    const l = layout(b);
    const at = rng.pick([0, 4]);
    setU32(out, t + at, rng.pick([0, 1, 11, 12, 13, 0x7fffffff, 0xffffffff, t, t - 1, l.headerLength + 1, l.dirLength - 1]));
  }
  return { bytes: out, what: 'tail field' };
}

/** One fuzz case: a mutated archive and the list of what was done to it. */
/** The kinds of mutation {@link mutate} draws from, with their weights (0 to 3 draws a case). */
export const MUTATION_KINDS = [
  [14, 'payload bytes'],
  [18, 'part'],
  [8, 'fixed part'],
  [12, 'header value'],
  [6, 'header consistent'],
  [10, 'index value'],
  [6, 'index structure'],
  [8, 'msgpack'],
  [4, 'container'],
  [4, 'semantic'],
  [1, 'prefix'],
] as const satisfies readonly (readonly [number, string])[];

export type MutationKind = (typeof MUTATION_KINDS)[number][1];

export interface Mutated {
  bytes: Uint8Array;
  ops: string[];
  /** The kinds of mutation applied to the case, in order (a kind applied twice is named twice). */
  kinds: MutationKind[];
  expect: Expectation;
}

/**
 * 'same': must read back exactly as the seed; 'refuse': must be refused
 * somewhere; 'detect': payload bytes changed under an index whose value
 * CRCs are the seed's, so a field that reads back other values must be
 * reported by check(); 'any': only the typed-error contract.
 */
export type Expectation = 'same' | 'refuse' | 'detect' | 'any';

/**
 * What an operation obliges a reader to do, from its description: valid
 * re-encodings (another DEFLATE stream, other MessagePack number widths,
 * must not change what is read; stream bytes after the
 * end, a coded stream whose length word is off or that is cut short, a
 * repeated or non-string map key, a stale CRC, unknown versions and flags,
 * blocks out of their order or with bytes between them (the layout is
 * contiguous), a block with bytes after its value or cut short, and a
 * declared raw length that differs from the data must be refused; an index
 * entry copied from another tile is free (offsets are not stored, so it
 * cannot make two tiles share bytes); edits of payload bytes that keep
 * the index may decode to other values, which check() must then report.
 */
export function expectationOf(op: string): Expectation {
  if (/ edited twice$| skipped \(/.test(op)) return 'any';
  if (/^unchanged$|no section$|nothing to edit$|aliased to itself$|top-level map left alone$|no rule to break here$/.test(op)) return 'same';
  if (/\(must be refused\)$/.test(op)) return 'refuse';
  if (/\(changed values must be caught\)$/.test(op)) return 'detect';
  if (/written as another valid stream$|msgpack widths$/.test(op)) return 'same';
  // Blocks out of their order and bytes between blocks: the layout is contiguous (spec/FORMAT.md, section 3).
  if (/^container (version|flags|stale crc|tail version|order|gap)$|msgpack (trailing|truncated)$|repeated key or non-string key/.test(op)) return 'refuse';
  return 'any';
}

/**
 * The obligation of several operations together: all 'same' stay 'same';
 * 'refuse' with 'same' or 'detect' refuses; 'detect' with 'same' detects;
 * anything with 'any' is free.
 */
export function combine(ops: string[]): Expectation {
  let e: Expectation = 'same';
  for (const op of ops) {
    const x = expectationOf(op);
    if (x === 'any') return 'any';
    if (x === 'refuse') e = 'refuse';
    else if (x === 'detect' && e === 'same') e = 'detect';
  }
  return e;
}

export function mutate(seed: Model, others: Uint8Array[], rng: Rng): Mutated {
  const m = cloneModel(seed);
  const ops: string[] = [];
  const kinds: MutationKind[] = [];
  // Edits of offsets, lengths and CRCs must come after the layout pass that recomputes them.
  const late: (() => string)[] = [];
  const count = rng.weighted([
    [15, 0],
    [55, 1],
    [22, 2],
    [8, 3],
  ]);
  // Expectations hold for edits of distinct targets: a second edit of one target frees the case ('any').
  const touched = new Set<string>();
  const touch = (key: string) => {
    if (touched.has(key)) ops.push(`${key} edited twice`);
    touched.add(key);
  };
  const blocks: ('header' | 'index')[] = [];
  for (let k = 0; k < count; k++) {
    const op = rng.weighted<MutationKind>(MUTATION_KINDS);
    const at = pickPayload(m, rng);
    const before = [ops.length, late.length, blocks.length];
    try {
      if (op === 'payload bytes' && at) {
        const [f, t] = at;
        touch(`payload ${f}/${t}`);
        m.payloads[f][t] = mutateBytes(m.payloads[f][t], rng, 16);
        ops.push(`payload ${f}/${t} bytes${CAUGHT}`);
      } else if (op === 'part' && at) {
        const [f, t] = at;
        touch(`payload ${f}/${t}`);
        ops.push(mutatePart(m, seed, f, t, rng));
      } else if (op === 'fixed part' && at) {
        touch(`payload ${at[0]}/${at[1]}`);
        ops.push(mutateFixed(m, at[0], at[1], rng));
      } else if (op === 'header value') ops.push(editValue(m.header, rng, 'header'));
      else if (op === 'header consistent') {
        const what = consistentHeader(m, rng);
        // A second edit of one field's layer may undo the first (a bad layer, then the layer removed): free the case.
        const layer = /^field \d+ layer/.exec(what)?.[0];
        if (layer) touch(layer);
        ops.push(what);
      }
      else if (op === 'index value') {
        // Index columns are long: aim at one field's columns directly, or anywhere in the index.
        const f = rng.int(m.index.fields.length);
        const ix = m.index.fields[f];
        const c = rng.pick(['offset', 'length', 'crc', 'method', 'rank', 'valid', 'max_err', 'rmse', 'value_crc', 'prefix']);
        if (!rng.chance(0.7) || ix.offset.length === 0) ops.push(editValue(m.index, rng, 'index'));
        else {
          const t = rng.int(ix.offset.length);
          const edit = () => {
            const q = ix.prefix?.[t];
            if (c === 'prefix' && Array.isArray(q) && q.length > 0) {
              // One number of a (length, crc, max_err, rmse) quad.
              const k = rng.int(q.length);
              q[k] = rng.chance(0.5) ? nearNumber(q[k], rng) : absurdValue(rng);
              return `index field ${f} prefix[${t}][${k}]`;
            }
            ix[c][t] = rng.chance(0.5) ? nearNumber(ix[c][t], rng) : absurdValue(rng);
            return `index field ${f} ${c}[${t}]`;
          };
          if (c === 'offset' || c === 'length' || c === 'crc') late.push(edit);
          else ops.push(edit());
        }
      } else if (op === 'index structure') late.push(() => postIndex(m, rng));
      else if (op === 'prefix') ops.push(prefixCut(m, rng, touch));
      else if (op === 'msgpack') {
        const block = rng.chance(0.5) ? 'header' : 'index';
        if (!blocks.includes(block)) blocks.push(block);
      } else if (op === 'container') ops.push(containerWords(m, rng));
      else if (op === 'semantic') {
        const what = semantic(m, seed, rng);
        const target = /^field \d+/.exec(what)?.[0];
        if (target) touch(target);
        // Semantic edits of a payload the walk reads as the decoder does only when no other edit touched it.
        const payload = /payload \d+\/\d+/.exec(what)?.[0];
        if (payload) touch(payload);
        ops.push(what);
      }
      // Applied (or, for the late and MessagePack kinds, scheduled): a payload kind finds no target in a field of no tiles.
      if (ops.length > before[0] || late.length > before[1] || blocks.length > before[2]) kinds.push(op);
    } catch (e) {
      // A mutation whose target an earlier mutation already destroyed (e.g. an index that is no longer a map).
      ops.push(`${op} skipped (${(e as Error).message})`);
    }
  }
  let bytes = serialize(m);
  if (late.length > 0 && Array.isArray(m.index?.fields) && m.index.fields.every((f: Block) => Array.isArray(f?.offset) && f.offset.length > 0)) {
    for (const edit of late) {
      try {
        ops.push(edit());
      } catch (e) {
        ops.push(`index edit skipped (${(e as Error).message})`);
      }
    }
    m.fixIndex = false;
    bytes = serialize(m);
  }
  if (blocks.length > 0) {
    // MessagePack tricks on the final blocks (offsets and CRCs already in the index).
    for (const block of blocks.sort()) ops.push(msgpackBlock(m, rng, block)); // header first: its length moves the pages
    m.fixIndex = false;
    bytes = serialize(m);
  }
  if (rng.chance(0.25)) {
    for (let k = rng.range(1, 2); k > 0; k--) {
      const r = fileBytes(bytes, others, rng);
      bytes = r.bytes;
      ops.push(r.what);
    }
    if (rng.chance(0.5)) {
      resealTail(bytes);
      ops.push('CRCs resealed');
    }
  }
  if (ops.length === 0) ops.push('unchanged');
  return { bytes, ops, kinds, expect: combine(ops) };
}
