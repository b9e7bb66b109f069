/**
 * Window reads: `archive.read(name, { rows, cols })` from memory, a file and
 * HTTP equals the same window of the whole decode bit for bit, fetches only
 * the payloads of the tiles the window touches, and refuses bad windows.
 * Fields are the vega-datasets grids (see datasets.ts), with some cells made
 * missing (NaN, infinities, a fill value) so that windows must carry them
 * bit for bit too.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import fc from 'fast-check';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { InputCode, InputError, MemorySource, open, pack, type Archive, type ByteSource, type FieldValues } from '../../src/index.js';
import { HttpSource } from '../../src/io/http-source.js';
import { FileSource } from '../../src/io/file-source.js';
import { startRangeServer, type RangeServer } from '../io/range-server.js';
import { expectSameBytes } from '../same-bytes.js';
import { precip, volcano, type Grid } from './datasets.js';

const dir = mkdtempSync(join(tmpdir(), 'rankfield-region-'));
let server: RangeServer;
beforeAll(async () => {
  server = await startRangeServer();
});
afterAll(async () => {
  await server.close();
  rmSync(dir, { recursive: true, force: true });
});

/** A grid with missing cells: a NaN with a payload, +-Inf and the fill value -9999 at scattered places. */
function withMissing(g: Grid, dtype: 'f32' | 'f64'): { values: Float32Array | Float64Array; shape: [number, number] } {
  const values = dtype === 'f32' ? Float32Array.from(g.values) : Float64Array.from(g.values);
  const [rows, cols] = g.shape;
  const words = new Uint32Array(values.buffer);
  for (let k = 0; k < values.length; k += 97) {
    const kind = (k / 97) % 4;
    if (kind === 0) values[k] = -9999;
    else if (kind === 1) values[k] = Infinity;
    else if (kind === 2) values[k] = -Infinity;
    else {
      values[k] = NaN;
      // A quiet NaN with a payload: must come back with these exact bits.
      if (dtype === 'f32') words[k] = 0x7fc0_1234;
      else words[2 * k] = 0x1234_5678;
    }
  }
  expect(values.length).toBe(rows * cols);
  return { values, shape: g.shape };
}

/** Bits of a typed array (compares NaN payloads and -0 exactly). */
const bits = (a: Float32Array | Float64Array) => new Uint32Array(a.buffer, a.byteOffset, a.byteLength / 4);

/**
 * The whole decode, assembled here tile by tile from `archive.tile` (a path
 * apart from the window reader), and checked against `read()` of the whole.
 */
async function assemble(a: Archive, name: string): Promise<FieldValues> {
  const { header: h } = a.field(name);
  const [rows, cols] = h.shape;
  const [tr, tc] = h.tile;
  const gc = Math.ceil(cols / tc);
  const values = h.dtype === 'f32' ? new Float32Array(rows * cols) : new Float64Array(rows * cols);
  for (let t = 0; t < Math.ceil(rows / tr) * gc; t++) {
    const tile = await a.tile(name, t, true);
    const i0 = Math.floor(t / gc) * tr;
    const j0 = (t % gc) * tc;
    const n = Math.min(tc, cols - j0);
    for (let i = 0; i < Math.min(tr, rows - i0); i++) values.set(tile.subarray(i * n, (i + 1) * n), (i0 + i) * cols + j0);
  }
  const whole = await a.read(name);
  expectSameBytes(whole.values, values);
  return { ...whole, shape: [rows, cols], values, window: { rows: [0, rows], cols: [0, cols] } };
}

/** The window of a whole decode, cut out directly. */
function crop(whole: FieldValues, rows: [number, number], cols: [number, number]): Float32Array | Float64Array {
  const w = cols[1] - cols[0];
  const out = whole.values instanceof Float32Array ? new Float32Array((rows[1] - rows[0]) * w) : new Float64Array((rows[1] - rows[0]) * w);
  for (let i = rows[0]; i < rows[1]; i++) out.set(whole.values.subarray(i * whole.shape[1] + cols[0], i * whole.shape[1] + cols[1]), (i - rows[0]) * w);
  return out;
}

interface Case {
  label: string;
  grid: () => Grid;
  dtype: 'f32' | 'f64';
  tile: [number, number];
  bound: string;
}

// Tile shapes: square, oblong with edge tiles on both axes, single rows, and one tile bigger than the field.
const CASES: Case[] = [
  { label: 'volcano f64, tiles 16x16', grid: volcano, dtype: 'f64', tile: [16, 16], bound: 'abs:0.5' },
  { label: 'volcano f32, tiles 7x13', grid: volcano, dtype: 'f32', tile: [7, 13], bound: 'rel:1e-3' },
  { label: 'volcano f64, tiles 1x40', grid: volcano, dtype: 'f64', tile: [1, 40], bound: 'abs:0.1' },
  { label: 'volcano f32, one tile 100x100', grid: volcano, dtype: 'f32', tile: [100, 100], bound: 'abs:1' },
  { label: 'annual-precip f32, tiles 64x64', grid: precip, dtype: 'f32', tile: [64, 64], bound: 'rmse:2' },
  { label: 'annual-precip f64, tiles 24x50', grid: precip, dtype: 'f64', tile: [24, 50], bound: 'abs:1' },
];

/** The three sources over the same archive bytes. */
async function sources(bytes: Uint8Array, name: string): Promise<Record<string, () => Promise<ByteSource>>> {
  const file = join(dir, `${name}.rfz`);
  writeFileSync(file, bytes);
  server.put(`/${name}.rfz`, bytes);
  return {
    memory: async () => new MemorySource(bytes),
    file: async () => FileSource.open(file),
    http: async () => new HttpSource(`${server.url}/${name}.rfz`, { retryDelay: 1 }),
  };
}

describe.each(CASES)('windows of $label', ({ label, grid, dtype, tile, bound }) => {
  const field = withMissing(grid(), dtype);
  const [rows, cols] = field.shape;
  const bytes = pack(field.values, field.shape, { bound, tile, fill: -9999, name: 'g' });
  let whole: FieldValues;
  let archives: Record<string, Archive>;

  beforeAll(async () => {
    whole = await assemble(await open(bytes), 'g');
    const made = await sources(bytes, label.replace(/[^a-z0-9]+/gi, '-'));
    archives = {};
    for (const [k, make] of Object.entries(made)) archives[k] = await open(await make());
  });
  afterAll(async () => {
    for (const a of Object.values(archives)) await a.close();
  });

  const fixed: [string, [number, number], [number, number]][] = [
    ['the whole field', [0, rows], [0, cols]],
    ['the first cell', [0, 1], [0, 1]],
    ['the last cell (an edge tile)', [rows - 1, rows], [cols - 1, cols]],
    ['one row across all tiles', [Math.floor(rows / 2), Math.floor(rows / 2) + 1], [0, cols]],
    ['one column', [0, rows], [cols - 2, cols - 1]],
    ['the last rows and columns (edge tiles)', [rows - 5, rows], [cols - 20, cols]],
    ['a window straddling tile corners', [Math.min(tile[0], rows - 1) - 1, Math.min(rows, 2 * tile[0] + 1)], [Math.min(tile[1], cols - 1) - 1, Math.min(cols, tile[1] + 2)]],
    // A window that is one whole tile is read as that tile's decoded values, without an output of its own to fill.
    ['exactly the first tile', [0, Math.min(tile[0], rows)], [0, Math.min(tile[1], cols)]],
    ['exactly the last tile (an edge tile)', [Math.floor((rows - 1) / tile[0]) * tile[0], rows], [Math.floor((cols - 1) / tile[1]) * tile[1], cols]],
  ];

  it.each(fixed)('%s equals the whole decode, from each source', async (_what, r, c) => {
    const want = crop(whole, r, c);
    for (const [k, a] of Object.entries(archives)) {
      const got = await a.read('g', { rows: r, cols: c });
      expect(got.shape, k).toEqual([r[1] - r[0], c[1] - c[0]]);
      expect(got.window).toEqual({ rows: r, cols: c });
      expect(got.dtype).toBe(dtype);
      expectSameBytes(got.values, want, `${k} window ${r} x ${c}`);
    }
  });

  it('gives each read values of its own, also where the window is one whole tile', async () => {
    const r: [number, number] = [0, Math.min(tile[0], rows)];
    const c: [number, number] = [0, Math.min(tile[1], cols)];
    const a = archives.memory;
    const first = await a.read('g', { rows: r, cols: c });
    const second = await a.read('g', { rows: r, cols: c });
    expect(first.values).not.toBe(second.values);
    first.values.fill(12345);
    expectSameBytes((await a.read('g', { rows: r, cols: c })).values, crop(whole, r, c));
    expectSameBytes(second.values, crop(whole, r, c));
  });

  it('random windows equal the whole decode, from each source', async () => {
    const range = (n: number) => fc.tuple(fc.integer({ min: 0, max: n - 1 }), fc.integer({ min: 1, max: n })).map(([a, len]) => [a, Math.min(n, a + len)] as [number, number]);
    await fc.assert(
      fc.asyncProperty(range(rows), range(cols), fc.constantFrom('memory', 'file', 'http'), async (r, c, k) => {
        const got = await archives[k].read('g', { rows: r, cols: c });
        expectSameBytes(got.values, crop(whole, r, c));
      }),
      { numRuns: 40, seed: 20261201 },
    );
  });

  it.runIf(bound.startsWith('abs'))('windows hold the original within the abs bound, with missing cells bit for bit', async () => {
    const tol = Number(bound.slice(4));
    const r: [number, number] = [Math.floor(rows / 3), rows];
    const c: [number, number] = [1, Math.floor(cols / 2)];
    const got = await archives.file.read('g', { rows: r, cols: c });
    const w = c[1] - c[0];
    const ob = bits(field.values);
    const gb = bits(got.values);
    const wpv = dtype === 'f32' ? 1 : 2;
    for (let i = r[0]; i < r[1]; i++) {
      for (let j = c[0]; j < c[1]; j++) {
        const o = field.values[i * cols + j];
        const k = (i - r[0]) * w + (j - c[0]);
        if (Number.isFinite(o) && o !== -9999) expect(Math.abs(got.values[k] - o)).toBeLessThanOrEqual(tol);
        else for (let b = 0; b < wpv; b++) expect(gb[k * wpv + b]).toBe(ob[(i * cols + j) * wpv + b]);
      }
    }
  });
});

/** A source that records every read, over bytes in memory. */
class Recording implements ByteSource {
  readonly label = 'recorded';
  reads: [number, number][] = [];
  constructor(private readonly bytes: Uint8Array) {}
  async size() {
    return this.bytes.length;
  }
  async read(offset: number, length: number) {
    this.reads.push([offset, length]);
    return this.bytes.subarray(offset, offset + length);
  }
}

describe('what a window read fetches', () => {
  const g = precip();
  const bytes = pack(Float32Array.from(g.values), g.shape, { bound: 'abs:1', tile: 16, name: 'p' });

  it('fetches the payloads of exactly the tiles the window touches, merging neighbours into one read per run', async () => {
    const src = new Recording(bytes);
    // Gaps between tile rows are dropped, not fetched: maxGap 0.
    const a = await open(src, { coalesce: { maxGap: 0 } });
    const ix = (await a.loadIndex()).fields[0];
    const opened = src.reads.length;
    // Rows 20..50 touch tile rows 1..3; columns 40..100 touch tile columns 2..6 (of 23).
    await a.read('p', { rows: [20, 50], cols: [40, 100] });
    const reads = src.reads.slice(opened);
    const gc = Math.ceil(360 / 16);
    const want: number[] = [];
    for (let ti = 1; ti <= 3; ti++) for (let tj = 2; tj <= 6; tj++) want.push(ti * gc + tj);
    // Each tile row's five payloads lie side by side in the file: one read each.
    expect(reads).toEqual([1, 2, 3].map((ti) => [ix.offset[ti * gc + 2], ix.offset[ti * gc + 6] + ix.length[ti * gc + 6] - ix.offset[ti * gc + 2]]));
    const fetched = reads.reduce((s, [, n]) => s + n, 0);
    expect(fetched).toBe(want.reduce((s, t) => s + ix.length[t], 0));
  });

  it('merges across tile rows when the gap is small and the waste within its limit', async () => {
    const src = new Recording(bytes);
    const a = await open(src, { coalesce: { maxGap: 1 << 20, maxWaste: 1000 } });
    await a.loadIndex(); // the index pages, read here so that only payload reads are counted
    const opened = src.reads.length;
    await a.read('p', { rows: [20, 50], cols: [40, 100] });
    expect(src.reads.length - opened).toBe(1);
  });

  it('fetches the index pages of the touched tiles once, in one read before the payloads', async () => {
    const src = new Recording(bytes);
    const a = await open(src, { coalesce: { maxGap: 0 } });
    const opened = src.reads.length;
    const d = a.directory.fields[0];
    // 11 x 23 tiles of 16, pages of 8 x 8 tiles: 2 x 3 pages. Rows 100..140, cols 120..140 touch
    // tile rows 6..8 and tile columns 7..8: pages 0, 1 (tile rows 0-7) and 3, 4 (tile rows 8-10).
    await a.read('p', { rows: [100, 140], cols: [120, 140] });
    const reads = src.reads.slice(opened);
    const pageReads = reads.filter(([o]) => d.page_offset.includes(o));
    expect(pageReads).toEqual([
      [d.page_offset[0], d.page_length[0] + d.page_length[1]],
      [d.page_offset[3], d.page_length[3] + d.page_length[4]],
    ]);
    // The same window again: no page is fetched twice.
    const before = src.reads.length;
    await a.read('p', { rows: [100, 140], cols: [120, 140] });
    expect(src.reads.slice(before).filter(([o]) => d.page_offset.includes(o))).toEqual([]);
  });

  it('runs concurrent reads on one archive object, each with its own correct result', async () => {
    server.put('/concurrent.rfz', bytes);
    const a = await open(new HttpSource(`${server.url}/concurrent.rfz`, { retryDelay: 1 }));
    const whole = await assemble(await open(bytes), 'p');
    const windows: [[number, number], [number, number]][] = Array.from({ length: 24 }, (_, k) => [
      [(k * 7) % 160, Math.min(168, ((k * 7) % 160) + 1 + ((k * 13) % 40))],
      [(k * 29) % 350, Math.min(360, ((k * 29) % 350) + 1 + ((k * 31) % 90))],
    ]);
    const results = await Promise.all(windows.map(([r, c]) => a.read('p', { rows: r, cols: c, verify: true })));
    results.forEach((got, k) => expectSameBytes(got.values, crop(whole, windows[k][0], windows[k][1]), `window ${k}`));
  });
});

describe('bad windows', () => {
  const g = volcano();
  const bytes = pack(g.values, g.shape, { bound: 'abs:1', tile: 16, name: 'v' });

  it.each([
    [{ rows: [5, 5] }, /rows \[5, 5\) is empty/],
    [{ rows: [10, 3] }, /rows \[10, 3\) is empty/],
    [{ rows: [-1, 3] }, /field 'v' has 61 rows; rows \[-1, 3\) lies outside rows 0\.\.61/],
    [{ cols: [0, 88] }, /field 'v' has 87 columns; cols \[0, 88\) lies outside cols 0\.\.87/],
    [{ rows: [1.5, 3] }, /rows of a window must be \[start, end\] with integer ends, got \[1\.5,3\]/],
    [{ cols: [1] }, /cols of a window must be \[start, end\]/],
    [{ cols: 'all' }, /cols of a window must be/],
    [{ row: [0, 1] }, /unknown read option 'row' \(known: slices, rows, cols, verify/],
    [{ verify: 'yes' }, /verify must be true or false/],
  ])('%j is refused with InputError', async (o, message) => {
    const a = await open(bytes);
    const e = await a.read('v', o as never).then(
      () => null,
      (err: unknown) => err,
    );
    expect(e).toBeInstanceOf(InputError);
    expect((e as InputError).code).toBe(InputCode.Option);
    expect((e as InputError).message).toMatch(message);
  });
});
