/**
 * What every blend walk (kernels/blend.ts, blend-encode.ts, blend-small.ts,
 * rdo-blend.ts) shares: the cap on a part's recorded error and the i32
 * loads and stores by cell index. Inlined into each module that imports it.
 */

/** The cap on a part's recorded error (BLEND_ERR_CAP in src/codec/reconstruct.ts). */
export const CAP: i64 = 8191;

/** Entry i of the i32 array at p. */
@inline
export function ld(p: usize, i: i32): i32 {
  return load<i32>(p + (<usize>i << 2));
}

/** Entry i of the i32 array at p set to v. */
@inline
export function st(p: usize, i: i32, v: i32): void {
  store<i32>(p + (<usize>i << 2), v);
}

/** min(|d|, CAP). */
@inline
export function cap(d: i64): i32 {
  const a = d < 0 ? -d : d;
  return <i32>(a > CAP ? CAP : a);
}
