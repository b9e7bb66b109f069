/**
 * The symbol coder for residual streams (src/codec/code-symbols.ts;
 * spec/FORMAT.md 10.3.8): round trips on the open grids of vega-datasets
 * (test/archive/datasets.ts names them), every class up to 2^30, skipped
 * cells, the spec's worked example, streams a decoder must refuse (alone,
 * and through open/read of an archive), required flag bit 2 and the
 * encoder's choice of coder (spec/FORMAT.md 19). The round trips and the
 * worked example run with the WebAssembly decoder and with the JavaScript
 * one; ./symbols-kernel.test.ts compares the two on random streams.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { CodeStreamError, decodeInts } from '../../src/codec/code-decode.js';
import { encodeInts, RangeEncoder } from '../../src/codec/code-encode.js';
import { decodeSymbols, SYMBOL_BINARY_CONTEXTS } from '../../src/codec/code-symbols.js';
import { encodeSymbols, encodeSymbolsWithin } from '../../src/codec/code-symbols-encode.js';
import { Cell } from '../../src/codec/mask.js';
import { usesSymbolCoder } from '../../src/codec/payload.js';
import { FormatCode, FormatError } from '../../src/errors.js';
import { FLAG_SYMBOLS } from '../../src/format/container.js';
import { pack } from '../../src/pack.js';
import { precip, ROOT, volcano } from '../archive/datasets.js';
import { cloneModel, parse, readVarint, replaceStream, serialize, tileDims, walk, type Model } from '../fuzz/model.js';
import { useKernelMode } from '../kernel-mode.js';
import { refusal } from '../refusal.js';
import { mulberry32 } from '../rng.js';
import { checkWithin } from './within.js';

function roundTrip(values: Int32Array, m: number, n: number, codes: Uint8Array | null): Int32Array {
  const bytes = encodeSymbols(values, m, n, codes);
  const out = new Int32Array(m * n).fill(12345);
  decodeSymbols(bytes, m, n, codes, out);
  return out;
}

/** The integers of a grid, and their 2-D Lorenzo differences (spec/FORMAT.md 10.6.5, F_1 with the edge rule). */
function lorenzo(v: Float64Array, m: number, n: number): Int32Array {
  const q = Int32Array.from(v, (x) => Math.round(x));
  const d = new Int32Array(m * n);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const a = j > 0 ? q[i * n + j - 1] : 0;
      const b = i > 0 ? q[(i - 1) * n + j] : 0;
      const c = i > 0 && j > 0 ? q[(i - 1) * n + j - 1] : 0;
      d[i * n + j] = q[i * n + j] - (i === 0 ? a : j === 0 ? b : a + b - c);
    }
  }
  return d;
}

async function archiveRefusal(bytes: Uint8Array): Promise<FormatError> {
  try {
    const a = await open(bytes);
    for (const name of a.names) await a.read(name);
  } catch (e) {
    if (!(e instanceof FormatError)) throw e;
    return e;
  }
  throw new Error('the archive was accepted');
}

// The decoder's tests twice: with the WebAssembly decoder (kernels/symbols.ts) and with the JavaScript one.
describe.each(['auto', 'js'] as const)('the symbol coder round-trips (kernels %s)', (mode) => {
  useKernelMode(mode);

  it('the vega-datasets grids: annual-precip values (0..20195, escape classes) and both grids Lorenzo-differenced, as the binary coder does', () => {
    for (const g of [precip(), volcano()]) {
      const [m, n] = g.shape;
      // Source: vega-datasets data/annual-precip.json and data/volcano.json hold integers (test/archive/datasets.ts).
      expect(g.values.every((x) => Number.isInteger(x))).toBe(true);
      for (const q of [Int32Array.from(g.values), lorenzo(g.values, m, n)]) {
        expect(Array.from(roundTrip(q, m, n, null))).toEqual(Array.from(q));
        // The binary coder of the same grid decodes to the same values: two codings of one grid.
        const other = new Int32Array(m * n);
        decodeInts(encodeInts(q, m, n, null), m, n, null, other);
        expect(Array.from(other)).toEqual(Array.from(q));
      }
    }
  });

  it('every class k = 0..30 at its edges, both signs, and +-2^30 (spec/FORMAT.md 10.3.8: symbols 1..23, the escape above 2^12)', () => {
    const values: number[] = [0];
    for (let k = 0; k <= 30; k++) {
      const lo = 2 ** k;
      const edges = k === 30 ? [lo] : [lo, lo + (k > 0 ? 2 ** (k - 1) : 0), 2 ** (k + 1) - 1];
      for (const v of edges) values.push(v, -v, 0);
    }
    const n = 13;
    const m = Math.ceil(values.length / n);
    const q = new Int32Array(m * n);
    q.set(values);
    expect(Array.from(roundTrip(q, m, n, null))).toEqual(Array.from(q));
    // The same values one per row (single-column grids) and reversed.
    expect(Array.from(roundTrip(q, m * n, 1, null))).toEqual(Array.from(q));
    const r = q.slice().reverse();
    expect(Array.from(roundTrip(r, 1, r.length, null))).toEqual(Array.from(r));
  });

  it('any grid of integers with |v| <= 2^30, bit for bit (property)', () => {
    const limit = 0x40000000;
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 24 }),
        fc.integer({ min: 1, max: 24 }),
        fc.array(fc.oneof(fc.integer({ min: -3, max: 3 }), fc.integer({ min: -5000, max: 5000 }), fc.integer({ min: -limit, max: limit }), fc.constantFrom(-limit, limit, 0)), { minLength: 576, maxLength: 576 }),
        (m, n, pool) => {
          const v = Int32Array.from({ length: m * n }, (_, c) => pool[c]);
          expect(Array.from(roundTrip(v, m, n, null))).toEqual(Array.from(v));
        },
      ),
      { numRuns: 200 },
    );
  });

  it('with a length limit: the stream itself when it fits, null only when the stream is longer, and it stops (property)', () => {
    checkWithin(encodeSymbols, encodeSymbolsWithin, (rand, cells) => Int32Array.from({ length: cells }, () => Math.round((rand() - 0.5) * 2 ** Math.floor(rand() * 14))));
  });

  it('long runs in every context: more than 256 symbols a bucket (rebuilds, halved counts) and zero runs', () => {
    const rand = mulberry32(11);
    for (const rate of [0.01, 0.3, 0.9]) {
      const m = 90;
      const n = 110;
      const v = Int32Array.from({ length: m * n }, () => (rand() < rate ? Math.round((rand() - 0.5) * 2 ** Math.floor(rand() * 16)) : 0));
      expect(Array.from(roundTrip(v, m, n, null))).toEqual(Array.from(v));
    }
  });

  it('skips cells that are not valid: they decode as 0, and a grid with none coded is a bare 4-byte range stream', () => {
    // The volcano grid's Lorenzo differences with the cells below 110 m taken out (as missing cells are).
    const g = volcano();
    const [m, n] = g.shape;
    const d = lorenzo(g.values, m, n);
    const codes = Uint8Array.from(g.values, (x) => (x < 110 ? Cell.Fill : Cell.Valid));
    expect(codes.some((c) => c !== Cell.Valid)).toBe(true);
    for (let c = 0; c < d.length; c++) if (codes[c] !== Cell.Valid) d[c] = 0;
    expect(Array.from(roundTrip(d, m, n, codes))).toEqual(Array.from(d));
    const none = new Uint8Array(12).fill(Cell.Fill);
    const bytes = encodeSymbols(new Int32Array(12), 3, 4, none);
    // Λ_r = 4, the four bytes of an empty range stream, no raw section (spec/FORMAT.md 10.3.8, 10.3.2).
    expect(bytes.length).toBe(5);
    expect(bytes[0]).toBe(4);
    expect(Array.from(roundTrip(new Int32Array(12), 3, 4, none))).toEqual(new Array(12).fill(0));
  });
});

describe.each(['auto', 'js'] as const)('the worked example of spec/FORMAT.md 10.3.8 (kernels %s)', (mode) => {
  useKernelMode(mode);
  // The bytes are read from the spec's text (the line "symbol-example: ..."), so the spec and the coder cannot drift apart.
  const spec = readFileSync(join(ROOT, 'spec', 'FORMAT.md'), 'utf8');
  const line = /^symbol-example: ([0-9a-f ]+)$/m.exec(spec);
  const bytes = Uint8Array.from((line?.[1] ?? '').trim().split(/\s+/), (h) => Number.parseInt(h, 16));
  const grid = Int32Array.from([0, 3, -1, 0, 6, 0, -5000, 1]);

  it('decodes to the grid the spec shows, and the encoder writes exactly those bytes', () => {
    expect(line).not.toBeNull();
    expect(bytes.length).toBe(12);
    const out = new Int32Array(8);
    decodeSymbols(bytes, 2, 4, null, out);
    expect(Array.from(out)).toEqual(Array.from(grid));
    expect(Array.from(encodeSymbols(grid, 2, 4, null))).toEqual(Array.from(bytes));
  });

  it('is refused when cut, lengthened, padded with a 1 bit, or framed wrongly (spec/FORMAT.md 10.3.6, 10.3.8)', () => {
    const run = (b: Uint8Array) => refusal(() => decodeSymbols(b, 2, 4, null, new Int32Array(8)), CodeStreamError).message;
    expect(run(bytes.subarray(0, 11))).toMatch(/^the raw bit section \(1 bytes\) ends before value 6 does$/);
    expect(run(Uint8Array.of(...bytes, 0))).toMatch(/^the raw bit section holds 3 bytes, its values take 2$/);
    const padded = bytes.slice();
    padded[11] |= 1;
    expect(run(padded)).toMatch(/^the raw bit section pads its last byte with bits other than 0$/);
    // The range stream one byte shorter (its last byte becomes raw): it runs short.
    const short = bytes.slice();
    short[0] = 8;
    expect(run(short)).toMatch(/^the range stream ends 1 byte\(s\) before its values do$/);
    // One byte longer (the first raw byte joins it): a byte is left over, or the raw bits run short first.
    const long = bytes.slice();
    long[0] = 10;
    expect(run(long)).toMatch(/^(1 byte\(s\) follow the end of the range stream|the raw bit section \(\d bytes\) ends before value \d does)$/);
    expect(run(Uint8Array.of(0x89, 0x00, ...bytes.subarray(1)))).toMatch(/not in its shortest form/);
    expect(run(Uint8Array.of(3, ...bytes.subarray(1)))).toMatch(/^a range stream is at least 4 bytes, this one 3$/);
    expect(run(Uint8Array.of(100, ...bytes.subarray(1)))).toMatch(/^the range stream's length 100 reaches beyond the 11 bytes after it$/);
    expect(run(new Uint8Array(0))).toMatch(/^the stream ends inside its range-stream length$/);
    expect(run(Uint8Array.of(0x80, 0x80, 0x80, 0x80, 0x80, 0x01))).toMatch(/more than 5 bytes/);
  });

  it('refuses the zero symbol after a non-zero flag (buckets 0..3), which no encoder writes', () => {
    // One cell, bucket 0, coded by hand from spec/FORMAT.md 10.3.8: the zero flag 1 in context ZERO + 0, then symbol 0,
    // whose interval is [0, r E[0][1]) = [0, r) (F0[0][0] = 0, so E[0][1] = 1 + floor(0 * 32743 / T) = 1).
    const enc = new RangeEncoder(16, { p: new Uint16Array(SYMBOL_BINARY_CONTEXTS).fill(32768), count: new Uint8Array(SYMBOL_BINARY_CONTEXTS) });
    enc.bit(1, 0);
    enc.interval(0, enc.width >>> 15);
    const range = enc.finish();
    const b = Uint8Array.of(range.length, ...range);
    expect(refusal(() => decodeSymbols(b, 1, 1, null, new Int32Array(1)), CodeStreamError).message).toMatch(/^value 0: the zero symbol after a non-zero flag, which no encoder writes$/);
  });

  it('refuses a value beyond 2^30 (class 30 with a mantissa bit set)', () => {
    const q = Int32Array.from([2 ** 30]);
    const b = encodeSymbols(q, 1, 1, null);
    // The 29 raw bits of 2^30 are 0; the first one set makes 2^30 + 2^28.
    const raw = 1 + b[0];
    expect(b.length - raw).toBe(4);
    const bad = b.slice();
    bad[raw] |= 0x80;
    expect(refusal(() => decodeSymbols(bad, 1, 1, null, new Int32Array(1)), CodeStreamError).message).toMatch(/^value 0 exceeds 2\^30 in magnitude$/);
  });
});

/** annual-precip at rel:1e-4 in 64 x 64 tiles: dense residuals, most tiles on the symbol coder. Packing takes about a second. */
const dense = (() => {
  let bytes: Uint8Array | null = null;
  return () => {
    if (bytes === null) {
      const g = precip();
      bytes = pack(g.values, g.shape, { bound: 'rel:1e-4', tile: 64, name: 'precip' });
    }
    return bytes;
  };
})();

/** The first tile of field 0 whose residual uses the symbol coder, its residual part and where its raw section starts. */
function symbolTile(m: Model): { t: number; part: ReturnType<typeof walk>['parts'][number]; rawAt: number } {
  const t = m.payloads[0].findIndex((p) => usesSymbolCoder(p));
  const p = m.payloads[0][t];
  const part = walk(p).parts.find((x) => x.name === 'residual')!;
  const head = readVarint(p, part.streamStart);
  return { t, part, rawAt: part.streamStart + head.bytes + head.value };
}

describe('archives with the symbol coder', () => {
  it('annual-precip rel:1e-4: flag bit 2 set, the bound holds (check), and each tile took the coder the rule of spec/FORMAT.md 19 names', async () => {
    const bytes = dense();
    const flags = new DataView(bytes.buffer, bytes.byteOffset).getUint16(10, true);
    expect(flags & FLAG_SYMBOLS).toBe(FLAG_SYMBOLS);
    const a = await open(bytes);
    const g = precip();
    expect((await a.check(Float32Array.from(g.values))).failures).toEqual([]);
    const md = parse(bytes);
    let symbols = 0;
    for (const [t, p] of md.payloads[0].entries()) {
      const w = walk(p);
      const part = w.parts.find((x) => x.name === 'residual');
      if (!part) continue;
      const stream = p.subarray(part.streamStart, part.end);
      const used = (p[w.residualByteAt!] & 0x08) !== 0;
      // Tiles of annual-precip have no missing cells: every cell is coded.
      const [rows, cols] = tileDims(md.header.fields[0], t);
      const grid = new Int32Array(rows * cols);
      (used ? decodeSymbols : decodeInts)(stream, rows, cols, null, grid);
      const bin = encodeInts(grid, rows, cols, null).length;
      const sym = encodeSymbols(grid, rows, cols, null).length;
      const dense = 2 * grid.filter((x) => x !== 0).length >= grid.length;
      const want = sym < bin || (dense && sym <= 1.01 * bin);
      expect(used).toBe(want);
      expect(stream.length).toBe(used ? sym : bin);
      if (used) symbols++;
    }
    expect(symbols).toBeGreaterThan(0);
  }, 60_000);

  it('volcano rel:1e-3 (mostly zero residuals) keeps the binary coder and leaves flag bit 2 clear', async () => {
    const g = volcano();
    const bytes = pack(g.values, g.shape, { bound: 'rel:1e-3', tile: 64 });
    expect(new DataView(bytes.buffer, bytes.byteOffset).getUint16(10, true) & FLAG_SYMBOLS).toBe(0);
    expect(parse(bytes).payloads[0].some((p) => usesSymbolCoder(p))).toBe(false);
  });

  it('refuses a symbol-coded residual in a file without flag bit 2 (spec/FORMAT.md 4)', async () => {
    const m = cloneModel(parse(dense()));
    const { t } = symbolTile(m);
    m.flags &= ~FLAG_SYMBOLS;
    const e = await archiveRefusal(serialize(m));
    expect(e.code).toBe(FormatCode.Malformed);
    expect(e.message).toMatch(new RegExp(`^archive field 'precip' tile ${t}: residual byte 0x[0-9a-f]+ at file offset \\d+ names the symbol coder \\(bit 3\\), but the file's required flag bit 2 \\(symbols\\) is not set$`));
  });

  it('refuses through open/read a residual stream cut short, with a byte after it, or holding a value beyond 2^30 (spec/FORMAT.md 10.3.8, 15)', async () => {
    const base = parse(dense());
    const { t, part, rawAt } = symbolTile(base);
    const p = base.payloads[0][t];
    const stream = p.subarray(part.streamStart, part.end);
    const cases: [string, (q: Uint8Array) => Uint8Array, RegExp][] = [
      ['cut', () => replaceStream(p, part, stream.subarray(0, stream.length - 1)), /the raw bit section \(\d+ bytes\) ends before value \d+ does$/],
      ['trailing', () => replaceStream(p, part, Uint8Array.of(...stream, 0)), /the raw bit section holds \d+ bytes, its values take \d+$/],
      ['padding', () => replaceStream(p, part, Uint8Array.of(...stream.subarray(0, -1), stream[stream.length - 1] | 1)), /pads its last byte with bits other than 0$/],
    ];
    for (const [what, change, message] of cases) {
      const m = cloneModel(base);
      m.payloads[0][t] = change(p);
      const e = await archiveRefusal(serialize(m));
      expect(e.code, what).toBe(FormatCode.Malformed);
      expect(e.message, what).toMatch(new RegExp(`^archive field 'precip' tile ${t}: residual \\(coded stream at file offset \\d+, \\d+ bytes\\): `));
      expect(e.message, what).toMatch(message);
    }
    // A value beyond 2^30: the tile's residual coded again with 2^30 in its first cell, whose 29 raw bits come first; the first set.
    const [rows, cols] = tileDims(base.header.fields[0], t);
    const grid = new Int32Array(rows * cols);
    decodeSymbols(stream, rows, cols, null, grid);
    grid[0] = 2 ** 30;
    const again = encodeSymbols(grid, rows, cols, null);
    const raw = readVarint(again, 0);
    const bad = again.slice();
    bad[raw.bytes + raw.value] |= 0x80;
    const m = cloneModel(base);
    m.payloads[0][t] = replaceStream(p, part, bad);
    expect((await archiveRefusal(serialize(m))).message).toMatch(new RegExp(`^archive field 'precip' tile ${t}: residual \\(coded stream at file offset \\d+, \\d+ bytes\\): value 0 exceeds 2\\^30 in magnitude$`));
    expect(rawAt).toBeGreaterThan(part.streamStart);
  }, 60_000);
});
