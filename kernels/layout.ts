/**
 * Copies that lay out the product's operands (kernels/product.ts) inside
 * the module's memory, where they run at memory speed rather than through
 * JavaScript's typed-array accesses: the sketch's columns interleaved in
 * pairs, and a product's pairs back into columns. Binary64 values are moved, never
 * computed on, so every bit (NaN payloads included) is kept.
 */

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

/** dst (column-major, len x count) from src in column pairs as {@link pairUp} lays them out: its inverse. */
export function unpair(src: usize, len: i32, count: i32, dst: usize): void {
  for (let t = 0; t < count; t++) {
    const from = src + ((<usize>(t >> 1) * <usize>len) << 4) + (<usize>(t & 1) << 3);
    const to = dst + ((<usize>t * <usize>len) << 3);
    for (let j = 0; j < len; j++) store<u64>(to + (<usize>j << 3), load<u64>(from + (<usize>j << 4)));
  }
}
