/**
 * Reading a layered field with the core's own decoding (decodeTile with the
 * layer's term), for the write side's tests while the library's reader does
 * not add the term yet: the factor fields are read as ordinary fields, each
 * tile of the layered field is decoded with its term and checked against
 * the value CRC-32 the encoder recorded.
 */
import { open } from '../../src/archive.js';
import { fillWords } from '../../src/codec/mask.js';
import { tileLayerTerm } from '../../src/codec/layer.js';
import { fieldStep } from '../../src/codec/payload.js';
import { decodeTile } from '../../src/codec/tile-decode.js';
import { crc32 } from '../../src/format/crc32.js';
import { copyBlock, tileCount, tileOrigin, tileShape } from '../../src/geometry.js';
import type { FloatArray } from '../../src/types.js';

/** The whole stacked field `name` of archive `bytes`, decoded tile by tile with its layer's term; throws on a value CRC mismatch. */
export async function readLayered(bytes: Uint8Array, name: string): Promise<{ values: FloatArray; rank: number }> {
  const a = await open(bytes);
  try {
    const h = a.header.fields.find((f) => f.name === name);
    if (!h) throw new Error(`no field ${name}`);
    const layer = h.layer;
    const factors = layer
      ? { rank: layer.rank, left: (await a.read(a.header.fields[layer.left].name)).values as Float64Array, right: (await a.read(a.header.fields[layer.right].name)).values as Float64Array }
      : null;
    const rows = (h.slices ?? 1) * h.shape[0];
    const cols = h.shape[1];
    const out = h.dtype === 'f32' ? new Float32Array(rows * cols) : new Float64Array(rows * cols);
    for (let t = 0; t < tileCount(h); t++) {
      const e = await a.tileEntry(name, t);
      const [m, n] = tileShape(h, t);
      const payload = bytes.subarray(e.offset, e.offset + e.length);
      const term = factors ? tileLayerTerm(factors, h, t, m, n) : null;
      const v = decodeTile(payload, { m, n, dtype: h.dtype, fill: fillWords(h.fill, h.dtype), where: `tile ${t}`, fieldStep: fieldStep(h.bound.tolerance), layer: term });
      if (crc32(new Uint8Array(v.buffer, v.byteOffset, v.byteLength)) !== e.value_crc) throw new Error(`tile ${t}: value CRC-32 mismatch`);
      const { s, i0, j0 } = tileOrigin(h, t);
      copyBlock(v, n, 0, 0, m, n, out, cols, s * h.shape[0] + i0, j0);
    }
    return { values: out, rank: layer?.rank ?? 0 };
  } finally {
    await a.close();
  }
}
