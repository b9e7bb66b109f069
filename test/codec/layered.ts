/**
 * Reading a layered field two ways that must agree bit for bit: the core's
 * own decoding (decodeTile with the layer's term of spec/FORMAT.md 6.2.2,
 * the factor fields read as ordinary fields, each tile checked against the
 * value CRC-32 the encoder recorded), and the library's reader (open() and
 * read(), whole and by windows of a few tiles); `check` must pass too.
 */
import { open } from '../../src/archive.js';
import { fillWords } from '../../src/codec/mask.js';
import { tileLayerTerm } from '../../src/codec/layer.js';
import { fieldStep } from '../../src/codec/payload.js';
import { decodeTile } from '../../src/codec/tile-decode.js';
import { crc32 } from '../../src/format/crc32.js';
import { copyBlock, tileCount, tileOrigin, tileShape } from '../../src/geometry.js';
import type { FloatArray } from '../../src/types.js';
import { symbolsFlag } from '../format/layered.js';

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
      const v = decodeTile(payload, { m, n, dtype: h.dtype, fill: fillWords(h.fill, h.dtype), where: `tile ${t}`, fieldStep: fieldStep(h.bound.tolerance), layer: term, symbols: symbolsFlag(bytes) });
      if (crc32(new Uint8Array(v.buffer, v.byteOffset, v.byteLength)) !== e.value_crc) throw new Error(`tile ${t}: value CRC-32 mismatch`);
      const { s, i0, j0 } = tileOrigin(h, t);
      copyBlock(v, n, 0, 0, m, n, out, cols, s * h.shape[0] + i0, j0);
    }
    // The library's reader adds the term itself: the whole field and windows of it give the same bits.
    const whole = (await a.read(name)).values;
    if (whole.length !== out.length || !whole.every((v, c) => Object.is(v, out[c]))) throw new Error(`${name}: the library's read differs from the core's decode`);
    const r1 = Math.min(rows, h.tile[0] + 3);
    const c0 = Math.min(cols - 1, Math.floor(h.tile[1] / 2));
    const win = (await a.read(name, { rows: [1 % rows, r1], cols: [c0, cols] })).values;
    for (let i = 1 % rows, k = 0; i < r1; i++) for (let j = c0; j < cols; j++, k++) if (!Object.is(win[k], out[i * cols + j])) throw new Error(`${name}: a window differs from the whole read at row ${i}, column ${j}`);
    const report = await a.check();
    if (!report.ok) throw new Error(`${name}: check failed: ${JSON.stringify(report.failures[0])}`);
    return { values: out, rank: layer?.rank ?? 0 };
  } finally {
    await a.close();
  }
}
