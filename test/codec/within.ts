/**
 * The property shared by the coded streams' length limits
 * (encodeIntsWithin, encodeSymbolsWithin): with a limit around the
 * stream's own length, the result is the stream itself, or null only when
 * the stream is longer than the limit; and a limit of half a noisy grid's
 * stream stops it.
 */
import fc from 'fast-check';
import { expect } from 'vitest';
import { mulberry32 } from '../rng.js';

type Full = (v: Int32Array, m: number, n: number, codes: null) => Uint8Array;
type Within = (v: Int32Array, m: number, n: number, codes: null, atMost: number) => Uint8Array | null;

export function checkWithin(full: Full, within: Within, grid: (rand: () => number, cells: number) => Int32Array): void {
  fc.assert(
    fc.property(fc.integer({ min: 1, max: 40 }), fc.integer({ min: 1, max: 40 }), fc.integer({ min: 1, max: 1 << 20 }), fc.integer({ min: -40, max: 4 }), (m, n, seed, delta) => {
      const v = grid(mulberry32(seed), m * n);
      const whole = full(v, m, n, null);
      const limit = whole.length + delta;
      const cut = within(v, m, n, null, limit);
      if (cut === null) expect(whole.length).toBeGreaterThan(limit);
      else expect(Buffer.from(cut).equals(Buffer.from(whole))).toBe(true);
      if (delta >= 0) expect(cut).not.toBeNull();
    }),
    { numRuns: 300 },
  );
  // And it does stop: a 64 x 64 grid of noisy codes with half its stream's length as the limit.
  const rand = mulberry32(5);
  const v = Int32Array.from({ length: 64 * 64 }, () => Math.round((rand() - 0.5) * 200));
  expect(within(v, 64, 64, null, full(v, 64, 64, null).length / 2)).toBeNull();
}
