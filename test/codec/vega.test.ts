/**
 * Round trips of two open gridded datasets shipped by the npm package
 * vega-datasets (3.2.1), read from node_modules/vega-datasets/data/:
 *
 * - volcano.json: elevation of Maunga Whau (Mt Eden), Auckland, on a 10 m
 *   grid, 87 wide x 61 high, row-major `values` (integers 94..195 m);
 *   digitized by Ross Ihaka, from R's `datasets` package (datapackage.json).
 * - annual-precip.json: global annual precipitation of 2016 at 1 degree,
 *   360 wide x 168 high, row-major `values` (0..20195), from NOAA's Climate
 *   Forecast System Version 2, public domain (datapackage.json).
 *
 * Every bound is checked against its definition on the decoded values, and
 * the index's figures against what this test measures.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { pack } from '../../src/pack.js';
import type { Dtype } from '../../src/types.js';
import { asDtype, close, expectIndexMatches, measure } from './measure.js';

interface Grid {
  width: number;
  height: number;
  values: number[];
}

function load(name: string): Grid {
  const path = fileURLToPath(new URL(`../../node_modules/vega-datasets/data/${name}`, import.meta.url));
  return JSON.parse(readFileSync(path, 'utf8')) as Grid;
}

const GRIDS = [
  // abs and rmse bounds sized to each dataset's units (m of elevation, mm of precipitation).
  { name: 'volcano', file: 'volcano.json', width: 87, height: 61, abs: 0.5, rmse: 0.5 },
  { name: 'annual-precip', file: 'annual-precip.json', width: 360, height: 168, abs: 10, rmse: 5 },
];

describe.each(GRIDS)('vega-datasets $name', (g) => {
  const grid = load(g.file);

  it('has the documented shape', () => {
    // Shape as stated in the package's data files (width, height, row-major values).
    expect(grid.width).toBe(g.width);
    expect(grid.height).toBe(g.height);
    expect(grid.values.length).toBe(g.width * g.height);
    expect(grid.values.every((v) => Number.isFinite(v))).toBe(true);
  });

  const shape = [g.height, g.width];
  const range = (() => {
    let lo = Infinity;
    let hi = -Infinity;
    for (const v of grid.values) {
      lo = Math.min(lo, v);
      hi = Math.max(hi, v);
    }
    return hi - lo;
  })();

  const bounds = ['rel:1e-2', 'rel:1e-3', 'rel:1e-4', `abs:${g.abs}`, `rmse:${g.rmse}`, 'psnr:40', 'psnr:60'];

  for (const dtype of ['f32', 'f64'] as Dtype[]) {
    for (const bound of bounds) {
      it(`${dtype} ${bound}`, async () => {
        const values = asDtype(grid.values, dtype);
        // Fixed 64 x 64 tiles except at rel:1e-3, which runs the default tile trial.
        const bytes = pack(values, shape, { bound, fill: null, name: g.name, ...(bound === 'rel:1e-3' ? {} : { tile: 64 }) });
        const archive = await open(bytes);
        const h = archive.header.fields[0];
        const [mode, text] = bound.split(':');
        const v = Number(text);
        // Definitions: rel E = R * range; psnr RMSE <= range / 10^(D/20).
        const tol = mode === 'rel' ? v * range : mode === 'psnr' ? range / 10 ** (v / 20) : v;
        expect(close(h.bound.tolerance, tol)).toBe(true);
        const got = (await archive.read(g.name)).values;
        const m = measure(values, got, shape, h.tile, dtype, null);
        if (mode === 'rel' || mode === 'abs') {
          let worst = 0;
          for (let c = 0; c < values.length; c++) worst = Math.max(worst, Math.abs(values[c] - got[c]));
          expect(worst).toBeLessThanOrEqual(tol);
        } else {
          expect(m.summary.rmse).toBeLessThanOrEqual(tol);
        }
        await expectIndexMatches(archive, m, g.name);
        const report = await archive.check({ [g.name]: values });
        expect(report.ok).toBe(true);
        const ratio = values.byteLength / bytes.length;
        if (bound === 'rel:1e-2') expect(ratio).toBeGreaterThan(1);
        // Slow for a reason: the archive is packed (with the tile trial at rel:1e-3), decoded,
        // measured and checked; up to 6 s on a busy 2-core machine.
      }, 30_000);
    }

    it(`${dtype}: a looser bound gives a smaller archive`, () => {
      // Common practice, no source: loosening the bound by 100x should not enlarge the archive.
      const values = asDtype(grid.values, dtype);
      const loose = pack(values, shape, { bound: 'rel:1e-2', tile: 64 }).length;
      const tight = pack(values, shape, { bound: 'rel:1e-4', tile: 64 }).length;
      expect(loose).toBeLessThan(tight);
    }, 30_000); // two packs of the whole grid
  }
});
