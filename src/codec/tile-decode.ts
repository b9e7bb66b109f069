/**
 * Decode one tile payload into values of the field's dtype. This is the only
 * decoder; the encoder runs it on every payload it writes.
 */
import { FormatCode, FormatError } from '../errors.js';
import { ByteReader } from '../format/bytes.js';
import { printable } from '../format/schema.js';
import type { Dtype, FloatArray } from '../types.js';
import { reconstructKernel } from '../wasm/lowrank.js';
import { applyClasses, Cell } from './mask.js';
import { CENTRE_FORM_SHIFT, CentreForm, Flag, KNOWN_FLAGS, KNOWN_RESIDUAL_BITS, Method, NUMBER_BYTES, RESIDUAL_SYMBOLS, STEP_FORM_SHIFT, StepForm, VARINT_BYTES } from './payload.js';
import { addLayer } from './layer.js';
import { lowRank, MAX_PREDICTOR, reconstruct, unpredict } from './reconstruct.js';
import { CodeStreamError, decodeClasses, decodeInts } from './code-decode.js';
import { decodeSymbols } from './code-symbols.js';
import { MAX_INT, readSection } from './section.js';
import { stepValue } from './steps.js';

/** What a decoder needs to know about a tile besides its payload. */
export interface TileContext {
  /** Rows and columns of this tile (edge tiles are smaller). */
  m: number;
  n: number;
  dtype: Dtype;
  /** The field's fill value as words of its dtype, or null. */
  fill: Uint32Array | null;
  /** For messages: e.g. "field 'sst' tile 12". */
  where: string;
  /** File offset of the payload, for messages; offsets are counted within the payload when absent. */
  offset?: number;
  /** Largest rank accepted (a reader limit); default: any rank up to min(m, n). */
  maxRank?: number;
  /**
   * The field's residual step (`fieldStep` of its tolerance), for payloads
   * with flag FieldStep; 0 or absent: the field has none, and the flag is refused.
   */
  fieldStep?: number;
  /**
   * Decode a payload prefix holding only the first `groups` factor groups
   * (progressive reading, spec/FORMAT.md "Progressive reading"): the bytes end
   * after that group, and residual and exceptions are not applied.
   */
  groups?: number;
  /** Working buffers to reuse (see {@link DecodeScratch}); fresh ones for this tile when absent. */
  scratch?: DecodeScratch;
  /**
   * The field layer's term for each of the tile's m x n cells (see layerTerm in
   * layer.ts), for a field with a layer; added to a LowRank payload's low-rank
   * part and centre before the residual. An Exact payload ignores it.
   */
  layer?: Float64Array | null;
  /**
   * The file's required flag bit 2 (symbols): true when it is set, and a
   * residual may then be coded with the symbol coder (residual byte bit 3);
   * otherwise such a residual is refused.
   */
  symbols?: boolean;
}

/**
 * The working buffers of tile decoding (the low-rank sums and the residual
 * codes, 12 bytes a cell), kept by a reader from tile to tile so that a
 * large tile does not cost fresh zeroed memory each time. decodeTile is
 * synchronous and uses them only while it runs, so the reads of one archive
 * can share one; the values it returns are always its own.
 */
export class DecodeScratch {
  private sums = new Float64Array(0);
  private codes = new Int32Array(0);
  /** Room for `cells` low-rank sums (contents left from earlier tiles). */
  sumsFor(cells: number): Float64Array {
    if (this.sums.length < cells) this.sums = new Float64Array(cells);
    return this.sums.subarray(0, cells);
  }
  /** The last view codesFor gave (a read of one tile asks for the same one every time). */
  private codesView = new Int32Array(0);
  /** Room for `cells` residual codes (contents left from earlier tiles). */
  codesFor(cells: number): Int32Array {
    if (this.codesView.length === cells) return this.codesView;
    if (this.codes.length < cells) this.codes = new Int32Array(cells);
    this.codesView = this.codes.subarray(0, cells);
    return this.codesView;
  }
}

function malformed(where: string, what: string): FormatError {
  return new FormatError(FormatCode.Malformed, `${where}: ${what}`);
}

/** Decode a payload; throws {@link FormatError} on anything malformed. */
export function decodeTile(payload: Uint8Array, given: TileContext): FloatArray {
  // The caller's label may hold a field name from the file: keep messages on one line.
  const ctx = { ...given, where: printable(given.where) };
  const r = ctx.offset === undefined ? new ByteReader(payload, ctx.where, 0, 'payload offset') : new ByteReader(payload, ctx.where, ctx.offset, 'file offset');
  const method = r.u8('method');
  let out: FloatArray;
  if (method === Method.Exact) out = decodeExact(r, ctx);
  else if (method === Method.LowRank) out = decodeLowRank(r, ctx);
  else throw new FormatError(FormatCode.Unsupported, `${ctx.where}: unknown payload method ${method} at ${r.unit} ${r.base} (this reader knows 0 and 1)`);
  if (r.remaining !== 0) throw malformed(ctx.where, `${r.remaining} unexpected bytes after the payload, from ${r.unit} ${r.offset}`);
  return out;
}

/** "cell 17 (row 2, column 3)" for a cell of an m x n tile. */
function cellName(c: number, n: number): string {
  return `cell ${c} (row ${Math.floor(c / n)}, column ${c % n})`;
}

function decodeExact(r: ByteReader, ctx: TileContext): FloatArray {
  const flags = r.u8('flags');
  if (flags !== 0) throw malformed(ctx.where, `exact payload has unknown flags 0x${flags.toString(16)} at ${r.unit} ${r.offset - 1}`);
  const width = ctx.dtype === 'f32' ? 4 : 8;
  const cells = ctx.m * ctx.n;
  const planes = readSection(r, 'exact values', cells * width);
  const out = ctx.dtype === 'f32' ? new Float32Array(cells) : new Float64Array(cells);
  const bytes = new Uint8Array(out.buffer);
  // Byte planes back to interleaved little-endian values.
  for (let b = 0; b < width; b++) {
    const plane = b * cells;
    for (let c = 0; c < cells; c++) bytes[c * width + b] = planes[plane + c];
  }
  return out;
}

/** Rank 0's factors and a payload's missing exceptions: empty arrays, never written, so one of each serves every tile. */
const NO_FACTORS = { l: new Float64Array(0), w: new Float64Array(0), rank: 0 };
const NO_EXCEPTIONS = { cells: new Uint32Array(0), values: new Uint8Array(0) };

function decodeLowRank(r: ByteReader, ctx: TileContext): FloatArray {
  const { m, n, where } = ctx;
  const cells = m * n;
  let flags = r.u8('flags');
  if (flags & ~KNOWN_FLAGS) {
    throw new FormatError(FormatCode.Unsupported, `${where}: unknown payload flags 0x${flags.toString(16)} at ${r.unit} ${r.offset - 1} (this reader knows 0x${KNOWN_FLAGS.toString(16)})`);
  }
  const rankAt = r.offset;
  const rank = r.varint('rank', VARINT_BYTES);
  if (rank > Math.min(m, n)) throw malformed(where, `rank ${rank} at ${r.unit} ${rankAt} exceeds the tile's ${m}x${n}`);
  if (ctx.maxRank !== undefined && rank > ctx.maxRank) {
    throw new FormatError(FormatCode.Limit, `${where}: rank ${rank} exceeds the reader limit of ${ctx.maxRank}`);
  }
  const center = readCentre(r, ctx, (flags >> CENTRE_FORM_SHIFT) & 3);
  if (flags & Flag.FactorDelta && rank === 0) throw malformed(where, 'factor difference flag on a payload of rank 0');

  const mask = flags & Flag.Mask ? readMask(r, ctx) : null;
  const factors = rank > 0 ? readFactors(r, ctx, rank, (flags & Flag.FactorDelta) !== 0) : NO_FACTORS;
  if (ctx.groups !== undefined) {
    // A prefix ends after its last factor group: no residual, no exceptions.
    if (r.remaining !== 0) throw malformed(where, `${r.remaining} unexpected bytes after the prefix's factor groups, from ${r.unit} ${r.offset}`);
    flags &= ~(Flag.Residual | Flag.Exceptions);
  }
  // Every section is read and checked before the arithmetic, so a malformed late part costs no multiply-adds.
  const codes = mask?.codes ?? null;
  const residual = flags & Flag.Residual ? readResidual(r, ctx, codes) : { step: 0, q: null };
  const exceptions = flags & Flag.Exceptions ? readExceptions(r, ctx, codes) : NO_EXCEPTIONS;
  if (r.remaining !== 0) throw malformed(where, `${r.remaining} unexpected bytes after the payload, from ${r.unit} ${r.offset}`);

  const out = ctx.dtype === 'f32' ? new Float32Array(cells) : new Float64Array(cells);
  // Without a field layer, the WebAssembly kernels do lowRank and reconstruct in one go, band by band (the same bits).
  let finite = ctx.layer ? null : reconstructKernel(factors.l, factors.w, m, n, factors.rank, center, residual.q, residual.step, out);
  if (finite === null) {
    // lowRank sets every cell of acc, so left-over contents do not matter.
    const acc = ctx.scratch ? ctx.scratch.sumsFor(cells) : new Float64Array(cells);
    lowRank(factors.l, factors.w, m, n, factors.rank, center, acc);
    if (ctx.layer) addLayer(acc, ctx.layer, cells);
    finite = reconstruct(acc, residual.q, residual.step, out);
  }
  applyExceptions(out, exceptions, ctx);
  // A valid cell must decode to a finite value; anything else is a damaged or hostile payload. With every
  // reconstructed value finite, only the exceptions' values are left to look at (in cell order, as below).
  if (finite) checkFinite(out, exceptions.cells, null, ctx);
  else checkFinite(out, null, codes, ctx);
  if (mask !== null) applyClasses(out, mask.codes, mask.rawNaN, ctx.fill);
  return out;
}

/** Refuse the first valid cell (of `cells`, or of all when null; skipping missing cells of `codes`) whose value is not finite. */
function checkFinite(out: FloatArray, cells: Uint32Array | null, codes: Uint8Array | null, ctx: TileContext): void {
  const count = cells === null ? out.length : cells.length;
  for (let k = 0; k < count; k++) {
    const c = cells === null ? k : cells[k];
    if ((codes === null || codes[c] === Cell.Valid) && !Number.isFinite(out[c])) throw malformed(ctx.where, `valid ${cellName(c, ctx.n)} decodes to ${out[c]}, not a finite value`);
  }
}

/** Read and check the mask section: the cells' classes and the raw NaN bits of class-5 cells. */
function readMask(r: ByteReader, ctx: TileContext): { codes: Uint8Array; rawNaN: Uint8Array } {
  const { m, n, where } = ctx;
  const cells = m * n;
  const width = ctx.dtype === 'f32' ? 4 : 8;
  const at = r.offset;
  const codedLength = r.length('mask length');
  const rawLength = r.length('mask raw NaN length');
  const coded = r.bytesView(codedLength, 'mask classes');
  const codes = new Uint8Array(cells);
  try {
    decodeClasses(coded, m, n, codes);
  } catch (e) {
    if (!(e instanceof CodeStreamError)) throw e;
    throw malformed(where, `mask (coded stream at ${r.unit} ${at}, ${codedLength} bytes): ${e.message}`);
  }
  let raws = 0;
  let special = 0;
  for (let c = 0; c < cells; c++) {
    if (codes[c] !== Cell.Valid) special++;
    if (codes[c] === Cell.RawNaN) raws++;
    if (codes[c] === Cell.Fill && ctx.fill === null) throw malformed(where, `mask ${cellName(c, n)} is a fill cell but the field has no fill value`);
  }
  if (special === 0) throw malformed(where, `mask at ${r.unit} ${at} marks no cell missing`);
  if (rawLength !== raws * width) throw malformed(where, `mask holds ${rawLength} bytes of raw NaN bits, its ${raws} raw NaN cells need ${raws * width}`);
  const rawNaN = r.bytesView(rawLength, 'mask raw NaN bits');
  const view = new DataView(rawNaN.buffer, rawNaN.byteOffset, rawNaN.byteLength);
  for (let k = 0; k < raws; k++) {
    const v = width === 4 ? view.getFloat32(4 * k, true) : view.getFloat64(8 * k, true);
    if (v === v) throw malformed(where, `raw NaN ${k} of the mask holds the number ${v}, not a NaN`);
  }
  return { codes, rawNaN };
}

/** The field's step, for the forms that name it; refused in a field that has none. */
function fieldStepOf(ctx: TileContext, what: string): number {
  const s = ctx.fieldStep ?? 0;
  if (!(s > 0)) throw malformed(ctx.where, `${what} in a field whose tolerance gives no field step`);
  return s;
}

/** Read and check the centre in its form (flags bits 5-6): binary32, binary64 or an integer; form 3 is refused. */
function readCentre(r: ByteReader, ctx: TileContext, form: number): number {
  const at = r.offset;
  let center: number;
  if (form === CentreForm.Binary32) center = r.f32('centre');
  else if (form === CentreForm.Binary64) center = r.f64('centre');
  else if (form === CentreForm.Integer) center = r.svarint('integer centre', NUMBER_BYTES);
  else throw malformed(ctx.where, 'centre form 3 (flags bits 5-6) is not defined');
  if (!Number.isFinite(center)) throw malformed(ctx.where, `centre ${center} at ${r.unit} ${at} is not finite`);
  return center;
}

/** Read and check the residual: its residual byte (predictor, step form), step and codes, the prediction undone. */
function readResidual(r: ByteReader, ctx: TileContext, codes: Uint8Array | null): { step: number; q: Int32Array } {
  const { m, n, where } = ctx;
  const byteAt = r.offset;
  const head = r.u8('residual byte');
  if (head & ~KNOWN_RESIDUAL_BITS) throw malformed(where, `residual byte 0x${head.toString(16)} at ${r.unit} ${byteAt} has bits outside 0x${KNOWN_RESIDUAL_BITS.toString(16)} set`);
  const predictor = head & 7;
  if (predictor > MAX_PREDICTOR) throw malformed(where, `residual predictor ${predictor} at ${r.unit} ${byteAt} is not one of 0..${MAX_PREDICTOR}`);
  const form = (head >> STEP_FORM_SHIFT) & 3;
  const stepAt = r.offset;
  let step: number;
  if (form === StepForm.Field) step = fieldStepOf(ctx, 'a residual with the field step');
  else if (form === StepForm.Binary32) step = r.f32('residual step');
  else if (form === StepForm.Binary64) step = r.f64('residual step');
  else step = r.varint('integer residual step', NUMBER_BYTES);
  if (!(step > 0 && Number.isFinite(step))) throw malformed(where, `residual step ${step} at ${r.unit} ${stepAt} is not a positive finite number`);
  const symbols = (head & RESIDUAL_SYMBOLS) !== 0;
  if (symbols && ctx.symbols !== true) throw malformed(where, `residual byte 0x${head.toString(16)} at ${r.unit} ${byteAt} names the symbol coder (bit 3), but the file's required flag bit 2 (symbols) is not set`);
  // Both decoders set every cell of q (missing cells to 0), so left-over contents do not matter.
  const q = ctx.scratch ? ctx.scratch.codesFor(m * n) : new Int32Array(m * n);
  readCoded(r, 'residual', m, n, codes, q, where, symbols ? decodeSymbols : decodeInts);
  if (!unpredict(q, m, n, MAX_INT, predictor)) throw malformed(where, 'a residual code exceeds 2^30 after prediction');
  return { step, q };
}

/** Read and check the exceptions section: valid cells in increasing order, and their exact values. */
function readExceptions(r: ByteReader, ctx: TileContext, codes: Uint8Array | null): { cells: Uint32Array; values: Uint8Array } {
  const { m, n, where } = ctx;
  const cells = m * n;
  const width = ctx.dtype === 'f32' ? 4 : 8;
  const sec = readSection(r, 'exceptions', 4 + cells * (4 + width), false);
  const er = new ByteReader(sec, `${where} exceptions`, 0, 'raw offset');
  const count = er.u32('exception count');
  if (count > cells) throw malformed(where, `${count} exceptions in a tile of ${cells} cells`);
  const at = new Uint32Array(count);
  let prev = -1;
  for (let e = 0; e < count; e++) {
    const c = er.u32('exception cell');
    if (c <= prev || c >= cells) throw malformed(where, `exception ${e} names cell ${c}: out of order or outside the tile of ${cells} cells`);
    if (codes !== null && codes[c] !== Cell.Valid) throw malformed(where, `exception ${e} at missing ${cellName(c, n)}`);
    at[e] = c;
    prev = c;
  }
  const values = er.bytesView(count * width, 'exception values');
  if (er.remaining !== 0) throw malformed(where, `exception section has ${er.remaining} bytes after its values`);
  return { cells: at, values };
}

/** Put the exceptions' exact values in place; an exception holds an original valid value, which is never the fill value. */
function applyExceptions(out: FloatArray, ex: { cells: Uint32Array; values: Uint8Array }, ctx: TileContext): void {
  const width = ctx.dtype === 'f32' ? 4 : 8;
  const bytes = new Uint8Array(out.buffer);
  const words = new Uint32Array(out.buffer);
  for (let e = 0; e < ex.cells.length; e++) {
    const c = ex.cells[e];
    bytes.set(ex.values.subarray(e * width, e * width + width), c * width);
    if (ctx.fill !== null && words[c * (width / 4)] === ctx.fill[0] && (width === 4 || words[2 * c + 1] === ctx.fill[1])) {
      throw malformed(ctx.where, `exception ${e} at ${cellName(c, ctx.n)} holds the fill value`);
    }
  }
}

/** Read the factor groups into l (m x r) and w (r x n). */
function readFactors(r: ByteReader, ctx: TileContext, declared: number, delta: boolean): { l: Float64Array; w: Float64Array; rank: number } {
  const { m, n, where } = ctx;
  const groups = r.u8('group count');
  if (groups === 0) throw malformed(where, `rank ${declared} but no factor groups (group count at ${r.unit} ${r.offset - 1})`);
  const sizes: number[] = [];
  let total = 0;
  for (let g = 0; g < groups; g++) {
    const s = r.varint('group size', VARINT_BYTES);
    if (s === 0) throw malformed(where, `factor group ${g} is empty`);
    sizes.push(s);
    total += s;
  }
  if (total !== declared) throw malformed(where, `factor groups hold ${total} ranks, the payload declares ${declared}`);
  // A prefix read uses the first ctx.groups groups only.
  const used = ctx.groups === undefined ? groups : ctx.groups;
  if (!Number.isInteger(used) || used < 0 || used > groups) throw malformed(where, `a prefix of ${used} factor groups asked of a payload with ${groups}`);
  let rank = 0;
  for (let g = 0; g < used; g++) rank += sizes[g];
  const l = new Float64Array(m * rank);
  const w = new Float64Array(rank * n);
  let k0 = 0;
  // One step code for the right factor; the left ones as differences from the previous rank's (from 0 for rank 0).
  const dw = stepValue(r.svarint('right step code', VARINT_BYTES), where);
  let cu = 0;
  for (let g = 0; g < used; g++) {
    const size = sizes[g];
    const du: number[] = [];
    for (let k = 0; k < size; k++) {
      cu += r.svarint('left step code', VARINT_BYTES);
      du.push(stepValue(cu, where));
    }
    const row = new Int32Array(size * (m + n));
    readCoded(r, `factor group ${g}`, 1, row.length, null, row, where);
    if (delta && !undoDifferences(row, m, n)) throw malformed(where, `factor group ${g}: a factor code exceeds 2^30 after summing its differences`);
    let at = 0;
    for (let k = 0; k < size; k++) {
      const rk = k0 + k;
      for (let i = 0; i < m; i++) l[i * rank + rk] = row[at + i] * du[k];
      at += m;
      for (let j = 0; j < n; j++) w[rk * n + j] = row[at + j] * dw;
      at += n;
    }
    k0 += size;
  }
  return { l, w, rank };
}

/**
 * Read a coded integer stream (varint length, then the stream) of an m x n
 * grid into `out`, with the binary coder's decoder unless `decode` names the
 * symbol coder's. The length is checked against what is left of the
 * payload before anything is decoded.
 */
function readCoded(r: ByteReader, what: string, m: number, n: number, codes: Uint8Array | null, out: Int32Array, where: string, decode = decodeInts): void {
  const at = r.offset;
  const length = r.length(`${what} length`);
  const bytes = r.bytesView(length, `${what} stream`);
  try {
    decode(bytes, m, n, codes, out);
  } catch (e) {
    if (!(e instanceof CodeStreamError)) throw e;
    throw malformed(where, `${what} (coded stream at ${r.unit} ${at}, ${length} bytes): ${e.message}`);
  }
}

/** Running sums along each factor vector of a group row (left m, right n, left m, ...), in place; false if one leaves +-2^30. */
function undoDifferences(row: Int32Array, m: number, n: number): boolean {
  let at = 0;
  while (at < row.length) {
    for (const len of [m, n]) {
      let acc = 0;
      for (let i = at; i < at + len; i++) {
        acc += row[i];
        if (acc > MAX_INT || acc < -MAX_INT) return false;
        row[i] = acc;
      }
      at += len;
    }
  }
  return true;
}
