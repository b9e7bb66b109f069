/**
 * boxOf (src/cli/window.ts): a run of C-order flat indexes over the leading
 * axes of a variable is written to .nc only when it is one box (a range of
 * each axis). Checked for every run of three small shapes against brute
 * force: the run's cells, listed one by one, must be the box's exactly
 * (C order: the last axis varies fastest, as NumPy's and netCDF's arrays; from memory).
 */
import { describe, expect, it } from 'vitest';
import { boxOf } from '../../src/cli/window.js';

/** The multi-index of flat index f in C order. */
function index(shape: number[], f: number): number[] {
  const out = shape.map(() => 0);
  for (let i = shape.length - 1; i >= 0; i--) {
    out[i] = f % shape[i];
    f = Math.floor(f / shape[i]);
  }
  return out;
}

describe('boxOf', () => {
  it.each([[[2, 3, 4]], [[3, 1, 2]], [[2, 2, 2, 3]]])('every run of %j: a box exactly when its cells are one', (shape) => {
    const total = shape.reduce((a, b) => a * b, 1);
    let boxes = 0;
    for (let a = 0; a < total; a++) {
      for (let b = a + 1; b <= total; b++) {
        const cells = new Set<string>();
        for (let f = a; f < b; f++) cells.add(index(shape, f).join(','));
        // Brute force: the bounding box of the cells, and whether they fill it.
        const lo = shape.map((_, i) => Math.min(...[...cells].map((c) => Number(c.split(',')[i]))));
        const hi = shape.map((_, i) => Math.max(...[...cells].map((c) => Number(c.split(',')[i]))) + 1);
        const size = lo.reduce((x, l, i) => x * (hi[i] - l), 1);
        const want = size === cells.size ? lo.map((l, i) => [l, hi[i]]) : null;
        expect(boxOf(shape, [a, b]), `${a}:${b}`).toEqual(want);
        if (want) boxes++;
      }
    }
    expect(boxes).toBeGreaterThan(total); // every single cell is a box, and some longer runs
  });

  it('one leading axis: the run itself; a run outside the axes: null', () => {
    expect(boxOf([5], [1, 3])).toEqual([[1, 3]]);
    expect(boxOf([2, 3], [4, 9])).toBeNull();
  });
});
