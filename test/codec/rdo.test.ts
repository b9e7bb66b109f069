/**
 * The residual whose codes are chosen for rate as well as error (L2
 * bounds), on top of quantized factors: checked on a real gridded field,
 * vega-datasets 3.2.1 annual-precip.json (NOAA CFSv2 2016 annual
 * precipitation, 360 x 168), against the definition of the mean squared
 * error (common usage, from memory), with the payload decoded by the
 * library's decoder.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { payloadHead, residualPlace } from '../../src/codec/payload.js';
import { prepareTile } from '../../src/codec/prepare.js';
import { decodeTile } from '../../src/codec/tile-decode.js';
import { lowRankPayload, pointwiseFactors } from '../../src/codec/tile-encode.js';
import { decodeInts } from '../../src/codec/code-decode.js';
import { rankZeroForMse, residualForMse, residualForMseCoded } from '../../src/codec/rdo.js';

function precipTile(m: number, n: number): Float32Array {
  const path = fileURLToPath(new URL('../../node_modules/vega-datasets/data/annual-precip.json', import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: (number | null)[] };
  // A block of the tropics and mid-latitudes without missing cells: rows 40.., columns 100..
  const out = new Float32Array(m * n);
  for (let i = 0; i < m; i++) for (let j = 0; j < n; j++) out[i * n + j] = g.values[(40 + i) * g.width + 100 + j] ?? Number.NaN;
  return out;
}

function mseOf(a: ArrayLike<number>, b: ArrayLike<number>): number {
  let s = 0;
  for (let c = 0; c < a.length; c++) s += (a[c] - b[c]) ** 2;
  return s / a.length;
}

/** The 64 x 96 block prepared, with the RMSE limit of PSNR 60 dB over its range and the allotment the L2 plan gives a residual (0.97 tol^2). */
function precipCase() {
  const [m, n] = [64, 96];
  const values = precipTile(m, n);
  const t = prepareTile(values, m, n, 'f32', null);
  let lo = Infinity;
  let hi = -Infinity;
  for (const v of values) [lo, hi] = [Math.min(lo, v), Math.max(hi, v)];
  // PSNR 60 dB over the block's range: RMSE limit range / 10^3 (PSNR = 20 log10(range / RMSE), common usage).
  const tol = (hi - lo) / 1000;
  return { m, n, values, t, tol, mse: 0.97 * tol * tol };
}

describe('residualForMse', () => {
  it('hands over the grid its residual stream codes: the grid the library\'s decoder reads back from the payload', () => {
    const { m, n, t, tol, mse } = precipCase();
    for (const rank of [0, 2]) {
      const f = rank > 0 ? pointwiseFactors(t, rank, Math.sqrt(3) * tol) : null;
      const coded = residualForMseCoded(t, f, mse);
      expect(coded).not.toBeNull();
      expect(Array.from(coded!.payload)).toEqual(Array.from(residualForMse(t, f, mse)!));
      const place = residualPlace(coded!.payload);
      expect(place).not.toBeNull();
      const back = new Int32Array(m * n);
      decodeInts(coded!.payload.subarray(place!.streamAt, place!.streamEnd), m, n, null, back);
      expect(coded!.codes).not.toBeNull();
      expect(Array.from(coded!.codes!)).toEqual(Array.from(back));
    }
    // A loose allotment: the low-rank part alone meets it, and there is no residual (nor grid).
    const loose = residualForMseCoded(t, null, 1e6 * mse);
    expect(residualPlace(loose!.payload)).toBeNull();
    expect(loose!.codes).toBeNull();
  });

  it('keeps the factors it is given and meets the squared-error allotment on the decoded values', () => {
    const { m, n, values, t, tol, mse } = precipCase();
    expect(values.every(Number.isFinite)).toBe(true);
    for (const rank of [0, 2, 5]) {
      const f = rank > 0 ? pointwiseFactors(t, rank, Math.sqrt(3) * tol) : null;
      if (rank > 0) expect(f).not.toBeNull();
      const payload = rank > 0 ? residualForMse(t, f, mse) : rankZeroForMse(t, mse);
      expect(payload).not.toBeNull();
      expect(payloadHead(payload!).rank).toBe(rank);
      const back = decodeTile(payload!, { m, n, dtype: 'f32', fill: null, where: 'test' });
      expect(mseOf(back, values), `rank ${rank}`).toBeLessThanOrEqual(mse);
    }
  });

  it('gives up when plain rounding already points to a payload no smaller than the one the caller has', () => {
    const { t, mse } = precipCase();
    const whole = rankZeroForMse(t, mse);
    expect(whole).not.toBeNull();
    // A one-byte payload is beyond any residual of this tile: no search.
    expect(rankZeroForMse(t, mse, 1)).toBeNull();
    // Far above what the search gives: the same payload as with no limit.
    expect(Buffer.from(rankZeroForMse(t, mse, 100 * whole!.length)!).equals(Buffer.from(whole!))).toBe(true);
  });

  it('takes the factors with no residual when they alone meet the allotment, and codes a residual when they do not', () => {
    const { m, n, values, t, tol } = precipCase();
    const f = pointwiseFactors(t, 5, Math.sqrt(3) * tol);
    expect(f).not.toBeNull();
    const alone = lowRankPayload(t, f, null);
    // The mean squared error of the decoded factors alone (definition of the MSE, common usage).
    const own = mseOf(decodeTile(alone, { m, n, dtype: 'f32', fill: null, where: 'test' }), values);
    expect(own).toBeGreaterThan(0);
    // An allotment well above it (the search keeps within 98% of it): the factors alone, byte for byte.
    const loose = residualForMse(t, f, (1.5 * own) / 0.98);
    expect(loose).not.toBeNull();
    expect(residualPlace(loose!)).toBeNull();
    expect(Buffer.from(loose!).equals(Buffer.from(alone))).toBe(true);
    // Well below it: a residual is needed, and the decoded error meets the allotment.
    const tight = residualForMse(t, f, 0.5 * own);
    expect(tight).not.toBeNull();
    expect(residualPlace(tight!)).not.toBeNull();
    expect(mseOf(decodeTile(tight!, { m, n, dtype: 'f32', fill: null, where: 'test' }), values)).toBeLessThanOrEqual(0.5 * own);
  });

  it('refuses what it cannot code: no valid cell, or an allotment that is not a positive finite number', () => {
    const t = prepareTile(precipTile(8, 8), 8, 8, 'f32', null);
    expect(residualForMse(t, null, 0)).toBeNull();
    expect(residualForMse(t, null, Number.NaN)).toBeNull();
    expect(residualForMse(t, null, Infinity)).toBeNull();
    const empty = prepareTile(new Float32Array(16).fill(Number.NaN), 4, 4, 'f32', null);
    expect(residualForMse(empty, null, 1)).toBeNull();
  });
});
