/**
 * CRC-32 as defined for PNG chunks and zlib (ISO 3309 / ITU-T V.42 polynomial
 * 0xEDB88320, reflected, initial value and final XOR 0xFFFFFFFF).
 */

import { crc32Kernel } from '../wasm/crc.js';

// Eight lookup tables (slicing-by-8), built once: 8 bytes per step instead of 1.
const TABLES: Uint32Array = (() => {
  const t = new Uint32Array(256 * 8);
  for (let n = 0; n < 256; n++) {
    let c = n;
    for (let k = 0; k < 8; k++) c = c & 1 ? 0xedb88320 ^ (c >>> 1) : c >>> 1;
    t[n] = c >>> 0;
  }
  for (let n = 0; n < 256; n++) {
    let c = t[n];
    for (let s = 1; s < 8; s++) {
      c = t[c & 0xff] ^ (c >>> 8);
      t[s * 256 + n] = c >>> 0;
    }
  }
  return t;
})();

/**
 * Inputs at least this long go to the WebAssembly kernel where there is one
 * (src/wasm/crc.ts): below it, the copy and the tables cost more than they
 * save. Measured (scratch/crcbench.mjs, Node 20, loops of 300 ms a size):
 * JavaScript against the kernel, 4.8 / 5.9 us at 4 KiB, 8.7 / 8.3 at 8 KiB,
 * 17.3 / 12.6 at 16 KiB, 254 / 148 at 241920 bytes (the values of the
 * vega-datasets annual-precip grid, whose check was 17% of its read with
 * the threshold at 256 KiB).
 */
export const KERNEL_BYTES = 1 << 14;

/**
 * CRC-32 of `bytes`, continuing from `crc` (the value returned for the bytes
 * before; 0 to start).
 */
export function crc32(bytes: Uint8Array, crc = 0): number {
  if (bytes.length >= KERNEL_BYTES) {
    const c = crc32Kernel(bytes, crc);
    if (c !== null) return c;
  }
  const t = TABLES;
  let c = ~crc >>> 0;
  let i = 0;
  const n = bytes.length;
  const end8 = n - (n % 8);
  for (; i < end8; i += 8) {
    const lo = (c ^ (bytes[i] | (bytes[i + 1] << 8) | (bytes[i + 2] << 16) | (bytes[i + 3] << 24))) >>> 0;
    c =
      t[1792 + (lo & 0xff)] ^
      t[1536 + ((lo >>> 8) & 0xff)] ^
      t[1280 + ((lo >>> 16) & 0xff)] ^
      t[1024 + (lo >>> 24)] ^
      t[768 + bytes[i + 4]] ^
      t[512 + bytes[i + 5]] ^
      t[256 + bytes[i + 6]] ^
      t[bytes[i + 7]];
  }
  for (; i < n; i++) c = t[(c ^ bytes[i]) & 0xff] ^ (c >>> 8);
  return ~c >>> 0;
}

/** One step of the CRC register over a zero byte: linear over GF(2), so it is a 32 x 32 bit matrix. */
function zeroByte(c: number): number {
  return (TABLES[c & 0xff] ^ (c >>> 8)) >>> 0;
}

/** The image of `c` under the matrix whose column i is `cols[i]`. */
function apply(cols: Uint32Array, c: number): number {
  let r = 0;
  for (let i = 0; c !== 0; i++, c >>>= 1) if (c & 1) r ^= cols[i];
  return r >>> 0;
}

/**
 * A function that combines the CRC-32 of bytes A and of bytes B, where B
 * is `len` bytes long, into the CRC-32 of A followed by B, without the
 * bytes: crc(A B) = Z^len(crc(A)) xor crc(B), Z being the register's step
 * over one zero byte (the initial and final XORs cancel). This is the
 * combination zlib's crc32_combine makes (from memory); Z^len is found by
 * squaring, so making the function takes about 32 log2(len) matrix products.
 */
export function crc32Combiner(len: number): (a: number, b: number) => number {
  let power = new Uint32Array(32);
  for (let i = 0; i < 32; i++) power[i] = zeroByte((1 << i) >>> 0);
  // The identity, then the product of the powers Z^(2^j) for the bits j of len.
  let acc: Uint32Array | null = null;
  for (let n = len; n > 0; n = Math.floor(n / 2)) {
    if (n % 2 === 1) {
      const a: Uint32Array | null = acc;
      acc = a === null ? power.slice() : power.map((col) => apply(a, col));
    }
    const p = power;
    power = p.map((col) => apply(p, col));
  }
  const cols = acc;
  return (a, b) => ((cols === null ? a : apply(cols, a)) ^ b) >>> 0;
}
