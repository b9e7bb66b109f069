/**
 * The decoder against the byte-by-byte examples of spec/FORMAT.md,
 * Appendix B (payloads the specification decodes by hand, with their
 * decoded values), and the reconstruction of Section 11 against its
 * formula evaluated cell by cell as written there.
 */
import { describe, expect, it } from 'vitest';
import { decodeInts } from '../../src/codec/code-decode.js';
import { lowRank, reconstruct } from '../../src/codec/reconstruct.js';
import { DecodeScratch, decodeTile } from '../../src/codec/tile-decode.js';
import { crc32 } from '../../src/format/crc32.js';
import { mulberry32 } from '../rng.js';

const hex = (s: string) => Uint8Array.from(s.trim().split(/\s+/), (b) => Number.parseInt(b, 16));

// spec/FORMAT.md, Appendix B.1: the 30-byte payload of a 5 x 5 f64 tile of rank 1 with one NaN.
const B1 = hex('01 11 01 55 55 25 41 05 00 36 d2 73 10 00 01 01 0e 4b 0b ef 8d b9 13 ba 4e 6e 7d 44 e3 00');
// spec/FORMAT.md, Appendix B.2: the 17-byte payload of a 4 x 4 f64 tile of rank 0 with an up-predicted residual.
const B2 = hex('01 42 00 14 33 01 0a ed 0c 06 cb 49 80 cd 2c 8f 60');

describe('spec/FORMAT.md Appendix B, decoded', () => {
  it('B.1: the payload CRC, the factor stream values and the decoded tile', () => {
    // Payload CRC 0xBB3B7340 and the factor stream's ten values, as Appendix B.1 states them.
    expect(crc32(B1)).toBe(0xbb3b7340);
    const stream = new Int32Array(10);
    decodeInts(B1.subarray(19, 30), 1, 10, null, stream);
    expect(Array.from(stream)).toEqual([-3, -4, -3, -4, -3, 16, -8, -8, -8, -8]);
    const out = decodeTile(B1, { m: 5, n: 5, dtype: 'f64', fill: null, where: 'B.1' }) as Float64Array;
    // The decoded tile of Appendix B.1 (cell 5 the canonical NaN 0x7FF8000000000000), and its value CRC 0x0C3B682B.
    const want = [
      6.8177080154418945, 8.5755205154418945, 10.333333015441895, 12.091145515441895, 13.848958015441895, Number.NaN, 6.2317705154418945, 10.333333015441895, 14.434895515441895,
      18.536458015441895, -1.3854169845581055, 4.4739580154418945, 10.333333015441895, 16.192708015441895, 22.052083015441895, -6.0729169845581055, 2.1302080154418945,
      10.333333015441895, 18.536458015441895, 26.739583015441895, -9.5885419845581055, 0.37239551544189453, 10.333333015441895, 20.294270515441895, 30.255208015441895,
    ];
    expect(Array.from(out)).toEqual(want);
    const words = new Uint32Array(out.buffer);
    expect([words[10], words[11]]).toEqual([0, 0x7ff80000]);
    expect(crc32(new Uint8Array(out.buffer))).toBe(0x0c3b682b);
  });

  it('B.2: the 4 x 4 integer field comes back exactly', () => {
    // Appendix B.2: payload CRC 0xAA05FF8C; the lattice payload reproduces every value of the field.
    expect(crc32(B2)).toBe(0xaa05ff8c);
    const out = decodeTile(B2, { m: 4, n: 4, dtype: 'f64', fill: null, where: 'B.2' });
    expect(Array.from(out)).toEqual([7, 9, 11, 13, 4, 8, 12, 16, 1, 7, 13, 19, -2, 6, 14, 22]);
  });

  it('B.1 and B.2 decode the same with working buffers left dirty by an earlier, larger tile', () => {
    const scratch = new DecodeScratch();
    scratch.sumsFor(64).fill(Number.NaN);
    scratch.codesFor(64).fill(-12345);
    const b2 = decodeTile(B2, { m: 4, n: 4, dtype: 'f64', fill: null, where: 'B.2', scratch });
    expect(Array.from(b2)).toEqual([7, 9, 11, 13, 4, 8, 12, 16, 1, 7, 13, 19, -2, 6, 14, 22]);
    const b1 = decodeTile(B1, { m: 5, n: 5, dtype: 'f64', fill: null, where: 'B.1', scratch });
    // The value CRC of Appendix B.1's decoded tile.
    expect(crc32(new Uint8Array(b1.buffer))).toBe(0x0c3b682b);
    // What decodeTile returns is its own: a later decode does not change it.
    decodeTile(B2, { m: 4, n: 4, dtype: 'f64', fill: null, where: 'B.2', scratch });
    expect(crc32(new Uint8Array(b1.buffer))).toBe(0x0c3b682b);
  });
});

describe('reconstruction (spec/FORMAT.md, Section 11)', () => {
  /** The formula cell by cell as the spec writes it: ((+0 + l0 w0) + l1 w1 + ...) + centre, then + q x step, rounded to the dtype. */
  function byFormula(l: Float64Array, w: Float64Array, m: number, n: number, r: number, centre: number, q: Int32Array | null, step: number, f32: boolean): Float64Array {
    const out = new Float64Array(m * n);
    for (let i = 0; i < m; i++) {
      for (let j = 0; j < n; j++) {
        let s = 0;
        for (let k = 0; k < r; k++) s = s + l[i * r + k] * w[k * n + j];
        s = s + centre;
        if (q !== null) s = s + q[i * n + j] * step;
        out[i * n + j] = f32 ? Math.fround(s) : s;
      }
    }
    return out;
  }

  it('gives the formula bit for bit at ranks 0 to 11, both dtypes, with and without a residual', () => {
    const rand = mulberry32(20);
    for (let r = 0; r <= 11; r++) {
      const m = 3 + (r % 4);
      const n = 5 + ((3 * r) % 7);
      // Products of codes and steps as the decoder forms them, with -0 among them (the first product of a row added to +0).
      const l = Float64Array.from({ length: m * r }, () => (rand() < 0.1 ? -0 : Math.round((rand() - 0.5) * 2000) * 0.0390625));
      const w = Float64Array.from({ length: r * n }, () => (rand() < 0.1 ? -0 : Math.round((rand() - 0.5) * 2000) * 1.875e-3));
      const q = Int32Array.from({ length: m * n }, () => Math.round((rand() - 0.5) * 100));
      const centre = (rand() - 0.5) * 1e3;
      for (const f32 of [false, true]) {
        for (const residual of [null, q]) {
          const acc = new Float64Array(m * n).fill(7);
          lowRank(l, w, m, n, r, centre, acc);
          const out = f32 ? new Float32Array(m * n) : new Float64Array(m * n);
          expect(reconstruct(acc, residual, 0.01, out)).toBe(true);
          const want = byFormula(l, w, m, n, r, centre, residual, 0.01, f32);
          const got = Float64Array.from(out);
          expect(Buffer.from(got.buffer).equals(Buffer.from(want.buffer))).toBe(true);
        }
      }
    }
  });

  it('reports a value that is not finite after rounding to binary32', () => {
    // 2^128 is finite in binary64 and rounds to Infinity in binary32 (IEEE 754 overflow, from memory).
    const acc = Float64Array.of(1, 2 ** 128, 3);
    expect(reconstruct(acc, null, 0, new Float32Array(3))).toBe(false);
    expect(reconstruct(acc, null, 0, new Float64Array(3))).toBe(true);
  });
});
