/**
 * The page grid of the paged index (spec/FORMAT.md, section 7.1): every tile
 * of a field is in exactly one page, at the position pageOf gives, pages never
 * cross slices, and the page counts follow ceil(grid / page). Checked against
 * a direct enumeration of the definition (tile rows, then tile columns, per
 * block), over grids with partial edge tiles and pages, and slices.
 */
import { describe, expect, it } from 'vitest';
import { pageCount, pageOf, pageTileCount, pageTiles } from '../../src/format/schema.js';
import { tileCount, tileGrid, tileOrigin } from '../../src/geometry.js';

describe('page grid', () => {
  const cases = [
    { shape: [12, 14], tile: [3, 4], page: [2, 3], slices: 1 },
    { shape: [168, 360], tile: [32, 48], page: [8, 8], slices: 1 },
    { shape: [42, 360], tile: [32, 32], page: [1, 5], slices: 4 },
    { shape: [5, 5], tile: [64, 64], page: [8, 8], slices: 3 },
    { shape: [100, 7], tile: [3, 1], page: [4, 2], slices: 2 },
  ];
  for (const c of cases) {
    it(`${c.slices} x ${c.shape.join('x')} in tiles of ${c.tile.join('x')}, pages of ${c.page.join('x')} tiles`, () => {
      const h = { shape: c.shape, tile: c.tile, slices: c.slices };
      const [gr, gc] = tileGrid(h);
      const P = pageCount(h, c.page);
      expect(P).toBe(c.slices * Math.ceil(gr / c.page[0]) * Math.ceil(gc / c.page[1]));
      const seen = new Array<number>(tileCount(h)).fill(0);
      for (let p = 0; p < P; p++) {
        const tiles = pageTiles(h, c.page, p);
        expect(tiles.length).toBe(pageTileCount(h, c.page, p));
        // The definition, enumerated directly: the block's tile rows top to bottom, each left to right.
        const s = tileOrigin(h, tiles[0]).s;
        const first = tiles[0] - s * gr * gc;
        const [ti0, tj0] = [Math.floor(first / gc), first % gc];
        const want: number[] = [];
        for (let ti = ti0; ti < Math.min(gr, ti0 + c.page[0]); ti++) for (let tj = tj0; tj < Math.min(gc, tj0 + c.page[1]); tj++) want.push(s * gr * gc + ti * gc + tj);
        expect(tiles).toEqual(want);
        expect(ti0 % c.page[0]).toBe(0);
        expect(tj0 % c.page[1]).toBe(0);
        tiles.forEach((t, k) => {
          seen[t]++;
          expect(tileOrigin(h, t).s, 'a page crosses a slice').toBe(s);
          expect(pageOf(h, c.page, t)).toEqual({ p, k });
        });
      }
      expect(seen.every((n) => n === 1)).toBe(true);
    });
  }
});
