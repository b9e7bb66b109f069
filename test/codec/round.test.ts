/**
 * roundHalfUp, the encoder's fast stand-in for Math.round when it settles
 * residual codes: the same value as Math.round (ECMA-262, Math.round: the
 * integer closest to x, a tie going to +Infinity; from memory) for every
 * double, but +0 where Math.round gives -0. The reference is the engine's
 * own Math.round.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { roundHalfUp } from '../../src/codec/tile-encode.js';

/** Math.round with -0 taken as +0 (the one difference roundHalfUp is allowed). */
const reference = (x: number) => Math.round(x) + 0;

describe('roundHalfUp is Math.round (up to the sign of zero)', () => {
  it('at the cases where floor(x + 0.5) goes wrong: just below a half, odd integers at 2^52 and above', () => {
    const cases = [
      0.49999999999999994, // x + 0.5 rounds up to 1 in binary64
      -0.49999999999999994,
      0.5,
      -0.5,
      1.5,
      -1.5,
      2.5,
      -2.5,
      3.4999999999999996,
      -3.5000000000000004,
      2 ** 52 + 1, // x + 0.5 is a tie that rounds to the even x + 1
      -(2 ** 52 + 1),
      2 ** 52,
      2 ** 53 + 2,
      -(2 ** 53),
      2 ** 51 + 0.5,
      -(2 ** 51 + 0.5),
      4503599627370495.5,
      -4503599627370495.5,
      Number.MAX_VALUE,
      -Number.MAX_VALUE,
      Number.MIN_VALUE,
      -Number.MIN_VALUE,
      0,
      -0,
      Infinity,
      -Infinity,
    ];
    for (const x of cases) expect(roundHalfUp(x), String(x)).toBe(reference(x));
    expect(roundHalfUp(Number.NaN)).toBeNaN();
  });

  it('on any double (fast-check) and on values near halves at every scale', () => {
    fc.assert(
      fc.property(fc.double({ noNaN: true }), (x) => {
        expect(roundHalfUp(x)).toBe(reference(x));
      }),
      { numRuns: 20000 },
    );
    for (let e = -2; e <= 54; e++) {
      for (const k of [1, 3, 5, 7, 1001]) {
        const half = (k / 2) * 2 ** Math.max(0, e - 3);
        for (const x of [half, -half]) {
          let below = x;
          let above = x;
          for (let s = 0; s < 3; s++) {
            below = below - Math.abs(below) * Number.EPSILON;
            above = above + Math.abs(above) * Number.EPSILON;
            for (const y of [below, above]) expect(roundHalfUp(y), String(y)).toBe(reference(y));
          }
          expect(roundHalfUp(x), String(x)).toBe(reference(x));
        }
      }
    }
  });
});
