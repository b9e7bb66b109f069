/**
 * The grids pictures are drawn from, on the Maunga Whau volcano grid of
 * vega-datasets: block means equal the means of the decoded cells, error
 * blocks hold the largest |decoded - original| / E of their cells (at most 1
 * under an abs bound: the bound's definition), and rank cells name their
 * tile's rank from the index.
 */
import { describe, expect, it } from 'vitest';
import { open, pack } from '../../src/index.js';
import { blockFor, rankGrid, readGrids, slicePlane } from '../../src/picture/sample.js';
import { volcano } from '../cli/helpers.js';

const vol = volcano();
const [ROWS, COLS] = vol.shape;

describe('picture grids', () => {
  it('block means and block maxima of the error, read band by band', async () => {
    const archive = await open(pack(vol.values, vol.shape, { bound: 'abs:2', tile: 16 }));
    const whole = (await archive.read()).values;
    const w = { slice: 0, rows: [3, 58] as [number, number], cols: [5, 80] as [number, number] };
    const block = 4;
    const h = archive.field().header;
    const { values, errors } = await readGrids(slicePlane(archive, h, 0), h, w, block, vol.values, 2);
    expect([values.rows, values.cols]).toEqual([Math.ceil(55 / 4), Math.ceil(75 / 4)]);
    for (const [gi, gj] of [[0, 0], [5, 7], [13, 18]]) {
      let sum = 0;
      let n = 0;
      let worst = 0;
      for (let r = w.rows[0] + gi * block; r < Math.min(w.rows[1], w.rows[0] + (gi + 1) * block); r++) {
        for (let c = w.cols[0] + gj * block; c < Math.min(w.cols[1], w.cols[0] + (gj + 1) * block); c++) {
          sum += whole[r * COLS + c];
          n++;
          worst = Math.max(worst, Math.abs(whole[r * COLS + c] - vol.values[r * COLS + c]) / 2);
        }
      }
      expect(values.cells[gi * values.cols + gj]).toBeCloseTo(sum / n, 10);
      expect(errors!.cells[gi * values.cols + gj]).toBe(worst);
    }
    // abs:E means every |decoded - original| <= E, so every error cell is at most 1.
    expect(Math.max(...errors!.cells)).toBeLessThanOrEqual(1);
    expect(values.missing).toBe(0);
  });

  it('missing cells (the fill value) are left out of block means; an all-missing block is NaN', async () => {
    const v = Float64Array.from(vol.values);
    for (let r = 0; r < 8; r++) for (let c = 0; c < 8; c++) v[r * COLS + c] = -999;
    v[9 * COLS + 9] = -999;
    const archive = await open(pack(v, vol.shape, { bound: 'abs:0.5', tile: 32, fill: -999 }));
    const whole = (await archive.read()).values;
    const h = archive.field().header;
    const { values } = await readGrids(slicePlane(archive, h, 0), h, { slice: 0, rows: [0, ROWS], cols: [0, COLS] }, 8);
    expect(values.cells[0]).toBeNaN();
    expect(values.missing).toBe(65);
    let sum = 0;
    for (let r = 8; r < 16; r++) for (let c = 8; c < 16; c++) if (!(r === 9 && c === 9)) sum += whole[r * COLS + c];
    expect(values.cells[values.cols + 1]).toBeCloseTo(sum / 63, 10);
  });

  it('rank cells name the rank of the tile they lie in; blockFor keeps the longer side within the limit', async () => {
    const archive = await open(pack(vol.values, vol.shape, { bound: 'psnr:40', tile: 16 }));
    const ix = await archive.fieldIndex();
    const w = { slice: 0, rows: [0, ROWS] as [number, number], cols: [0, COLS] as [number, number] };
    const g = rankGrid(slicePlane(archive, archive.field().header, 0), ix, w, 1);
    expect([g.rows, g.cols]).toEqual([ROWS, COLS]);
    const gc = Math.ceil(COLS / 16);
    for (const [r, c] of [[0, 0], [20, 40], [60, 86]]) {
      const t = Math.floor(r / 16) * gc + Math.floor(c / 16);
      expect(g.cells[r * COLS + c]).toBe(ix.method[t] === 0 ? -1 : ix.rank[t]);
    }
    expect(blockFor(w, 40)).toBe(3); // ceil(87 / 40)
    expect(blockFor(w, 100)).toBe(1);
  });
});
