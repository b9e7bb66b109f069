/**
 * Copies that lay out the product's operands (kernels/product.ts) inside
 * the module's memory, where they run at memory speed rather than through
 * JavaScript's typed-array accesses: the transpose of the matrix and the
 * sketch's columns interleaved in pairs. Binary64 values are moved, never
 * computed on, so every bit (NaN payloads included) is kept.
 */

/** Side of the square blocks the transpose moves at a time (8 x 8 doubles: eight cache lines each way). */
const BLOCK = 8;

/** dst (cols x rows, row-major) = the transpose of src (rows x cols, row-major); no overlap. */
export function transpose(src: usize, rows: i32, cols: i32, dst: usize): void {
  for (let ib = 0; ib < rows; ib += BLOCK) {
    const ie = min(rows, ib + BLOCK);
    for (let jb = 0; jb < cols; jb += BLOCK) {
      const je = min(cols, jb + BLOCK);
      for (let i = ib; i < ie; i++) {
        const from = src + ((<usize>i * <usize>cols) << 3);
        for (let j = jb; j < je; j++) store<u64>(dst + ((<usize>j * <usize>rows + <usize>i) << 3), load<u64>(from + (<usize>j << 3)));
      }
    }
  }
}

/**
 * dst (pairs of columns: pair p holds columns 2p and 2p + 1 interleaved,
 * dst[(p * len + j) * 2 + lane]) from src (column-major, len x count); an
 * odd count's last pair has zeros in its second lane.
 */
export function pairUp(src: usize, len: i32, count: i32, dst: usize): void {
  for (let t = 0; t < count; t++) {
    const from = src + ((<usize>t * <usize>len) << 3);
    const to = dst + ((<usize>(t >> 1) * <usize>len) << 4) + (<usize>(t & 1) << 3);
    for (let j = 0; j < len; j++) store<u64>(to + (<usize>j << 4), load<u64>(from + (<usize>j << 3)));
  }
  if (count & 1) {
    const to = dst + ((<usize>(count >> 1) * <usize>len) << 4) + 8;
    for (let j = 0; j < len; j++) store<u64>(to + (<usize>j << 4), 0);
  }
}
