/**
 * The field layer's term (src/codec/layer.ts) against the worked examples
 * of spec/FORMAT.md 6.2.2: the binary64 sum from +0 in increasing rank
 * order, one rounding per operation.
 */
import { describe, expect, it } from 'vitest';
import { addLayer, layerTerm, tileLayerTerm } from '../../src/codec/layer.js';

describe('layer term (spec/FORMAT.md 6.2.2, worked examples)', () => {
  it('sums in increasing rank order: (10^16, 1, -10^16) . (1, 1, 1) is 0, not 1', () => {
    const out = layerTerm(3, Float64Array.of(1e16, 1, -1e16), 0, Float64Array.of(1, 1, 1), 0, 0, 0, 1, 1);
    expect(out[0]).toBe(0);
  });

  it('starts from +0: a product of -0 leaves +0', () => {
    const out = layerTerm(1, Float64Array.of(-1), 0, Float64Array.of(0), 0, 0, 0, 1, 1);
    expect(Object.is(out[0], 0)).toBe(true);
  });

  it('takes factor rows counted from the first row held, for a block inside the field', () => {
    // Left rows 2..4 held (k = 2), right rows 1..3 held: the block at rows 3..4, columns 2..3.
    const k = 2;
    const left = Float64Array.of(1, 2, 3, 4, 5, 6); // rows 2, 3, 4
    const right = Float64Array.of(0.5, 1, 0.25, 2, 4, 8); // rows 1, 2, 3
    const out = layerTerm(k, left, 2, right, 1, 3, 2, 2, 2);
    // Row 3 = (3, 4), row 4 = (5, 6); column 2 = (0.25, 2), column 3 = (4, 8): each cell the dot product, written out.
    expect(Array.from(out)).toEqual([3 * 0.25 + 4 * 2, 3 * 4 + 4 * 8, 5 * 0.25 + 6 * 2, 5 * 4 + 6 * 8]);
  });

  it('places a tile of a field of slices at stacked row s * rows + i0', () => {
    const layer = { rank: 1, left: Float64Array.from({ length: 8 }, (_, i) => i), right: Float64Array.of(1, 10, 100) };
    // 2 slices of 4 x 3, tiles 2 x 2: tile 5 is slice 1, tile row 0, tile column 1 (rows 4..5, column 2).
    const out = tileLayerTerm(layer, { shape: [4, 3], tile: [2, 2], slices: 2 }, 5, 2, 1);
    expect(Array.from(out)).toEqual([400, 500]);
    const acc = Float64Array.of(1, 2);
    addLayer(acc, out, 2);
    expect(Array.from(acc)).toEqual([401, 502]);
  });
});
