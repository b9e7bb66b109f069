/**
 * Baseline 3: the quantized integers of baseline 2, predicted by the 2-D
 * Lorenzo predictor (Ibarria, Lindstrom, Rossignac and Szymczak, "Out-of-core
 * compression and decompression of large n-dimensional scalar fields",
 * Eurographics 2003): each integer minus q[i-1][j] + q[i][j-1] - q[i-1][j-1]
 * (zero outside the grid), then zigzag byte planes and DEFLATE. Integer
 * prediction is exact, so the error is that of baseline 2.
 */
import type { Codec } from './codec.js';
import { decodeQuantized, encodeQuantized, type Predictor } from './quantize.js';

export const lorenzoPredictor: Predictor = {
  forward(q, rows, cols) {
    const d = new Int32Array(q.length);
    for (let i = 0; i < rows; i++) {
      for (let j = 0; j < cols; j++) {
        const c = i * cols + j;
        const up = i > 0 ? q[c - cols] : 0;
        const left = j > 0 ? q[c - 1] : 0;
        const diag = i > 0 && j > 0 ? q[c - cols - 1] : 0;
        d[c] = q[c] - (up + left - diag);
      }
    }
    return d;
  },
  inverse(d, rows, cols) {
    const q = new Int32Array(d.length);
    for (let i = 0; i < rows; i++) {
      for (let j = 0; j < cols; j++) {
        const c = i * cols + j;
        const up = i > 0 ? q[c - cols] : 0;
        const left = j > 0 ? q[c - 1] : 0;
        const diag = i > 0 && j > 0 ? q[c - cols - 1] : 0;
        q[c] = d[c] + (up + left - diag);
      }
    }
    return q;
  },
};

export const lorenzo: Codec = {
  id: 'lorenzo',
  describe: 'the quantized integers of `quantize`, 2-D Lorenzo prediction (Ibarria et al., 2003), zigzag byte planes, DEFLATE level 9.',
  encode: (field, target) => encodeQuantized(field, target, lorenzoPredictor),
  decode: (bytes) => decodeQuantized(bytes, lorenzoPredictor),
};
