/**
 * The binary coder's decoder of coded integer streams
 * (src/codec/code-decode.ts, decodeInts; spec/FORMAT.md, "Coded integer
 * streams"), decision for decision: the same adaptive model (a 16-bit
 * probability per context, adapted by the shift min(5, bit length of its
 * count + 1)), the same range arithmetic on u32 (range >> 16 times a
 * probability is below 2^32, so nothing wraps that the JavaScript does not
 * wrap the same way), the same contexts from the carried neighbours, and
 * the same run loop for zeros in a zero neighbourhood. As in the
 * JavaScript, each decision is written out where it is taken: a function
 * cannot change the caller's locals (AssemblyScript has no closures over
 * them), and range, code and position in module globals would put memory
 * accesses on the decoder's critical path.
 *
 * The model's state, as in the encoder (kernels/ints-encode.ts), one u32 a
 * context: the probability in the low 16 bits and x = min(count + 1, 16)
 * above, whose bit length is the shift: one load and one store a decision
 * and no branch on the count; and each decision takes either half of the
 * range without a branch (the unary class's loop and the zero flag still
 * branch on the bit decoded). On the whole streams of the residual grids
 * the encoder codes in packs of bench/'s annual-precip, turbulence,
 * volcano and large fields at rel:1e-3 and psnr:60
 * (scratch/ints-dec-bench.mjs, the old module and this one alternated per
 * grid, least of 9 runs), 1.0-1.27x faster than a u16 probability and a u8
 * count with a branch on each bit. In a run of zeros the probability and
 * x are locals of their own (packed in one, the large field's grids,
 * mostly runs, decoded 11% slower than before). Contexts (src/codec/code-model.ts): ZERO_AT = 0 (16
 * buckets), SIGN_AT = 16 (9), CLASS_AT = 25 (16 buckets x 31 classes),
 * MANT_AT = 521 (31 classes x 3), 614 in all. Cell class Valid = 0
 * (src/codec/mask.ts).
 *
 * Memory (byte addresses): bytes (the stream, `end` bytes; the first four
 * already read by the caller into `code0`), codes (m x n u8, or 0 for no
 * mask), out (m x n i32), model (614 u32, set here). Result:
 * 0 when every value is decoded; 1 when a direct bit falls outside both
 * halves of the range; 2 when a value exceeds 2^30 in magnitude (its cell
 * in `failedAt`); either way `finalPos` holds the position in the stream
 * (past `end` when it ran short, as the JavaScript counts it).
 */

const ZERO_AT: i32 = 0;
const SIGN_AT: i32 = 16;
const CLASS_AT: i32 = 25;
const CLASSES: i32 = 31;
const MANT_AT: i32 = 521;
const CONTEXTS: i32 = 614;
const TOP: u32 = 0x1000000;

/** Where the stream stopped (0-based byte position, may pass the end). */
export let finalPos: i32 = 0;
/** The cell of a value beyond 2^30. */
export let failedAt: i32 = 0;

export function decodeInts(bytes: usize, end: i32, code0: u32, m: i32, n: i32, codes: usize, out: usize, model: usize): i32 {
  // A fresh context: probability 1/2, x = 1 (count 0).
  for (let c = 0; c < CONTEXTS; c++) store<u32>(model + (<usize>c << 2), 0x18000);
  let code: u32 = code0;
  let range: u32 = 0xffffffff;
  let pos: i32 = 4;
  let bound: u32 = 0;
  let bit: i32 = 0;
  let ctx: i32 = 0;
  let pr: u32 = 0;
  let st: u32 = 0;
  let x: u32 = 0;
  let sh: u32 = 0;
  const masked = codes !== 0;
  for (let i = 0; i < m; i++) {
    const row = i * n;
    let left: i32 = 0;
    let aLeft: i32 = 0;
    let up: i32 = i > 0 ? load<i32>(out + (<usize>(row - n) << 2)) : 0;
    let aUp: i32 = up < 0 ? -up : up;
    let aUpLeft: i32 = 0;
    for (let j = 0; j < n; j++) {
      let nonzero = false;
      if (!masked && (aLeft | aUp | aUpLeft) === 0) {
        // A run of zeros while every neighbour so far is 0 (bucket 0), until a 1 or a non-zero up-right code.
        // The state unpacked for the run: probability and x in locals of their own.
        let pr0: u32 = load<u32>(model + (<usize>ZERO_AT << 2)) & 0xffff;
        let x0: u32 = load<u32>(model + (<usize>ZERO_AT << 2)) >> 16;
        for (; j < n; j++) {
          const c = row + j;
          if (i > 0 && j + 1 < n && load<i32>(out + (<usize>(c - n + 1) << 2)) !== 0) break;
          const shift = 32 - clz<u32>(x0);
          x0 = x0 + 1 - (x0 >> 4);
          bound = (range >> 16) * pr0;
          if (code < bound) {
            range = bound;
            pr0 = pr0 + ((65536 - pr0) >> shift);
          } else {
            code -= bound;
            range -= bound;
            pr0 = pr0 - (pr0 >> shift);
            nonzero = true;
          }
          while (range < TOP) {
            range = range << 8;
            code = (code << 8) | (pos < end ? <u32>load<u8>(bytes + <usize>pos) : 0);
            pos++;
          }
          if (nonzero) break;
          store<i32>(out + (<usize>c << 2), 0);
        }
        store<u32>(model + (<usize>ZERO_AT << 2), pr0 | (x0 << 16));
        if (j === n) break;
      }
      const c = row + j;
      const upRight: i32 = i > 0 && j + 1 < n ? load<i32>(out + (<usize>(c - n + 1) << 2)) : 0;
      const aUpRight: i32 = upRight < 0 ? -upRight : upRight;
      if (masked && load<u8>(codes + <usize>c) !== 0) {
        store<i32>(out + (<usize>c << 2), 0);
        left = 0;
        aLeft = 0;
        aUpLeft = aUp;
        up = upRight;
        aUp = aUpRight;
        continue;
      }
      // The activity in i64: with magnitudes up to 2^30 it reaches 6 x 2^30 before the cap.
      const a: i64 = 2 * <i64>aLeft + 2 * <i64>aUp + <i64>aUpLeft + <i64>aUpRight;
      const bucket: i32 = 32 - clz<i32>(a > 0x7fff ? 0x7fff : <i32>a);
      if (nonzero) bit = 1;
      else {
        // Decision: zero flag.
        ctx = ZERO_AT + bucket;
        st = load<u32>(model + (<usize>ctx << 2));
        pr = st & 0xffff;
        x = st >> 16;
        sh = 32 - clz<u32>(x);
        bound = (range >> 16) * pr;
        bit = code >= bound ? 1 : 0;
        code -= select<u32>(bound, 0, bit !== 0);
        range = select<u32>(range - bound, bound, bit !== 0);
        store<u32>(model + (<usize>ctx << 2), select<u32>(pr - (pr >> sh), pr + ((65536 - pr) >> sh), bit !== 0) | ((x + 1 - (x >> 4)) << 16));
        while (range < TOP) {
          range = range << 8;
          code = (code << 8) | (pos < end ? <u32>load<u8>(bytes + <usize>pos) : 0);
          pos++;
        }
      }
      let v: i32 = 0;
      if (bit !== 0) {
        // Decision: sign.
        ctx = SIGN_AT + 3 * (left > 0 ? 2 : left < 0 ? 0 : 1) + (up > 0 ? 2 : up < 0 ? 0 : 1);
        st = load<u32>(model + (<usize>ctx << 2));
        pr = st & 0xffff;
        x = st >> 16;
        sh = 32 - clz<u32>(x);
        bound = (range >> 16) * pr;
        bit = code >= bound ? 1 : 0;
        code -= select<u32>(bound, 0, bit !== 0);
        range = select<u32>(range - bound, bound, bit !== 0);
        store<u32>(model + (<usize>ctx << 2), select<u32>(pr - (pr >> sh), pr + ((65536 - pr) >> sh), bit !== 0) | ((x + 1 - (x >> 4)) << 16));
        while (range < TOP) {
          range = range << 8;
          code = (code << 8) | (pos < end ? <u32>load<u8>(bytes + <usize>pos) : 0);
          pos++;
        }
        const negative = bit;
        // The class k in unary, at most 30 ones.
        const cls = CLASS_AT + bucket * CLASSES;
        let k = 0;
        for (;;) {
          ctx = cls + k;
          st = load<u32>(model + (<usize>ctx << 2));
          pr = st & 0xffff;
          x = st >> 16;
          sh = 32 - clz<u32>(x);
          bound = (range >> 16) * pr;
          bit = code >= bound ? 1 : 0;
          code -= select<u32>(bound, 0, bit !== 0);
          range = select<u32>(range - bound, bound, bit !== 0);
          store<u32>(model + (<usize>ctx << 2), select<u32>(pr - (pr >> sh), pr + ((65536 - pr) >> sh), bit !== 0) | ((x + 1 - (x >> 4)) << 16));
          while (range < TOP) {
            range = range << 8;
            code = (code << 8) | (pos < end ? <u32>load<u8>(bytes + <usize>pos) : 0);
            pos++;
          }
          if (bit === 0) break;
          k++;
          if (k === 30) break;
        }
        let mag: i32 = 1;
        // Up to two mantissa bits with contexts (the second given the first), then direct bits.
        for (let b = 0; b < k; b++) {
          if (b < 2) {
            ctx = MANT_AT + 3 * k + (b === 0 ? 0 : 1 + (mag & 1));
            st = load<u32>(model + (<usize>ctx << 2));
            pr = st & 0xffff;
            x = st >> 16;
            sh = 32 - clz<u32>(x);
            bound = (range >> 16) * pr;
            bit = code >= bound ? 1 : 0;
            code -= select<u32>(bound, 0, bit !== 0);
            range = select<u32>(range - bound, bound, bit !== 0);
            store<u32>(model + (<usize>ctx << 2), select<u32>(pr - (pr >> sh), pr + ((65536 - pr) >> sh), bit !== 0) | ((x + 1 - (x >> 4)) << 16));
            while (range < TOP) {
              range = range << 8;
              code = (code << 8) | (pos < end ? <u32>load<u8>(bytes + <usize>pos) : 0);
              pos++;
            }
          } else {
            range = range >> 1;
            bit = 0;
            if (code >= range) {
              code -= range;
              bit = 1;
              if (code >= range) {
                finalPos = pos;
                return 1;
              }
            }
            while (range < TOP) {
              range = range << 8;
              code = (code << 8) | (pos < end ? <u32>load<u8>(bytes + <usize>pos) : 0);
              pos++;
            }
          }
          mag = 2 * mag + bit;
        }
        if (mag > 0x40000000) {
          failedAt = c;
          finalPos = pos;
          return 2;
        }
        v = negative ? -mag : mag;
      }
      store<i32>(out + (<usize>c << 2), v);
      left = v;
      aLeft = v < 0 ? -v : v;
      aUpLeft = aUp;
      up = upRight;
      aUp = aUpRight;
    }
  }
  finalPos = pos;
  return 0;

}
