/**
 * The viewer's planes and block cache, in Node, against the library's own
 * window reads: plane cells map to N-D indices in C order (row-major, the
 * last index varying fastest: NumPy's default order, from memory), blocks
 * hold exactly the values a read of their window gives, every k-th cell at
 * step k, and the coarse pass holds what a read at the coarse bound gives.
 *
 * Data: vega-datasets data/volcano.json (61 x 87) and data/annual-precip.json
 * (168 x 360).
 */
import { describe, expect, it } from 'vitest';
import { open, pack } from '../../src/index.js';
import { BlockStore, blockValue, COARSE_BOUND } from '../../src/view/blocks.js';
import { ndIndex, planeLayout, readWindow, stepOf, tileOf } from '../../src/view/plane.js';
import { precip, volcano } from '../archive/datasets.js';

/** The C-order offset of an N-D index. */
function ravel(idx: number[], shape: number[]): number {
  return idx.reduce((flat, i, a) => flat * shape[a] + i, 0);
}

describe('planes of a field', () => {
  // 61 x 87 = 5307 = 3 x 29 x 61 values.
  const g = volcano();
  const nd = [3, 29, 61];

  it.each(['slices', 'matrix:1'])('maps every cell of every plane to the N-D index whose original value it decodes to (layout %s)', async (layout) => {
    const bytes = pack(Float32Array.from(g.values), layout === 'slices' ? [29, 61] : [3, 29 * 61], { bound: 'abs:0.01', tile: [16, 16], name: 'v', ndShape: nd, dims: ['a', 'b', 'c'], layout, ...(layout === 'slices' ? { slices: 3 } : {}) });
    const archive = await open(bytes);
    const h = archive.field('v').header;
    const L = planeLayout(h);
    expect([L.count, L.rows, L.cols, L.what]).toEqual([3, 29, 61, layout === 'slices' ? 'slice' : 'snapshot']);
    for (let p = 0; p < L.count; p++) {
      const got = await archive.read('v', readWindow(h, L, p, 0, L.rows, 0, L.cols));
      let worst = 0;
      for (let r = 0; r < L.rows; r++) {
        for (let c = 0; c < L.cols; c++) {
          const idx = ndIndex(h, L, p, r, c);
          expect(idx[0]).toBe(p);
          worst = Math.max(worst, Math.abs(got.values[r * L.cols + c] - g.values[ravel(idx, nd)]));
        }
      }
      expect(worst).toBeLessThanOrEqual(0.01);
    }
  });

  it('names the tile under a cell as the index counts tiles (row by row, slice by slice)', async () => {
    const bytes = pack(Float32Array.from(g.values), [61, 87], { bound: 'abs:0.5', tile: [16, 20], name: 'v' });
    const archive = await open(bytes);
    const h = archive.field('v').header;
    const L = planeLayout(h);
    // Tile 4 x 5 of the grid: rows 48..60, columns 80..86, tile 3 * 5 + 4 = 19 of 20.
    expect(tileOf(h, L, 0, 50, 85)).toBe(19);
    const t = await archive.tile('v', 19);
    const w = await archive.read('v', { rows: [48, 61], cols: [80, 87] });
    expect(Array.from(t)).toEqual(Array.from(w.values));
  });

  it('samples every 2^j-th cell when zoomed out by 2^j', () => {
    expect([4, 1, 0.75, 0.5, 0.4, 0.25, 0.2, 1 / 3].map(stepOf)).toEqual([1, 1, 1, 2, 2, 4, 4, 2]);
  });
});

describe('the block cache', () => {
  const g = precip();
  // psnr:40 in 30 x 29 tiles leaves several tiles a low-rank part, hence recorded prefixes.
  const bytes = pack(Float32Array.from(g.values), [168, 360], { bound: 'psnr:40', tile: [30, 29], name: 'p', progressive: true });
  const all = (L: { rows: number; cols: number; blockRows: number; blockCols: number }) => {
    const out: [number, number][] = [];
    for (let bi = 0; bi < Math.ceil(L.rows / L.blockRows); bi++) for (let bj = 0; bj < Math.ceil(L.cols / L.blockCols); bj++) out.push([bi, bj]);
    return out;
  };

  it('holds coarse blocks as a read at the coarse bound gives them, then the stored values', async () => {
    const archive = await open(bytes);
    const h = archive.field('p').header;
    const L = planeLayout(h);
    const store = new BlockStore(archive, h, L);
    const coarse = await archive.read('p', { bound: COARSE_BOUND });
    const stored = await archive.read('p');
    const check = (want: Float32Array | Float64Array) => {
      for (let r = 0; r < 168; r++) for (let c = 0; c < 360; c++) if (blockValue(store.get(0, Math.floor(r / 30), Math.floor(c / 29), 1)!, r, c) !== want[r * 360 + c]) return `cell ${r},${c}`;
      return null;
    };
    // The coarse pass alone (load makes it first, for an archive with prefixes).
    await store.readPass(0, all(L), 1, true, () => undefined, () => true);
    expect(check(coarse.values)).toBeNull();
    expect(store.tally.prefixTiles).toBe(coarse.prefixTiles);
    await store.load(0, all(L), 1, () => undefined, () => true);
    expect(check(stored.values)).toBeNull();
    // A view that has moved on reads nothing.
    const before = store.tally.reads;
    await new BlockStore(archive, h, L).load(0, all(L), 1, () => undefined, () => false);
    expect(store.tally.reads).toBe(before);
    expect(all(L).every(([bi, bj]) => store.get(0, bi, bj, 1)!.coarse === false)).toBe(true);
  });

  it('keeps every k-th cell of each block at step k', async () => {
    const archive = await open(bytes);
    const h = archive.field('p').header;
    const L = planeLayout(h);
    const store = new BlockStore(archive, h, L);
    const stored = await archive.read('p');
    await store.load(0, all(L), 4, () => undefined, () => true);
    let cells = 0;
    for (const [bi, bj] of all(L)) {
      const b = store.get(0, bi, bj, 4)!;
      expect(b.step).toBe(4);
      for (let i = 0; i < b.rows; i++) {
        for (let j = 0; j < b.cols; j++) {
          const [r, c] = [b.r0 + 4 * i, b.c0 + 4 * j];
          expect(r % 4 === 0 && c % 4 === 0).toBe(true);
          expect(blockValue(b, r, c)).toBe(stored.values[r * 360 + c]);
          cells++;
        }
      }
    }
    expect(cells).toBe(Math.ceil(168 / 4) * Math.ceil(360 / 4));
  });
});
