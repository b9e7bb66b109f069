/**
 * Cyclic one-sided Jacobi (Hestenes) kernel on a column-major matrix.
 */

import { sumSquares } from './householder.js';

/** Rotate a column pair while |p . q| > JACOBI_TOL * |p| * |q|. */
export const JACOBI_TOL = 1e-15;
/** Sweep cap; well-conditioned 64 x 64 inputs need under 10 sweeps. */
export const MAX_SWEEPS = 60;

/**
 * Orthogonalizes the columns of the column-major rows x cols matrix x by
 * plane rotations from the right, and applies the same rotations to the
 * column-major cols x cols matrix v (pass the identity to get the
 * accumulated orthogonal factor, or null when only the column norms, the
 * singular values, are wanted: the rotations of x are the same either way). Stops after the first sweep in which no
 * pair needed a rotation, or after {@link MAX_SWEEPS}. Entries must be O(1)
 * in magnitude (no overflow of squares). Returns the number of sweeps run.
 */
export function jacobi(x: Float64Array, rows: number, cols: number, v: Float64Array | null): number {
  const d = new Float64Array(cols); // squared column norms, kept exact
  for (let j = 0; j < cols; j++) d[j] = sumSquares(x, j * rows, rows);
  const end4 = rows - (rows & 3);
  const end2 = rows - (rows & 1);
  for (let sweep = 1; sweep <= MAX_SWEEPS; sweep++) {
    let rotated = false;
    for (let p = 0; p < cols - 1; p++) {
      const po = p * rows;
      const pv = p * cols;
      for (let q = p + 1; q < cols; q++) {
        const dp = d[p];
        const dq = d[q];
        if (dp === 0 || dq === 0) continue;
        const qo = q * rows;
        let g0 = 0;
        let g1 = 0;
        let g2 = 0;
        let g3 = 0;
        let i = 0;
        for (; i < end4; i += 4) {
          g0 += x[po + i] * x[qo + i];
          g1 += x[po + i + 1] * x[qo + i + 1];
          g2 += x[po + i + 2] * x[qo + i + 2];
          g3 += x[po + i + 3] * x[qo + i + 3];
        }
        for (; i < rows; i++) g0 += x[po + i] * x[qo + i];
        const g = g0 + g1 + (g2 + g3);
        if (!(Math.abs(g) > JACOBI_TOL * Math.sqrt(dp) * Math.sqrt(dq))) continue;

        // Rotation [c s; -s c] zeroing the (p, q) entry of x^T x.
        const zeta = (dq - dp) / (2 * g);
        const az = Math.abs(zeta);
        let t = az > 1e150 ? 0.5 / az : 1 / (az + Math.sqrt(1 + az * az));
        if (zeta < 0) t = -t;
        const c = 1 / Math.sqrt(1 + t * t);
        const s = c * t;

        let np0 = 0;
        let np1 = 0;
        let nq0 = 0;
        let nq1 = 0;
        for (i = 0; i < end2; i += 2) {
          const x0 = x[po + i];
          const y0 = x[qo + i];
          const x1 = x[po + i + 1];
          const y1 = x[qo + i + 1];
          const a0 = c * x0 - s * y0;
          const b0 = s * x0 + c * y0;
          const a1 = c * x1 - s * y1;
          const b1 = s * x1 + c * y1;
          x[po + i] = a0;
          x[qo + i] = b0;
          x[po + i + 1] = a1;
          x[qo + i + 1] = b1;
          np0 += a0 * a0;
          nq0 += b0 * b0;
          np1 += a1 * a1;
          nq1 += b1 * b1;
        }
        if (i < rows) {
          const x0 = x[po + i];
          const y0 = x[qo + i];
          const a0 = c * x0 - s * y0;
          const b0 = s * x0 + c * y0;
          x[po + i] = a0;
          x[qo + i] = b0;
          np0 += a0 * a0;
          nq0 += b0 * b0;
        }
        d[p] = np0 + np1;
        d[q] = nq0 + nq1;

        if (v !== null) {
          const qv = q * cols;
          for (let r = 0; r < cols; r++) {
            const y = v[pv + r];
            const z = v[qv + r];
            v[pv + r] = c * y - s * z;
            v[qv + r] = s * y + c * z;
          }
        }
        rotated = true;
      }
    }
    if (!rotated) return sweep;
  }
  return MAX_SWEEPS;
}
