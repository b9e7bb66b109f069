/**
 * Choosing the layout of an N-D variable by bytes (src/layout.ts).
 * Data: vega-datasets data/annual-precip.json (168 x 360).
 */
import { describe, expect, it } from 'vitest';
import { chooseLayout, InputError } from '../../src/index.js';
import { precip } from './datasets.js';

describe('chooseLayout', () => {
  it('picks the time x space matrix for a stack of scaled copies of one field (rank 1 as a matrix)', () => {
    // The outer product of a seasonal cycle and one field is a rank-1 matrix (time x
    // grid point); as slices each snapshot is the whole field again (from memory:
    // rank(a b^T) = 1 for non-zero vectors a, b).
    const g = precip();
    const T = 12;
    const cells = g.values.length;
    const v = new Float32Array(T * cells);
    for (let t = 0; t < T; t++) {
      const season = 1 + 0.5 * Math.sin((2 * Math.PI * t) / T);
      for (let c = 0; c < cells; c++) v[t * cells + c] = g.values[c] * season;
    }
    expect(chooseLayout(v, [T, 168, 360], { mode: 'rel', value: 1e-3 }, null)).toBe('matrix:1');
  }, 60_000);

  it('refuses a variable of fewer than 3 axes with an InputError', () => {
    expect(() => chooseLayout(new Float32Array(6), [2, 3], { mode: 'abs', value: 1 }, null)).toThrow(InputError);
  });
});
