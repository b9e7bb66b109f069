/**
 * Packing and reading on worker threads. Worker threads load the compiled
 * modules (dist/parallel/worker.js), so these tests import the library from
 * dist/ (built first when older than src/, as the command-line tests do),
 * typed by the sources. The fields are open grids shipped by vega-datasets
 * (see test/archive/datasets.ts).
 */
import { existsSync, mkdtempSync, readdirSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ensureBuilt, ROOT } from '../cli/helpers.js';
import { mirrored, precip, volcano } from '../archive/datasets.js';
import { expectSameBytes } from '../same-bytes.js';
import { layeredArchive, smoothFactors } from '../format/layered.js';

type Lib = typeof import('../../src/index.js');
type Pool = typeof import('../../src/parallel/pool.js');
type Encode = typeof import('../../src/parallel/encode.js');
type Field = typeof import('../../src/codec/field.js');
type Files = typeof import('../../src/cli/files.js');

const dist = (path: string) => import(pathToFileURL(join(ROOT, 'dist', path)).href);
let lib: Lib;
let pool: Pool;
let encode: Encode;
let field: Field;
let files: Files;

beforeAll(async () => {
  ensureBuilt();
  [lib, pool, encode, field, files] = await Promise.all([dist('index.js'), dist('parallel/pool.js'), dist('parallel/encode.js'), dist('codec/field.js'), dist('cli/files.js')]);
}, 120_000);

const dir = mkdtempSync(join(tmpdir(), 'rankfield-threads-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/**
 * The volcano grid (61 x 87) with missing cells of both kinds: heights
 * below 100 m become the fill value -999, and a 3 x 4 block becomes NaN.
 */
function volcanoWithFill(): { values: Float32Array; shape: [number, number]; fill: number } {
  const g = volcano();
  const values = Float32Array.from(g.values, (v) => (v < 100 ? -999 : v));
  for (let i = 30; i < 33; i++) for (let j = 40; j < 44; j++) values[i * g.shape[1] + j] = Number.NaN;
  return { values, shape: g.shape, fill: -999 };
}

/** annual-precip mirror-tiled to 400 x 500 (more than 2^16 values, so reads use worker threads), packed once. */
const big: { values: Float32Array; bytes: Uint8Array } = { values: new Float32Array(0), bytes: new Uint8Array(0) };
beforeAll(() => {
  big.values = mirrored(precip(), 500, 0, 400);
  big.bytes = lib.pack(big.values, [400, 500], { bound: 'rel:1e-3', tile: 48 });
}, 60_000);

const same = (a: Uint8Array, b: Uint8Array) => Buffer.from(a).equals(Buffer.from(b));

// Each case packs a 61 x 87 field three times (pack, then 2 and 3 threads, each
// starting its workers): a second or two idle, several times that on a busy 2-core machine.
describe('packAsync: the same archive for every thread count', () => {
  const cases: [string, string, number | [number, number]][] = [
    ['pointwise rel:1e-3, fill cells and NaN', 'rel:1e-3', 16],
    ['psnr:60, fill cells and NaN', 'psnr:60', [12, 20]],
    ['abs:0.5, fill cells and NaN', 'abs:0.5', 16],
  ];
  for (const [label, bound, tile] of cases) {
    it(label, async () => {
      const { values, shape, fill } = volcanoWithFill();
      const o = { bound, tile, fill };
      // One thread is pack() itself (packAsync with threads 1 runs it in the calling thread).
      const sync = lib.pack(values, shape, o);
      for (const threads of [2, 3]) expect(same(await lib.packAsync(values, shape, { ...o, threads }), sync), `threads ${threads}`).toBe(true);
      // And the archive holds its bound: the decoded field against the original.
      const report = await (await lib.open(sync)).check(values);
      expect(report.failures).toEqual([]);
    }, 120_000);
  }

  // Dense residuals take the symbol coder (spec/FORMAT.md 10.3.8, 19), chosen tile by tile on the workers; the
  // required flag bit 2 is set as the first such tile is written, whichever thread coded it.
  it('annual-precip rel:1e-4: residuals on the symbol coder, flag bit 2, the same bytes on 1 and 2 threads', async () => {
    const g = precip();
    const values = Float32Array.from(g.values);
    const o = { bound: 'rel:1e-4', tile: 48 };
    const sync = lib.pack(values, g.shape, o);
    expect(new DataView(sync.buffer, sync.byteOffset).getUint16(10, true) & 4).toBe(4);
    expect(same(await lib.packAsync(values, g.shape, { ...o, threads: 2 }), sync)).toBe(true);
    expect((await (await lib.open(sync)).check(values)).failures).toEqual([]);
  }, 120_000);

  // The field layer is chosen and computed in the calling thread; each tile's term travels to its worker.
  it.each([
    ['rel:1e-3', 2],
    ['psnr:60', 3],
  ] as const)('a field layer (%s, layer %s), fill cells and NaN, and its L2 first pass on the workers', async (bound, layer) => {
    const { values, shape, fill } = volcanoWithFill();
    const o = { bound, tile: 16, fill, layer };
    const sync = lib.pack(values, shape, o);
    // The layer is there, with its factor fields.
    const h = (await lib.open(sync)).header.fields;
    expect(h.some((f) => f.layer !== undefined)).toBe(true);
    for (const threads of [2, 3]) expect(same(await lib.packAsync(values, shape, { ...o, threads }), sync), `threads ${threads}`).toBe(true);
  }, 120_000);

  // Under an L2 bound the tile trial packs each candidate's tiles side by side as a small field with its own plan: with a
  // pool, each small field's first pass and its plans' costing run on the workers (MosaicWork in auto-tile.ts).
  it.each(['psnr:40', 'psnr:70'])('annual-precip %s, tile auto, on a pool of 2: the L2 trial on the workers, the same archive as pack()', async (bound) => {
    const g = precip();
    const values = Float32Array.from(g.values);
    const pool = new lib.WorkerPool(2);
    try {
      expect(same(await lib.packAsync(values, g.shape, { bound, pool }), lib.pack(values, g.shape, { bound }))).toBe(true);
    } finally {
      await pool.close();
    }
  }, 120_000);

  it('auto tile and a field of slices through ArchiveBuilder.addAsync', async () => {
    const g = volcano();
    const one = Float32Array.from(g.values);
    const stack = new Float32Array(one.length * 3);
    for (let s = 0; s < 3; s++) stack.set(one.map((v) => v + 10 * s), s * one.length);
    // A field this small with the tile trial packs in the calling thread unless the caller gives a pool: given here, so the workers run.
    const build = async (pool: InstanceType<typeof lib.WorkerPool> | null) => {
      const sink = new lib.MemorySink();
      const b = new lib.ArchiveBuilder(sink, {}, { slices: true });
      const o = { bound: 'psnr:50', name: 'stack', slices: 3, ndShape: [3, ...g.shape], tile: 'auto' as const };
      if (pool === null) b.add(stack, g.shape, o);
      else await b.addAsync(stack, g.shape, { ...o, pool });
      // A pointwise bound with the tile trial: the tiles it encoded are used as the field's own, on any thread count.
      await b.addAsync(one, g.shape, { bound: 'rel:1e-4', name: 'plain', tile: 'auto', ...(pool === null ? { threads: 1 } : { pool }) });
      b.finish();
      return sink.bytes();
    };
    const pool = new lib.WorkerPool(3);
    try {
      expect(same(await build(pool), await build(null))).toBe(true);
    } finally {
      await pool.close();
    }
  }, 120_000);

  it('two calls at once on one pool each give pack\'s archive: the tile trial\'s tasks waiting in the queue do not stall the other call', async () => {
    const p = new pool.WorkerPool(2);
    try {
      const shape: [number, number] = [400, 500];
      // The second call's tile trial (tile 'auto', the default) queues all its candidates' tiles at once.
      const options = [{ bound: 'rel:1e-3', tile: 16 }, { bound: 'rel:1e-3' }];
      const outs = await Promise.all(options.map((o) => lib.packAsync(big.values, shape, { ...o, pool: p })));
      for (const [k, o] of options.entries()) expect(same(outs[k], lib.pack(big.values, shape, o)), `call ${k}`).toBe(true);
    } finally {
      await p.close();
    }
  }, 120_000);

  it('refuses a thread count that is not an integer from 1 to MAX_THREADS', async () => {
    const { values, shape } = volcanoWithFill();
    for (const threads of [0, -2, 1.5, Number.NaN, lib.MAX_THREADS + 1]) {
      await expect(lib.packAsync(values, shape, { bound: 'rel:1e-2', threads })).rejects.toMatchObject({ name: 'InputError', code: 'option' });
    }
  });
});

describe('WorkerPool options', () => {
  it('refuses a depth that is not a positive integer, before starting any worker', () => {
    for (const depth of [0, -1, 1.5, Number.NaN]) {
      expect(() => new pool.WorkerPool(2, { depth })).toThrow(expect.objectContaining({ name: 'InputError', code: 'option' }));
    }
  });

  it('with steal, a task posted to a worker keeps its body in this thread (copied, not transferred); without, it is transferred', async () => {
    const local = (kind: string, body: unknown) => encode.encodeTasks[kind as 'encode-forget'](body as never).result;
    for (const steal of [true, false]) {
      const p = new pool.WorkerPool(2, { local, steal });
      try {
        const bufs = Array.from({ length: 6 }, () => new Float64Array(1000));
        const runs = bufs.map((b) => p.run('encode-forget', { key: -1, b }, [b.buffer]));
        // Three to the worker (its depth) and one to this thread's lane at once: the rest wait in the queue.
        const kept = bufs.filter((b) => b.length === 1000).length;
        expect(await Promise.all(runs)).toEqual(Array(6).fill(null));
        expect(kept).toBe(steal ? 6 : 3);
      } finally {
        await p.close();
      }
    }
  });

  it('a worker skips, unanswered, a task whose claim another thread took (Atomics on shared memory), and claims the others before running them', async () => {
    const { Worker } = await import('node:worker_threads');
    const w = new Worker(join(ROOT, 'dist', 'parallel', 'worker.js'));
    try {
      const taken = new Int32Array(new SharedArrayBuffer(4));
      taken[0] = 2;
      const free = new Int32Array(new SharedArrayBuffer(4));
      const replies: number[] = [];
      const second = new Promise<void>((resolve) =>
        w.on('message', (m: { id: number }) => {
          replies.push(m.id);
          if (m.id === 2) resolve();
        }),
      );
      w.postMessage({ id: 1, kind: 'encode-forget', body: { key: -1 }, claim: taken });
      w.postMessage({ id: 2, kind: 'encode-forget', body: { key: -1 }, claim: free });
      await second;
      // Messages are handled in order and task 1 is dropped at once, so its answer would have come first.
      expect(replies).toEqual([2]);
      expect([taken[0], free[0]]).toEqual([2, 1]);
    } finally {
      await w.terminate();
    }
  });
});

/** The bands readBands handed over, joined in order; they must hold `length` values in all. */
function joinBands(parts: Float32Array[], length: number): Float32Array {
  const out = new Float32Array(length);
  let at = 0;
  for (const p of parts) {
    out.set(p, at);
    at += p.length;
  }
  expect(at).toBe(length);
  return out;
}

describe('readBands: a field band by band, on worker threads', () => {
  it('reads a field with a layer (spec/FORMAT.md 6.2.2) on 2 threads as Archive.read does, each band with its factor rows', async () => {
    // 2 slices of 160 x 220 (70 400 values, above the size read on one thread), rank 3, the precip grid's values.
    const g = precip();
    const values = Float32Array.from({ length: 320 * 220 }, (_, c) => g.values[((Math.floor(c / 220) % g.shape[0]) * g.shape[1] + (c % 220)) % g.values.length]);
    const { left, right } = smoothFactors(320, 220, 3);
    const bytes = layeredArchive({ values, shape: [160, 220], slices: 2, tile: [32, 44], tol: 0.5, rank: 3, left, right }).bytes;
    const archive = await lib.open(bytes);
    const want = await archive.read();
    const parts: Float32Array[] = [];
    await lib.readBands(archive, undefined, { threads: 2, location: bytes, bandCells: 10_000 }, (v) => void parts.push(v as Float32Array));
    expect(parts.length).toBeGreaterThan(4);
    expectSameBytes(joinBands(parts, want.values.length), want.values, 'layered field on 2 threads');
  }, 60_000);

  it('gives the values of Archive.read, for the whole field and for windows, with 1 and 2 threads', async () => {
    const bytes = big.bytes;
    const archive = await lib.open(bytes);
    for (const window of [{}, { rows: [37, 301] as [number, number], cols: [5, 497] as [number, number] }]) {
      const want = await archive.read(undefined, window);
      for (const threads of [1, 2]) {
        const parts: Float32Array[] = [];
        const got = await lib.readBands(archive, undefined, { ...window, threads, location: bytes, bandCells: 30_000 }, (v) => void parts.push(v as Float32Array));
        expect(parts.length).toBeGreaterThan(2);
        expectSameBytes(joinBands(parts, want.values.length), want.values, `threads ${threads}`);
        expect(got.shape).toEqual(want.shape);
        expect(got.window).toEqual(want.window);
        expect(got.achieved.maxErr).toBe(want.achieved.maxErr);
        expect(got.achieved.rmse).toBeCloseTo(want.achieved.rmse, 12);
      }
    }
  }, 60_000);

  it('cuts a tile row of more than maxBandCells values into bands of fewer rows, and a wider row into runs of tile columns, in C order', async () => {
    // Volcano (61 rows x 87 columns) in 16 x 24 tiles, progressive and read under a looser bound too, so prefix reads are counted.
    const v = volcano();
    const bytes = lib.pack(v.values, v.shape, { bound: 'abs:0.01', tile: [16, 24], progressive: true });
    const archive = await lib.open(bytes);
    for (const window of [{}, { rows: [5, 58] as [number, number], cols: [3, 80] as [number, number] }]) {
      for (const bound of [undefined, 'abs:2']) {
        const o = { ...window, ...(bound ? { bound } : {}) };
        const want = await archive.read(undefined, o);
        // A tile row (16 rows x up to 87 columns) is more than 500 values: bands of 5 or 6 rows. A row is more than 50: runs of up to 48 columns, a row at a time.
        for (const most of [500, 50]) {
          const parts: Float64Array[] = [];
          const got = await lib.readBands(archive, undefined, { ...o, threads: 1, maxBandCells: most }, (x) => void parts.push(x as Float64Array));
          for (const p of parts) expect(p.length).toBeLessThanOrEqual(most);
          expect(parts.length).toBeGreaterThan(most === 500 ? 8 : 60);
          const joined = new Float64Array(want.values.length);
          let at = 0;
          for (const p of parts) {
            joined.set(p, at);
            at += p.length;
          }
          expect(at).toBe(want.values.length);
          expectSameBytes(joined, want.values, `most ${most}`);
          // Each tile counted once, as Archive.read counts it.
          expect(got.prefixTiles).toBe(want.prefixTiles);
          expect(got.achieved.maxErr).toBe(want.achieved.maxErr);
          expect(got.achieved.rmse).toBeCloseTo(want.achieved.rmse, 12);
        }
      }
    }
  }, 60_000);

  it('a damaged tile fails the read with the FormatError Archive.read gives', async () => {
    const bytes = big.bytes;
    const archive = await lib.open(bytes);
    const e = await archive.tileEntry(undefined, 20);
    const bad = bytes.slice();
    bad[e.offset + 3] ^= 0x40;
    const damaged = await lib.open(bad);
    const want = await damaged.read().catch((err: unknown) => err);
    expect(want).toBeInstanceOf(lib.FormatError);
    const got = await lib.readBands(damaged, undefined, { threads: 2, location: bad, bandCells: 10_000 }, () => undefined).catch((err: unknown) => err);
    expect(got).toBeInstanceOf(lib.FormatError);
    expect(got).toMatchObject({ code: 'checksum', message: (want as Error).message });
  }, 60_000);
});

describe('a worker thread that dies', () => {
  it.each([
    ['rel', 1e-4],
    ['rmse', 0.5],
  ] as const)('fails the encoding with one error, and the output file is not left behind (%s bound)', async (mode, value) => {
    // Workers with a heap far too small for a 256 x 256 tile: they run out of memory
    // (ERR_WORKER_OUT_OF_MEMORY), which the pool reports as a failed worker.
    const p = new pool.WorkerPool(2, { resourceLimits: { maxOldGenerationSizeMb: 4, maxYoungGenerationSizeMb: 1 } });
    const values = mirrored(precip(), 512, 0, 512);
    const spec = { name: 'f', dtype: 'f32' as const, rows: 512, cols: 512, tileRows: 256, tileCols: 256, bound: { mode, value }, fill: null };
    const out = join(dir, `dead-${mode}.rfz`);
    try {
      const run = files.writeOutputWith(out, { force: false, inputs: [] }, async (sink) => {
        await encode.encodeFieldParallel(field.memoryBands(values, 512), spec, (_t, tile) => sink.write(tile.payload), p);
      });
      await expect(run).rejects.toThrow(/worker thread (failed|stopped)/);
    } finally {
      await p.close();
    }
    expect(existsSync(out)).toBe(false);
    expect(readdirSync(dir).filter((f) => f.endsWith('.tmp'))).toEqual([]);
  }, 60_000);
});
