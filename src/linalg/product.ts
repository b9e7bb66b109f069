/**
 * Products of a fixed matrix with the range finder's sketches, y = w g and
 * z = w^T q (src/linalg/truncated.ts), in the WebAssembly kernel when this
 * thread has it (src/wasm/kernels.ts; the matrix copied into its memory once
 * and reused by every product, w^T q formed row by row of w, without a
 * transposed copy) and by {@link mulA} otherwise: the same bits either way
 * (kernels/product.ts says why).
 */
import { LINALG_KERNELS, QR_KERNELS } from '../wasm/kernels-bytes.js';
import { type Kernels, kernels, SCRATCH_AT } from '../wasm/kernels.js';
import { mulA } from './mul.js';

/** The exports of kernels/linalg.ts: addresses are byte offsets into the kernels' memory. */
interface LinalgKernels {
  mulPairs(w: number, rows: number, cols: number, g: number, pairs: number, y: number): void;
  mulTPairs(w: number, rows: number, cols: number, q: number, pairs: number, z: number): void;
  pairUp(src: number, len: number, count: number, dst: number): void;
  unpair(src: number, len: number, count: number, dst: number): void;
}

/** The export of kernels/qr.ts (encoder-side: the range finder's orthonormalization). */
interface QrKernels {
  orthonormalize(y: number, rows: number, cols: number, q: number, tau: number): void;
}

/** Products with one matrix for sketches of l columns; {@link MatrixProducts.done} ends them. */
export interface MatrixProducts {
  /** y = w g: g column-major cols x l, y column-major rows x l. */
  times(g: Float64Array, y: Float64Array): void;
  /** z = w^T q: q column-major rows x l, z column-major cols x l (only when made with `transposed`). */
  timesT(q: Float64Array, z: Float64Array): void;
  /**
   * orthonormalize(y, rows, l, q, tau) of src/linalg/truncated.ts in the
   * kernels' memory these products hold (kernels/qr.ts: the same q and tau
   * bit for bit); false where it is not to be had (nothing is written: the
   * caller runs the JavaScript).
   */
  orthonormalize(y: Float64Array, rows: number, q: Float64Array, tau: Float64Array): boolean;
  /** Give the kernels' memory back (the JavaScript version has nothing to give). */
  done(): void;
}

/** Writes a matrix, row-major, into the rows x cols array it is given (every entry). */
export type MatrixFill = (dst: Float64Array) => void;

/**
 * Products with `w` (row-major rows x cols) and, when `transposed`, with its
 * transpose, for sketches of `l` columns. `w` must not change while they
 * are in use; no other kernel runs until {@link MatrixProducts.done}. Given
 * as a {@link MatrixFill}, w is written where the products read it (the
 * kernels' memory: no copy of 8 MiB made and copied again for a 1024 x 1024
 * tile), called once before this returns.
 */
export function matrixProducts(given: Float64Array | MatrixFill, rows: number, cols: number, l: number, transposed: boolean): MatrixProducts {
  const k = kernels();
  if (k !== null) {
    const p = kernelProducts(k, given, rows, cols, l, transposed);
    if (p !== null) return p;
  }
  let w: Float64Array;
  if (typeof given === 'function') {
    w = new Float64Array(rows * cols);
    given(w);
  } else w = given;
  let wt: Float64Array | null = null;
  if (transposed) {
    // wt = w^T (cols x rows row-major), so that w^T x is also made of dot products.
    wt = new Float64Array(cols * rows);
    for (let i = 0; i < rows; i++) {
      const ro = i * cols;
      for (let j = 0; j < cols; j++) wt[j * rows + i] = w[ro + j];
    }
  }
  return {
    times: (g, y) => mulA(w, rows, cols, g, l, y),
    timesT: (q, z) => {
      if (wt === null) throw new Error('matrixProducts: made without the transpose');
      mulA(wt, cols, rows, q, l, z);
    },
    orthonormalize: () => false,
    done: () => {},
  };
}

/**
 * The kernel's version: memory from SCRATCH_AT holds w, a sketch as given,
 * the same in column pairs, and a product in column pairs, all binary64;
 * null when the memory or the module cannot be had. w^T q is formed from
 * the rows of w as they lie (kernels/product.ts, mulTPairs): a transposed
 * copy took 4.4 ms of a 1024 x 1024 tile's 30 ms range finder, and 8 MiB
 * more of the memory (scratch/prodt.mjs, medians of 15).
 */
function kernelProducts(k: Kernels, w: Float64Array | MatrixFill, rows: number, cols: number, l: number, transposed: boolean): MatrixProducts | null {
  const cells = rows * cols;
  const pairs = (l + 1) >> 1;
  const side = Math.max(rows, cols);
  // In doubles from SCRATCH_AT: w, the sketch (side x l), in pairs (pairs x side x 2), the product in pairs (pairs x side x 2),
  // and for the orthonormalization a sketch, its Q (side x l each) and tau (l).
  const wAt = SCRATCH_AT / 8;
  const gAt = wAt + cells;
  const pairsAt = gAt + side * l;
  const yAt = pairsAt + 2 * pairs * side;
  const orthAt = yAt + 2 * pairs * side;
  const orthQAt = orthAt + side * l;
  const tauAt = orthQAt + side * l;
  if (!k.lease(8 * (tauAt + l) - SCRATCH_AT)) return null;
  const fn = k.module<LinalgKernels>(LINALG_KERNELS);
  if (fn === null) {
    k.release();
    return null;
  }
  const heap = k.f64;
  if (typeof w === 'function') w(heap.subarray(wAt, wAt + cells));
  else heap.set(w.subarray(0, cells), wAt);
  return {
    times: (g, y) => {
      heap.set(g.subarray(0, cols * l), gAt);
      fn.pairUp(8 * gAt, cols, l, 8 * pairsAt);
      fn.mulPairs(8 * wAt, rows, cols, 8 * pairsAt, pairs, 8 * yAt);
      y.set(heap.subarray(yAt, yAt + rows * l));
    },
    timesT: (q, z) => {
      if (!transposed) throw new Error('matrixProducts: made without the transpose');
      heap.set(q.subarray(0, rows * l), gAt);
      fn.pairUp(8 * gAt, rows, l, 8 * pairsAt);
      fn.mulTPairs(8 * wAt, rows, cols, 8 * pairsAt, pairs, 8 * yAt);
      // The pairs back into columns, where the sketch was (it is in pairs now).
      fn.unpair(8 * yAt, cols, l, 8 * gAt);
      z.set(heap.subarray(gAt, gAt + cols * l));
    },
    orthonormalize: (y, r, q, tau) => {
      const qr = k.module<QrKernels>(QR_KERNELS);
      if (qr === null || r > side || y.length < r * l || q.length < r * l || tau.length < l) return false;
      heap.set(y.subarray(0, r * l), orthAt);
      qr.orthonormalize(8 * orthAt, r, l, 8 * orthQAt, 8 * tauAt);
      q.set(heap.subarray(orthQAt, orthQAt + r * l));
      tau.set(heap.subarray(tauAt, tauAt + l));
      // orthonormalize destroys y (its reflectors): left as the JavaScript leaves it.
      y.set(heap.subarray(orthAt, orthAt + r * l));
      return true;
    },
    done: () => k.release(),
  };
}
