/**
 * Quantization step codes: a code c stands for (8 + (c & 7)) * 2^((c >> 3) - 3),
 * i.e. (1 + f/8) * 2^e with f = c & 7 and e = c >> 3 in -1000..1000
 * (src/codec/steps.ts). Checked against binary64 values built from their bit
 * patterns (IEEE 754: sign, 11-bit biased exponent with bias 1023, 52-bit
 * fraction; subnormals have exponent field 0 and value fraction * 2^-1074;
 * from memory), independently of any Math.pow.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { FormatCode, FormatError } from '../../src/errors.js';
import { pow2, stepCode, stepValue } from '../../src/codec/steps.js';

/** The binary64 number with the given 64-bit pattern. */
function fromBits(bits: bigint): number {
  const view = new DataView(new ArrayBuffer(8));
  view.setBigUint64(0, bits);
  return view.getFloat64(0);
}

/** 2^e for e in -1074..1023, from its bit pattern. */
function exactPow2(e: number): number {
  if (e >= -1022) return fromBits(BigInt(e + 1023) << 52n);
  return fromBits(1n << BigInt(e + 1074));
}

/** (1 + f/8) * 2^e for a normal exponent e, from its bit pattern. */
function exactStep(f: number, e: number): number {
  return fromBits((BigInt(e + 1023) << 52n) | (BigInt(f) << 49n));
}

const SMALLEST = exactPow2(-1000);
const LARGEST = exactStep(7, 1000);

describe('pow2', () => {
  it('equals 2^e exactly for every e in -1074..1023', () => {
    for (let e = -1074; e <= 1023; e++) {
      const v = pow2(e);
      if (v !== exactPow2(e)) expect.fail(`pow2(${e}) = ${v}, want ${exactPow2(e)}`);
      if (v !== 2 ** e) expect.fail(`pow2(${e}) = ${v} but 2 ** ${e} = ${2 ** e}`);
    }
    expect(pow2(-1074)).toBe(Number.MIN_VALUE); // the smallest subnormal, 2^-1074
    expect(pow2(0)).toBe(1);
    expect(pow2(1023) * 2).toBe(Infinity);
  });
});

describe('stepValue', () => {
  it('is exactly (1 + f/8) * 2^e for every code in range', () => {
    for (let c = -8000; c <= 8007; c++) {
      const e = Math.floor(c / 8);
      const f = c - 8 * e;
      expect(c >> 3).toBe(e);
      if (stepValue(c) !== exactStep(f, e)) expect.fail(`stepValue(${c}) = ${stepValue(c)}, want ${exactStep(f, e)}`);
    }
  });

  it('is strictly increasing in the code', () => {
    let prev = 0;
    for (let c = -8000; c <= 8007; c++) {
      const v = stepValue(c);
      expect(v > prev).toBe(true);
      prev = v;
    }
    expect(stepValue(-8000)).toBe(SMALLEST);
    expect(stepValue(8007)).toBe(LARGEST);
  });

  it('refuses codes whose exponent lies outside -1000..1000 with FormatError malformed', () => {
    for (const c of [-8001, -8008, -32768, 8008, 8015, 32767]) {
      let e: unknown;
      try {
        stepValue(c, 'tile 3 left step');
      } catch (x) {
        e = x;
      }
      expect(e).toBeInstanceOf(FormatError);
      expect((e as FormatError).code).toBe(FormatCode.Malformed);
      expect((e as FormatError).message).toMatch(/tile 3 left step/);
    }
  });
});

describe('stepCode', () => {
  /** x = (1 + u) * 2^e with u in [0, 1), e in -1000..1000. */
  const targets = fc
    .tuple(fc.integer({ min: -1000, max: 1000 }), fc.double({ min: 0, max: 1, maxExcluded: true, noNaN: true }))
    .map(([e, u]) => (1 + u) * exactPow2(e));

  it('gives the largest step not above x, so stepValue(stepCode(x)) is in (8x/9, x]', () => {
    fc.assert(
      fc.property(targets, (x) => {
        const c = stepCode(x);
        const v = stepValue(c);
        expect(v).toBeLessThanOrEqual(x);
        // The mantissas 8..15 are at most 9/8 apart, so the largest step <= x exceeds 8x/9.
        expect(v).toBeGreaterThan((x * 8) / 9);
        if (c < 8007) expect(stepValue(c + 1)).toBeGreaterThan(x);
      }),
      { seed: 0x57e9, numRuns: 2000 },
    );
  });

  it('holds over decades 1e-300 .. 1e300 and at every power of ten between', () => {
    for (let k = -300; k <= 300; k++) {
      const x = Number(`1e${k}`);
      const v = stepValue(stepCode(x));
      expect(v <= x && v > (x * 8) / 9, `x = ${x}, step ${v}`).toBe(true);
    }
  });

  it('maps every representable step to its own code', () => {
    for (let c = -8000; c <= 8007; c++) {
      if (stepCode(stepValue(c)) !== c) expect.fail(`stepCode(stepValue(${c})) = ${stepCode(stepValue(c))}`);
    }
  });

  it('rounds down just below a representable step', () => {
    for (let c = -7999; c <= 8007; c += 97) {
      const v = stepValue(c);
      const below = v * (1 - 2 ** -53); // the next binary64 value below v
      expect(below).toBeLessThan(v);
      expect(stepCode(below)).toBe(c - 1);
    }
  });

  it('is monotone in the target', () => {
    fc.assert(
      fc.property(targets, targets, (a, b) => {
        const [lo, hi] = a <= b ? [a, b] : [b, a];
        expect(stepCode(lo)).toBeLessThanOrEqual(stepCode(hi));
      }),
      { seed: 0x57ea, numRuns: 1000 },
    );
  });

  it('clamps targets above the largest step to the largest step', () => {
    for (const x of [exactPow2(1001), 1e305, Number.MAX_VALUE]) {
      expect(stepCode(x)).toBe(8007);
      expect(stepValue(stepCode(x))).toBe(LARGEST);
    }
  });

  it('refuses targets that are not positive', () => {
    for (const x of [0, -0, -1, NaN, -Infinity]) expect(() => stepCode(x)).toThrow(RangeError);
  });

  it('a target below the smallest step is refused rather than rounded up', () => {
    for (const x of [exactPow2(-1001), 1e-305, Number.MIN_VALUE]) expect(() => stepCode(x)).toThrow(RangeError);
  });
});
