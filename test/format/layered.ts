/**
 * Layered archives made by hand for the read-side tests, the fuzz corpus and
 * the browser test: a field with a field layer (spec/FORMAT.md 6.2.2) and its
 * two f64 factor fields, every tile payload made by the library's own tile
 * encoder (prepareTile + encodePointwise), the main field's from its values
 * minus the layer's term computed from the factor values as a reader decodes
 * them, and written with the container writer (header element 8, required
 * flag bit 1). The factors are the caller's: a layer need not be an optimal
 * truncated SVD to be valid, only to pay.
 */
import { tileLayerTerm } from '../../src/codec/layer.js';
import { classify, fillWords } from '../../src/codec/mask.js';
import { measure, measurePrefixes } from '../../src/codec/measure.js';
import { prepareTile } from '../../src/codec/prepare.js';
import { ErrorTally } from '../../src/codec/tally.js';
import { encodePointwise } from '../../src/codec/pointwise-search.js';
import { decodeTile } from '../../src/codec/tile-decode.js';
import { fieldStep } from '../../src/codec/payload.js';
import { ContainerWriter, FLAG_LAYER, FLAG_SLICES, FLAG_SYMBOLS, MemorySink } from '../../src/format/container.js';
import { usesSymbolCoder } from '../../src/codec/payload.js';
import { type FieldHeader, type FieldIndex, pageCount, pageTiles } from '../../src/format/schema.js';
import { copyBlock, cutTile, tileCount, tileOrigin, tileShape } from '../../src/geometry.js';
import type { FloatArray } from '../../src/types.js';

/** What {@link layeredArchive} writes. */
export interface LayeredSpec {
  /** The field's values, row-major over its stacked (slices x rows) x cols matrix. */
  values: FloatArray;
  /** [rows, cols] of one slice. */
  shape: [number, number];
  slices?: number;
  tile: [number, number];
  /** The absolute bound of the main field. */
  tol: number;
  fill?: number | null;
  /** Layer rank and factors: left `slices*rows x rank`, right `cols x rank`, row-major. */
  rank: number;
  left: Float64Array;
  right: Float64Array;
  /** Tile shape of both factor fields (default [8, rank]) and their absolute bound (default 1e-9). */
  factorTile?: [number, number];
  factorTol?: number;
  /** Store the main field's factors in doubling groups with recorded prefixes (spec/FORMAT.md 18). */
  progressive?: boolean;
  /** Where the factor fields go in the field list (default 'after' the main field). */
  factors?: 'before' | 'after';
  /** Names (default 'field', 'field.left', 'field.right'). */
  name?: string;
  /** Page shape of every field (default [8, 8]). */
  page?: [number, number];
  /**
   * A factor value to store after the main field was encoded with the clean
   * factors (hostile archives: a reader must refuse a factor value that is
   * not finite, spec/FORMAT.md 6.2.2).
   */
  poison?: { side: 'left' | 'right'; cell: number; value: number };
  /** Append a copy of the main field without a layer, named `<name>.twin` (hostile archives give it one). */
  twin?: boolean;
}

/** The archive and what a reader must get from it. */
export interface Layered {
  bytes: Uint8Array;
  /** The factor fields' values as a reader decodes them. */
  left: Float64Array;
  right: Float64Array;
  /** The main field's values as the encoder decoded them (through the layer), in the field's dtype. */
  decoded: FloatArray;
  /** Positions of the main field and of the two factor fields in the header's list. */
  at: { main: number; left: number; right: number };
}

interface Encoded {
  header: FieldHeader;
  payloads: Uint8Array[];
  index: Omit<FieldIndex, 'offset' | 'length' | 'crc'>;
  decoded: FloatArray;
}

/** Encode every tile of a field with an absolute bound, each with the term `termOf` gives (or none). */
function encodeField(values: FloatArray, header: FieldHeader, termOf: (t: number, m: number, n: number) => Float64Array | null, progressive: boolean): Encoded {
  const fill = fillWords(header.fill, header.dtype);
  const tol = header.bound.tolerance;
  const count = tileCount(header);
  const decoded = header.dtype === 'f32' ? new Float32Array(values.length) : new Float64Array(values.length);
  const index = { method: [] as number[], rank: [] as number[], valid: [] as number[], max_err: [] as number[], rmse: [] as number[], value_crc: [] as number[], prefix: [] as number[][], summary: { valid: 0, max_err: 0, rmse: 0 } };
  const payloads: Uint8Array[] = [];
  const total = new ErrorTally();
  for (let t = 0; t < count; t++) {
    const [m, n] = tileShape(header, t);
    const term = termOf(t, m, n);
    const prepared = prepareTile(cutTile(values, header, t), m, n, header.dtype, fill, tol, progressive ? 'doubling' : 'one', term);
    const payload = encodePointwise(prepared, tol);
    const { stats, tally } = measure(payload, prepared, fill);
    // Internal check of the helper: the library's encoder met the bound through the layer.
    if (!(stats.maxErr <= tol)) throw new Error(`layered test archive: tile ${t} misses its bound (${stats.maxErr} > ${tol})`);
    payloads.push(payload);
    index.method.push(stats.method);
    index.rank.push(stats.rank);
    index.valid.push(stats.valid);
    index.max_err.push(stats.maxErr);
    index.rmse.push(stats.rmse);
    index.value_crc.push(stats.valueCrc);
    index.prefix.push(progressive ? measurePrefixes(payload, prepared, fill) : []);
    total.merge(tally);
    index.summary.valid += stats.valid;
    const out = decodeTile(payload, { m, n, dtype: header.dtype, fill, where: 'layered test archive', fieldStep: fieldStep(tol), layer: term, symbols: true });
    const { s, i0, j0 } = tileOrigin(header, t);
    copyBlock(out, n, 0, 0, m, n, decoded, header.shape[1], s * header.shape[0] + i0, j0);
  }
  index.summary.max_err = total.max;
  index.summary.rmse = total.rmse;
  if (!progressive) delete (index as Partial<typeof index>).prefix;
  return { header, payloads, index, decoded };
}

/** Whether an archive sets required flag bit 2 (symbols): its prologue's u16 at byte 10 (spec/FORMAT.md 3.1, 4). */
export function symbolsFlag(archive: Uint8Array): boolean {
  return (new DataView(archive.buffer, archive.byteOffset, archive.byteLength).getUint16(10, true) & FLAG_SYMBOLS) !== 0;
}

/** A plain header of a field with an absolute bound. */
function headerOf(name: string, dtype: 'f32' | 'f64', shape: [number, number], tile: [number, number], tol: number, values: FloatArray, fill: number | null, slices = 1): FieldHeader {
  const classes = classify(values, fillWords(fill, dtype));
  let lo = Infinity;
  let hi = -Infinity;
  classes.codes.forEach((c, i) => {
    if (c !== 0) return;
    lo = Math.min(lo, values[i]);
    hi = Math.max(hi, values[i]);
  });
  const h: FieldHeader = { name, dtype, shape, tile, bound: { mode: 'abs', value: tol, tolerance: tol, range: lo <= hi ? [lo, hi] : null }, fill, attrs: {} };
  if (slices > 1) h.slices = slices;
  return h;
}

/** Write a layered archive (see the module comment). */
export function layeredArchive(o: LayeredSpec): Layered {
  const slices = o.slices ?? 1;
  const stacked = slices * o.shape[0];
  const cols = o.shape[1];
  const k = o.rank;
  const name = o.name ?? 'field';
  const ft = o.factorTile ?? [8, k];
  const ftol = o.factorTol ?? 1e-9;
  const dtype = o.values instanceof Float32Array ? 'f32' : 'f64';
  const left = encodeField(o.left, headerOf(`${name}.left`, 'f64', [stacked, k], ft, ftol, o.left, null), () => null, false);
  const right = encodeField(o.right, headerOf(`${name}.right`, 'f64', [cols, k], ft, ftol, o.right, null), () => null, false);
  const layer = { rank: k, left: left.decoded as Float64Array, right: right.decoded as Float64Array };
  const mainHeader = headerOf(name, dtype, o.shape, o.tile, o.tol, o.values, o.fill ?? null, slices);
  const main = encodeField(o.values, mainHeader, (t, m, n) => tileLayerTerm(layer, mainHeader, t, m, n), o.progressive === true);
  if (o.poison) {
    const { side, cell, value } = o.poison;
    const bad = (side === 'left' ? o.left : o.right).slice();
    bad[cell] = value;
    const f = side === 'left' ? left : right;
    Object.assign(f, encodeField(bad, f.header, () => null, false));
  }
  const order = o.factors === 'before' ? [left, right, main] : [main, left, right];
  if (o.twin) order.push({ ...main, header: { ...main.header, name: `${name}.twin` } });
  const at = { main: order.indexOf(main), left: order.indexOf(left), right: order.indexOf(right) };
  main.header.layer = { rank: k, left: at.left, right: at.right };
  const page = o.page ?? [8, 8];
  const sink = new MemorySink();
  // Required flag bit 2 when a residual uses the symbol coder (spec/FORMAT.md 4), as the library's writer sets it.
  const symbols = order.some((f) => f.payloads.some(usesSymbolCoder)) ? FLAG_SYMBOLS : 0;
  const w = new ContainerWriter(sink, FLAG_LAYER | (slices > 1 ? FLAG_SLICES : 0) | symbols);
  const fields: FieldIndex[] = order.map((f) => {
    const offset: number[] = [];
    const length: number[] = [];
    const crc: number[] = [];
    for (let p = 0; p < pageCount(f.header, page); p++) {
      for (const t of pageTiles(f.header, page, p)) {
        const ref = w.addPayload(f.payloads[t]);
        offset[t] = ref.offset;
        length[t] = ref.length;
        crc[t] = ref.crc;
      }
    }
    return { ...f.index, offset, length, crc };
  });
  w.finish({ format: 'rankfield', version: 8, writer: 'layered test archive', attrs: {}, fields: order.map((f) => f.header) }, { fields }, order.map(() => page));
  return { bytes: sink.bytes(), left: layer.left, right: layer.right, decoded: main.decoded, at };
}

/** Separable smooth factors for tests: left `rows x k`, right `cols x k` (cosines of several frequencies). */
export function smoothFactors(rows: number, cols: number, k: number, seed = 1): { left: Float64Array; right: Float64Array } {
  const left = new Float64Array(rows * k);
  const right = new Float64Array(cols * k);
  for (let K = 0; K < k; K++) {
    for (let i = 0; i < rows; i++) left[i * k + K] = Math.cos(((K + 1) * (i + seed)) / 7) / (K + 1);
    for (let j = 0; j < cols; j++) right[j * k + K] = 3 * Math.sin(((K + 2) * (j + seed)) / 11);
  }
  return { left, right };
}
