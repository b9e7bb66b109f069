/**
 * Heatmaps: each cell is drawn in the colour its value takes on the map,
 * missing cells grey, special codes in their own colour, and the PNG decodes
 * (fast-png's decoder, the reference here) to the raster drawn.
 */
import { decode } from 'fast-png';
import { describe, expect, it } from 'vitest';
import { mapColour, mapEntry } from '../../src/picture/colormap.js';
import { cellColour, heatmap, MISSING, tickLabel, ticks } from '../../src/picture/heatmap.js';

describe('ticks', () => {
  it('fall on 1, 2 or 5 times a power of ten within the range (common practice, no source)', () => {
    const unit = ticks(0, 1);
    expect(unit).toHaveLength(6);
    unit.forEach((v, k) => expect(v).toBeCloseTo(k * 0.2, 12));
    expect(ticks(11.82, 29.27)).toEqual([12, 14, 16, 18, 20, 22, 24, 26, 28]);
    expect(ticks(0, 23, true)).toEqual([0, 5, 10, 15, 20]);
    expect(ticks(3, 3)).toEqual([3]);
    expect([tickLabel(0), tickLabel(0.25), tickLabel(123400), tickLabel(2e-5)]).toEqual(['0', '0.25', '1.2e5', '2e-5']);
  });
});

describe('heatmap', () => {
  // A 3 x 4 grid: a ramp, one missing cell, one special code.
  const cells = Float64Array.from([0, 1, 2, 3, 4, 5, Number.NaN, 7, 8, 9, 10, -1]);
  const spec = {
    cells,
    rows: 3,
    cols: 4,
    scale: 10,
    map: 'viridis' as const,
    lo: 0,
    hi: 10,
    barLabel: 'K',
    title: ['a title'],
    notes: ['a note'],
    specials: [{ code: -1, colour: [255, 255, 255] as [number, number, number], label: 'exact' }],
    missing: true,
  };

  it('draws every cell in its colour, missing cells grey and special codes in their own colour', () => {
    const r = heatmap(spec);
    const png = decode(r.png());
    expect([png.width, png.height, png.channels]).toEqual([r.width, r.height, 3]);
    expect(Buffer.from(png.data as Uint8Array).equals(Buffer.from(r.data))).toBe(true);
    // Find the picture's top-left corner: the first pixel of the first cell's colour.
    const first = mapEntry('viridis', 0);
    let at = -1;
    for (let p = 0; p < r.width * r.height && at < 0; p++) if (r.get(p % r.width, Math.floor(p / r.width)).every((c, k) => c === first[k])) at = p;
    const x0 = at % r.width;
    const y0 = Math.floor(at / r.width);
    for (let i = 0; i < 3; i++) {
      for (let j = 0; j < 4; j++) {
        const v = cells[i * 4 + j];
        const want = Number.isNaN(v) ? MISSING : v === -1 ? [255, 255, 255] : mapColour('viridis', v / 10);
        // The centre of each 10 x 10 block.
        expect(r.get(x0 + j * 10 + 5, y0 + i * 10 + 5)).toEqual(want);
      }
    }
  });

  it('discrete maps give each whole number one colour, from the first entry to the last', () => {
    const d = { map: 'viridis' as const, lo: 0, hi: 4, discrete: true };
    expect(cellColour(d, 0)).toEqual(mapEntry('viridis', 0));
    expect(cellColour(d, 4)).toEqual(mapEntry('viridis', 255));
    expect(cellColour(d, 2)).toEqual(mapColour('viridis', 0.5));
    expect(cellColour(d, 2.4)).toEqual(cellColour(d, 2));
  });
});
