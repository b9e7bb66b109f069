/**
 * The encoder's check of a finished tile, its error tally
 * (src/codec/tally.ts, ErrorTally.add over the valid cells, as
 * src/codec/measure.ts takes it): for each cell whose class is Valid (0),
 * in cell order, d = |orig - out| (binary32 values widened to binary64,
 * exactly, as the JavaScript reads them), then the same binary64
 * operations in the same order: the count, the maximum (NaN sticky), and
 * the scaled sum of squares. The same state to the bit.
 *
 * Memory (byte addresses): orig and out (cells values each, binary32 when
 * `f32` is 1, else binary64), codes (cells u8), state (count, max, scale,
 * ssq: four binary64, read and written back).
 */

export function tallyCells(orig: usize, out: usize, codes: usize, cells: i32, f32: i32, state: usize): void {
  let count = load<f64>(state);
  let max = load<f64>(state, 8);
  let scale = load<f64>(state, 16);
  let ssq = load<f64>(state, 24);
  for (let c = 0; c < cells; c++) {
    if (load<u8>(codes + <usize>c) !== 0) continue;
    const d =
      f32 !== 0
        ? Math.abs(<f64>load<f32>(orig + (<usize>c << 2)) - <f64>load<f32>(out + (<usize>c << 2)))
        : Math.abs(load<f64>(orig + (<usize>c << 3)) - load<f64>(out + (<usize>c << 3)));
    count += 1;
    if (d !== d || max !== max) {
      max = NaN;
      continue;
    }
    if (d > max) max = d;
    if (d === 0) continue;
    if (d > scale) {
      const r = scale / d;
      ssq = 1 + ssq * r * r;
      scale = d;
    } else {
      const r = d / scale;
      ssq += r * r;
    }
  }
  store<f64>(state, count);
  store<f64>(state, max, 8);
  store<f64>(state, scale, 16);
  store<f64>(state, ssq, 24);
}
