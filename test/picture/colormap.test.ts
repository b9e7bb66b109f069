/**
 * The colour maps against their published tables and their published
 * property: the tables equal those exported by the npm package
 * scale-color-perceptual (matplotlib's viridis and inferno), and lightness
 * rises along each map.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { MAP_SIZE, mapColour, mapEntry, type MapName } from '../../src/picture/colormap.js';
import { ROOT } from '../cli/helpers.js';

/** The published table, as shipped by scale-color-perceptual 1.1.2 (hex/NAME.json, 256 "#rrggbb" entries). */
function published(map: MapName): string[] {
  return JSON.parse(readFileSync(join(ROOT, 'node_modules', 'scale-color-perceptual', 'hex', `${map}.json`), 'utf8')) as string[];
}

/** CIELAB L* of an sRGB colour: sRGB decoding per IEC 61966-2-1, Y from the Rec. 709 primaries, L* per CIE 15 (from memory). */
function lightness([r, g, b]: [number, number, number]): number {
  const lin = (c: number) => {
    const s = c / 255;
    return s <= 0.04045 ? s / 12.92 : ((s + 0.055) / 1.055) ** 2.4;
  };
  const y = 0.2126 * lin(r) + 0.7152 * lin(g) + 0.0722 * lin(b);
  return y > (6 / 29) ** 3 ? 116 * Math.cbrt(y) - 16 : (29 / 3) ** 3 * y;
}

const hex = (c: [number, number, number]) => `#${c.map((x) => x.toString(16).padStart(2, '0')).join('')}`;

describe.each(['viridis', 'inferno'] as const)('%s', (map) => {
  it('equals the published table entry by entry', () => {
    const table = published(map);
    expect(table).toHaveLength(MAP_SIZE);
    for (let k = 0; k < MAP_SIZE; k++) expect(hex(mapEntry(map, k))).toBe(table[k]);
  });

  it('rises in lightness from end to end (van der Walt and Smith, SciPy 2015: the maps are designed so)', () => {
    const l = Array.from({ length: MAP_SIZE }, (_, k) => lightness(mapEntry(map, k)));
    // Designed monotone in CAM02-UCS lightness; rounding to 8-bit sRGB leaves steps of a few hundredths
    // of L* backwards between neighbours, so: never more than 0.1 back, and rising over every 8 entries.
    for (let k = 1; k < MAP_SIZE; k++) expect(l[k]).toBeGreaterThan(l[k - 1] - 0.1);
    for (let k = 8; k < MAP_SIZE; k++) expect(l[k]).toBeGreaterThan(l[k - 8]);
    // viridis runs from L* about 15 to about 92, inferno from about 0 to about 98 (from memory).
    expect(l[0]).toBeLessThan(20);
    expect(l[MAP_SIZE - 1]).toBeGreaterThan(85);
  });

  it('maps [0, 1] onto the nearest entry, clamping outside and sending NaN to the first', () => {
    expect(mapColour(map, 0)).toEqual(mapEntry(map, 0));
    expect(mapColour(map, 1)).toEqual(mapEntry(map, 255));
    expect(mapColour(map, 0.5)).toEqual(mapEntry(map, 128)); // 0.5 x 255 = 127.5, rounded half up
    expect(mapColour(map, -3)).toEqual(mapEntry(map, 0));
    expect(mapColour(map, 7)).toEqual(mapEntry(map, 255));
    expect(mapColour(map, Number.NaN)).toEqual(mapEntry(map, 0));
  });
});
