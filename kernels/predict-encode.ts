/**
 * The plain predictors' differences as the encoder forms them
 * (src/codec/reconstruct.ts, predict() with predictors 1 to 5: Lorenzo,
 * Left, Up, Average, Median), four cells at a time in i32x4, for a grid
 * whose every code is within 2^28 in magnitude: each difference is then a
 * code less at most three others (the Median's and the Average's
 * predictions lie between two codes, or are the Lorenzo's a + b - c), at
 * most 2^30 in magnitude, so no sum wraps in 32 bits and none passes the
 * encoder's limit of 2^30; floor((a + b) / 2) is an arithmetic shift of
 * a + b, and the Median (LOCO-I's median edge detector) is a + b - c
 * clamped to [min(a, b), max(a, b)], the same value as its three cases.
 * Result 0 (the caller runs the JavaScript) when a code passes 2^28.
 *
 * Memory (byte addresses): q (m x n i32), d (m x n i32).
 */

/** 1 when every |q| is at most 2^28 (|-2^31| wraps to itself, negative: caught by the unsigned compare). */
export function small(q: usize, cells: i32): bool {
  let most = i32x4.splat(0);
  let c = 0;
  for (; c + 4 <= cells; c += 4) most = v128.or(most, i32x4.abs(v128.load(q + (<usize>c << 2))));
  let rest: u32 = 0;
  for (; c < cells; c++) rest |= <u32>abs<i32>(load<i32>(q + (<usize>c << 2)));
  const all = <u32>(i32x4.extract_lane(most, 0) | i32x4.extract_lane(most, 1) | i32x4.extract_lane(most, 2) | i32x4.extract_lane(most, 3)) | rest;
  return all <= 0x10000000;
}

/** The interior prediction of kind for lanes of a (left), b (up), c (up-left). */
@inline
function guess(kind: i32, a: v128, b: v128, c: v128): v128 {
  if (kind === 1) return i32x4.sub(i32x4.add(a, b), c);
  if (kind === 2) return a;
  if (kind === 3) return b;
  if (kind === 4) return i32x4.shr_s(i32x4.add(a, b), 1);
  return i32x4.max_s(i32x4.min_s(i32x4.sub(i32x4.add(a, b), c), i32x4.max_s(a, b)), i32x4.min_s(a, b));
}

/** The same for one cell. */
@inline
function guessOne(kind: i32, a: i32, b: i32, c: i32): i32 {
  if (kind === 1) return a + b - c;
  if (kind === 2) return a;
  if (kind === 3) return b;
  if (kind === 4) return (a + b) >> 1;
  const lo = a < b ? a : b;
  const hi = a < b ? b : a;
  const g = a + b - c;
  return g < lo ? lo : g > hi ? hi : g;
}

export function predictPlain(q: usize, d: usize, m: i32, n: i32, kind: i32): i32 {
  if (!small(q, m * n)) return 0;
  // The edge rule: the first row from the left (0 before the first cell), the first column from above.
  let prev = 0;
  for (let j = 0; j < n; j++) {
    const x = load<i32>(q + (<usize>j << 2));
    store<i32>(d + (<usize>j << 2), x - prev);
    prev = x;
  }
  for (let i = 1; i < m; i++) {
    const row = q + (<usize>(i * n) << 2);
    const up = row - (<usize>n << 2);
    const out = d + (<usize>(i * n) << 2);
    store<i32>(out, load<i32>(row) - load<i32>(up));
    let j = 1;
    for (; j + 4 <= n; j += 4) {
      const at = <usize>j << 2;
      const g = guess(kind, v128.load(row + at - 4), v128.load(up + at), v128.load(up + at - 4));
      v128.store(out + at, i32x4.sub(v128.load(row + at), g));
    }
    for (; j < n; j++) {
      const at = <usize>j << 2;
      store<i32>(out + at, load<i32>(row + at) - guessOne(kind, load<i32>(row + at - 4), load<i32>(up + at), load<i32>(up + at - 4)));
    }
  }
  return 1;
}
