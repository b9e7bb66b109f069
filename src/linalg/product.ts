/**
 * Products of a fixed matrix with the range finder's sketches, y = w g and
 * z = w^T q (src/linalg/truncated.ts), in the WebAssembly kernel when this
 * thread has it (src/wasm/kernels.ts; the matrix copied into its memory once
 * and reused by every product) and by {@link mulA} otherwise: the same bits
 * either way (kernels/product.ts says why).
 */
import { LINALG_KERNELS, QR_KERNELS } from '../wasm/kernels-bytes.js';
import { type Kernels, kernels, SCRATCH_AT } from '../wasm/kernels.js';
import { mulA } from './mul.js';

/** The exports of kernels/linalg.ts: addresses are byte offsets into the kernels' memory. */
interface LinalgKernels {
  mulPairs(w: number, rows: number, cols: number, g: number, pairs: number, y: number): void;
  transpose(src: number, rows: number, cols: number, dst: number): void;
  pairUp(src: number, len: number, count: number, dst: number): void;
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

/**
 * Products with `w` (row-major rows x cols) and, when `transposed`, with its
 * transpose, for sketches of `l` columns. `w` must not change while they
 * are in use; no other kernel runs until {@link MatrixProducts.done}.
 */
export function matrixProducts(w: Float64Array, rows: number, cols: number, l: number, transposed: boolean): MatrixProducts {
  const k = kernels();
  if (k !== null) {
    const p = kernelProducts(k, w, rows, cols, l, transposed);
    if (p !== null) return p;
  }
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
 * The kernel's version: memory from SCRATCH_AT holds w, w^T (when asked
 * for), a sketch as given, the same in column pairs, and a product, all
 * binary64; null when the memory or the module cannot be had.
 */
function kernelProducts(k: Kernels, w: Float64Array, rows: number, cols: number, l: number, transposed: boolean): MatrixProducts | null {
  const cells = rows * cols;
  const pairs = (l + 1) >> 1;
  const side = Math.max(rows, cols);
  // In doubles from SCRATCH_AT: w, w^T, the sketch (side x l), in pairs (pairs x side x 2), the product (side x 2 pairs),
  // and for the orthonormalization a sketch, its Q (side x l each) and tau (l).
  const wAt = SCRATCH_AT / 8;
  const wtAt = wAt + cells;
  const gAt = wtAt + (transposed ? cells : 0);
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
  heap.set(w, wAt);
  if (transposed) fn.transpose(8 * wAt, rows, cols, 8 * wtAt);
  /** out = (the matrix at `at`, r x c) x g, g column-major c x l. */
  const product = (at: number, r: number, c: number, g: Float64Array, out: Float64Array): void => {
    heap.set(g.subarray(0, c * l), gAt);
    fn.pairUp(8 * gAt, c, l, 8 * pairsAt);
    fn.mulPairs(8 * at, r, c, 8 * pairsAt, pairs, 8 * yAt);
    out.set(heap.subarray(yAt, yAt + r * l));
  };
  return {
    times: (g, y) => product(wAt, rows, cols, g, y),
    timesT: (q, z) => {
      if (!transposed) throw new Error('matrixProducts: made without the transpose');
      product(wtAt, cols, rows, q, z);
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
