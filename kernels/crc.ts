/**
 * CRC-32 (ISO 3309 / ITU-T V.42, the polynomial 0xEDB88320 reflected, as
 * src/format/crc32.ts computes it) eight bytes a step (slicing-by-8, from
 * memory): the module of its own for long inputs, both sides (a tile's
 * decoded values, 4 MiB for a 1024 x 1024 float32 tile). Compiled by
 * `npm run kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts;
 * laid out and copied in and out by src/wasm/crc.ts.
 */

/** Eight tables of 256 u32 at `t` (8 KiB): table 0 the bytewise one, table s a byte followed by s zero bytes. */
export function crcTables(t: usize): void {
  for (let n: u32 = 0; n < 256; n++) {
    let c = n;
    for (let k = 0; k < 8; k++) c = c & 1 ? 0xedb88320 ^ (c >>> 1) : c >>> 1;
    store<u32>(t + (<usize>n << 2), c);
  }
  for (let n: usize = 0; n < 256; n++) {
    let c = load<u32>(t + (n << 2));
    for (let s: usize = 1; s < 8; s++) {
      c = load<u32>(t + (<usize>(c & 0xff) << 2)) ^ (c >>> 8);
      store<u32>(t + (s << 10) + (n << 2), c);
    }
  }
}

/** The CRC-32 of `len` bytes at `p`, continuing from `crc` (0 to start), with the tables at `t`. */
export function crcBytes(t: usize, p: usize, len: usize, crc: u32): u32 {
  let c = ~crc;
  const end8 = p + (len & ~(<usize>7));
  for (; p < end8; p += 8) {
    const lo = c ^ load<u32>(p);
    const hi = load<u32>(p, 4);
    c =
      load<u32>(t + 7168 + (<usize>(lo & 0xff) << 2)) ^
      load<u32>(t + 6144 + (<usize>((lo >>> 8) & 0xff) << 2)) ^
      load<u32>(t + 5120 + (<usize>((lo >>> 16) & 0xff) << 2)) ^
      load<u32>(t + 4096 + (<usize>(lo >>> 24) << 2)) ^
      load<u32>(t + 3072 + (<usize>(hi & 0xff) << 2)) ^
      load<u32>(t + 2048 + (<usize>((hi >>> 8) & 0xff) << 2)) ^
      load<u32>(t + 1024 + (<usize>((hi >>> 16) & 0xff) << 2)) ^
      load<u32>(t + (<usize>(hi >>> 24) << 2));
  }
  const end = p + (len & 7);
  for (; p < end; p++) c = load<u32>(t + (<usize>((c ^ <u32>load<u8>(p)) & 0xff) << 2)) ^ (c >>> 8);
  return ~c;
}
