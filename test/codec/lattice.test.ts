/**
 * integerLattice (src/codec/prepare.ts): the greatest common divisor of the
 * differences of a tile's valid values when all are integers (Euclid's
 * algorithm; gcd(1, a) = 1 for every a, from memory), else 0; checked on
 * vega-datasets volcano.json (integer heights in metres) and
 * annual-precip.json (integer millimetres), and on grids whose answer is
 * known by construction, the checks past the point where the divisor
 * reaches 1 included.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { Cell } from '../../src/codec/mask.js';
import { integerLattice } from '../../src/codec/prepare.js';

/** A vega-datasets grid's values (npm package vega-datasets 3.2.1, node_modules/vega-datasets/data/). */
function vega(name: string): Float64Array {
  const path = fileURLToPath(new URL(`../../node_modules/vega-datasets/data/${name}`, import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { values: (number | null)[] };
  return Float64Array.from(g.values, (v) => v ?? Number.NaN);
}

const allValid = (length: number) => new Uint8Array(length).fill(Cell.Valid);

describe('integerLattice', () => {
  it('finds step 1 on the integer grids of vega-datasets volcano.json and annual-precip.json, from their first value', () => {
    for (const name of ['volcano.json', 'annual-precip.json']) {
      const v = vega(name);
      expect(v.every(Number.isInteger)).toBe(true);
      expect(integerLattice(v, allValid(v.length))).toEqual({ quantum: 1, origin: v[0] });
    }
  });

  it('finds the common step of values on a lattice, and ignores cells that are not valid', () => {
    // 7 + 15 k: gcd of the differences 15 (by construction).
    const v = Float64Array.from({ length: 40 }, (_v, c) => 7 + 15 * ((c * 13) % 11));
    expect(integerLattice(v, allValid(v.length))).toEqual({ quantum: 15, origin: 7 });
    const codes = allValid(v.length);
    v[5] = 8.5;
    codes[5] = Cell.Fill;
    expect(integerLattice(v, codes)).toEqual({ quantum: 15, origin: 7 });
  });

  it('still gives 0 for a value that is not an integer, or is beyond 2^40, after the step has reached 1', () => {
    const v = vega('volcano.json');
    const last = v.length - 1;
    for (const bad of [100.5, 2 ** 41, Number.NaN]) {
      const w = v.slice();
      w[last] = bad;
      expect(integerLattice(w, allValid(w.length))).toEqual({ quantum: 0, origin: 0 });
    }
  });
});
