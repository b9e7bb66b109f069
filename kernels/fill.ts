/**
 * The harmonic fill's Gauss-Seidel sweeps (src/codec/fill.ts, fillMissing):
 * each missing cell, in raster order, becomes the mean of its neighbours
 * inside the tile (up, down, left, right, added in that order from +0,
 * then divided by their count), until a sweep changes no cell or `sweeps`
 * are made. The same binary64 operations in the same order as the
 * JavaScript, so the same values bit for bit.
 *
 * Memory (byte addresses): x (m x n binary64, in place), missing (count
 * i32 cell numbers, increasing), inner (count u8: 1 where all four
 * neighbours are inside the tile).
 */
export function fillSweeps(x: usize, missing: usize, inner: usize, count: i32, m: i32, n: i32, sweeps: i32): void {
  const up = <usize>n << 3;
  for (let s = 0; s < sweeps; s++) {
    let change: f64 = 0;
    // The value just written and its cell: the left neighbour of the next cell when that is the next missing one,
    // taken from here rather than read back from memory (the sweep's one chain of dependent operations runs through it).
    let last: f64 = 0;
    let lastC = -2;
    for (let t = 0; t < count; t++) {
      const c = load<i32>(missing + (<usize>t << 2));
      const at = x + (<usize>c << 3);
      let v: f64;
      if (load<u8>(inner + <usize>t) === 1) {
        const left = lastC === c - 1 ? last : load<f64>(at - 8);
        v = (0 + load<f64>(at - up) + load<f64>(at + up) + left + load<f64>(at + 8)) / 4;
      } else {
        const i = c / n;
        const j = c - i * n;
        let sum: f64 = 0;
        let near = 0;
        if (i > 0) {
          sum += load<f64>(at - up);
          near++;
        }
        if (i < m - 1) {
          sum += load<f64>(at + up);
          near++;
        }
        if (j > 0) {
          sum += load<f64>(at - 8);
          near++;
        }
        if (j < n - 1) {
          sum += load<f64>(at + 8);
          near++;
        }
        if (near === 0) continue;
        v = sum / <f64>near;
      }
      change = Math.max(change, Math.abs(v - load<f64>(at)));
      store<f64>(at, v);
      last = v;
      lastC = c;
    }
    if (change === 0) break;
  }
}
