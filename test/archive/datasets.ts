/**
 * The open grids the archive tests use, as shipped by the vega-datasets npm
 * package (read with fs; the package has no JS export for them):
 * data/volcano.json (87 wide x 61 high, heights of Maunga Whau in metres) and
 * data/annual-precip.json (360 wide x 168 high), both row-major `values`.
 */
import { existsSync, readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

/**
 * The repository's root: the nearest directory above this module that holds
 * node_modules/vega-datasets (two levels up when the tests run from test/;
 * further when the long fuzz run runs from its build in bench/out/fuzz).
 */
export const ROOT = ((): string => {
  for (let dir = dirname(fileURLToPath(import.meta.url)); ; ) {
    if (existsSync(join(dir, 'node_modules', 'vega-datasets'))) return dir;
    const up = dirname(dir);
    if (up === dir) throw new Error('node_modules/vega-datasets not found above test/archive (run npm ci)');
    dir = up;
  }
})();

export interface Grid {
  values: Float64Array;
  /** [rows, cols]. */
  shape: [number, number];
}

function grid(file: string, width: number, height: number): Grid {
  const raw = JSON.parse(readFileSync(join(ROOT, 'node_modules', 'vega-datasets', 'data', file), 'utf8')) as { width: number; height: number; values: (number | null)[] };
  // Source: vega-datasets data/volcano.json is 87 x 61, data/annual-precip.json 360 x 168.
  if (raw.width !== width || raw.height !== height || raw.values.length !== width * height) throw new Error(`${file}: unexpected grid ${raw.width}x${raw.height}`);
  return { values: Float64Array.from(raw.values, (v) => (v === null ? NaN : v)), shape: [height, width] };
}

/** data/volcano.json: 61 rows x 87 columns. */
export const volcano = (): Grid => grid('volcano.json', 87, 61);
/** data/annual-precip.json: 168 rows x 360 columns. */
export const precip = (): Grid => grid('annual-precip.json', 360, 168);

/**
 * A field of any size made from a grid by mirror tiling (reflecting the
 * grid at its edges, so the field stays continuous): rows [r0, r0 + count)
 * as float32.
 */
export function mirrored(g: Grid, cols: number, r0: number, count: number): Float32Array {
  const [h, w] = g.shape;
  const reflect = (i: number, n: number) => {
    const p = i % (2 * n);
    return p < n ? p : 2 * n - 1 - p;
  };
  const out = new Float32Array(count * cols);
  for (let i = 0; i < count; i++) {
    const src = reflect(r0 + i, h) * w;
    for (let j = 0; j < cols; j++) out[i * cols + j] = g.values[src + reflect(j, w)];
  }
  return out;
}
