/** Binary64 arrays for the tests that compare a WebAssembly kernel with its JavaScript version bit for bit. */

/** Entries from `rnd`: mostly ordinary values, and with `specials` some -0, +0, subnormals, huge values and infinities. */
export function entries(len: number, rnd: () => number, specials: boolean): Float64Array {
  const pool = [-0, 0, 5e-324, -2.5e-310, 1.7e308, -1.3e308, 1e-300, Infinity, -Infinity];
  const a = new Float64Array(len);
  for (let i = 0; i < len; i++) a[i] = specials && rnd() < 0.15 ? pool[Math.floor(rnd() * pool.length)] : (rnd() - 0.5) * 8;
  return a;
}

/** The first index where a and b differ as bit patterns (NaN: NaN-ness only), or -1. */
export function firstDifference(a: Float64Array, b: Float64Array): number {
  for (let i = 0; i < a.length; i++) {
    const x = a[i];
    const y = b[i];
    if (x !== x || y !== y) {
      if ((x !== x) !== (y !== y)) return i;
    } else if (!Object.is(x, y)) return i;
  }
  return -1;
}
