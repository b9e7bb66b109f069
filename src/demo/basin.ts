/**
 * The demo scenario: a simulated sea-surface temperature (SST) field over
 * the Corvane Basin, an invented sea. Nothing here is measured; the field is
 * built from smooth pieces a real SST map also has, so that compression
 * figures on it mean something:
 *
 * - a western coast with an irregular shoreline and a northern shore, and
 *   two islands, all land, stored as a fill value (default -999) or as NaN;
 * - a warm-south / cool-north gradient, a weak east-west tilt and a basin-
 *   scale wave;
 * - cold upwelling water along the western coast;
 * - a few warm eddies (Gaussian domes of 0.8 to 2.2 degC);
 * - a little small-scale structure and sensor-like noise (about 0.01 degC).
 *
 * The field is deterministic: the same options give the same bits.
 * Row 0 is the northern edge, column 0 the western edge.
 */
import { InputCode, InputError } from '../errors.js';

/** Options of {@link corvaneBasin}. */
export interface BasinOptions {
  /** Grid rows (north to south); default 512. */
  rows?: number;
  /** Grid columns (west to east); default 768. */
  cols?: number;
  /** Seed of the eddies and the noise; default 7301. */
  seed?: number;
  /** How land is stored: a fill value (default) or NaN. */
  land?: 'fill' | 'nan';
  /** The fill value used when `land` is 'fill'; default -999. */
  fill?: number;
}

/** A generated field. */
export interface Basin {
  /** Row-major float32 values, degC over water, the land marker over land. */
  values: Float32Array;
  shape: [number, number];
  /** The fill value marking land, or null when land is NaN. */
  fill: number | null;
  /** Number of land cells. */
  landCells: number;
  /** Minimum and maximum SST over water. */
  range: [number, number];
  /** Attributes to store with the field (CF-style names). */
  attrs: Record<string, string>;
}

/** Defaults of {@link corvaneBasin}. */
export const BASIN_DEFAULTS = { rows: 512, cols: 768, seed: 7301, fill: -999 } as const;

/** xorshift32 (Marsaglia, "Xorshift RNGs", 2003), returning floats in [0, 1). */
function xorshift32(seed: number): () => number {
  // Mix the seed so that small seeds do not start in a low-entropy state; 0 is not a valid state.
  let s = (Math.imul(seed ^ 0x9e3779b9, 0x85ebca6b) ^ 0x2c1b3c6d) >>> 0 || 0x1234567;
  return () => {
    s ^= s << 13;
    s >>>= 0;
    s ^= s >>> 17;
    s ^= s << 5;
    s >>>= 0;
    return s / 4294967296;
  };
}

interface Eddy {
  x: number;
  y: number;
  amp: number;
  sx: number;
  sy: number;
}

interface Wave {
  kx: number;
  ky: number;
  phase: number;
  amp: number;
}

/** Distance east of the western shoreline at northing y (0 south .. 1 north), in x units. */
function westCoast(y: number): number {
  return 0.1 + 0.05 * Math.sin(2 * Math.PI * 1.1 * y + 0.4) + 0.02 * Math.sin(2 * Math.PI * 3.3 * y + 1.7);
}

/** True on land: west of the coast, north of the northern shore, or on one of the two islands. */
function isLand(x: number, y: number): boolean {
  if (x < westCoast(y)) return true;
  if (y > 0.93 + 0.03 * Math.sin(2 * Math.PI * 1.7 * x + 0.9)) return true;
  const islands = [
    { x: 0.64, y: 0.38, r: 0.055, p: 0.7 },
    { x: 1.08, y: 0.71, r: 0.035, p: 2.1 },
  ];
  for (const isl of islands) {
    const dx = x - isl.x;
    const dy = y - isl.y;
    const theta = Math.atan2(dy, dx);
    const edge = isl.r * (1 + 0.25 * Math.sin(3 * theta + isl.p) + 0.1 * Math.sin(5 * theta + 2 * isl.p));
    if (Math.hypot(dx, dy) < edge) return true;
  }
  return false;
}

/** Generate the Corvane Basin SST field. */
export function corvaneBasin(options: BasinOptions = {}): Basin {
  const rows = options.rows ?? BASIN_DEFAULTS.rows;
  const cols = options.cols ?? BASIN_DEFAULTS.cols;
  const seed = options.seed ?? BASIN_DEFAULTS.seed;
  const fill = options.land === 'nan' ? null : (options.fill ?? BASIN_DEFAULTS.fill);
  if (!Number.isInteger(rows) || !Number.isInteger(cols) || rows < 2 || cols < 2) {
    throw new InputError(InputCode.Shape, `the basin needs at least 2x2 cells, got ${rows}x${cols}`);
  }
  const rand = xorshift32(seed);
  const aspect = cols / rows;
  const eddies: Eddy[] = [];
  while (eddies.length < 6) {
    const e = { x: 0.15 + rand() * (aspect - 0.25), y: 0.08 + rand() * 0.8, amp: 0.8 + rand() * 1.4, sx: 0.025 + rand() * 0.045, sy: 0 };
    e.sy = e.sx * (0.7 + rand() * 0.6);
    if (!isLand(e.x, e.y)) eddies.push(e);
  }
  // Small-scale structure: short waves of a few hundredths of a degree.
  const waves: Wave[] = Array.from({ length: 8 }, () => ({
    kx: 2 * Math.PI * (8 + rand() * 24),
    ky: 2 * Math.PI * (8 + rand() * 24) * (rand() < 0.5 ? -1 : 1),
    phase: 2 * Math.PI * rand(),
    amp: 0.01 + rand() * 0.03,
  }));
  const values = new Float32Array(rows * cols);
  const marker = fill === null ? NaN : fill;
  let landCells = 0;
  let lo = Infinity;
  let hi = -Infinity;
  for (let i = 0; i < rows; i++) {
    const y = 1 - i / (rows - 1);
    const coast = westCoast(y);
    for (let j = 0; j < cols; j++) {
      const x = (j / (cols - 1)) * aspect;
      const c = i * cols + j;
      if (isLand(x, y)) {
        values[c] = marker;
        landCells++;
        continue;
      }
      let t = 27.5 - 13 * y + 1.2 * (x / aspect) + 0.8 * Math.sin(2 * Math.PI * (0.7 * x + 0.4 * y) + 0.3);
      t -= 3.5 * Math.exp(-(x - coast) / 0.04);
      for (const e of eddies) {
        const dx = (x - e.x) / e.sx;
        const dy = (y - e.y) / e.sy;
        t += e.amp * Math.exp(-0.5 * (dx * dx + dy * dy));
      }
      for (const w of waves) t += w.amp * Math.sin(w.kx * x + w.ky * y + w.phase);
      t += (rand() - 0.5) * 0.03;
      const v = Math.fround(t);
      values[c] = v;
      if (v < lo) lo = v;
      if (v > hi) hi = v;
    }
  }
  return {
    values,
    shape: [rows, cols],
    fill,
    landCells,
    range: [lo, hi],
    attrs: {
      long_name: 'sea surface temperature (simulated)',
      units: 'degC',
      source: `rankfield demo: invented Corvane Basin scenario, seed ${seed}`,
    },
  };
}
