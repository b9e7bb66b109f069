/** Seeded xorshift32 (Marsaglia, "Xorshift RNGs", J. Stat. Software 8(14), 2003), floats in [0, 1). */
export function xorshift32(seed: number): () => number {
  let s = seed >>> 0 || 0x9e3779b9;
  return () => {
    s ^= s << 13;
    s >>>= 0;
    s ^= s >>> 17;
    s ^= s << 5;
    s >>>= 0;
    return s / 4294967296;
  };
}
