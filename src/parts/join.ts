/**
 * Joining the parts of a run into one archive: the parts are checked to
 * belong together (one run, one plan, every part once), then their tile
 * payloads are copied, each checked against its CRC-32, in tile order into
 * the archive writer, which lays them out page by page and builds the index
 * pages, the directory, the header and the tail itself. No tile is decoded
 * or encoded again; the field's RMSE is the parts' per-tile error tallies
 * merged in tile order, as a single pack merges them, so the joined archive
 * is byte-identical to the single pack of the same input and plan.
 */
import { open, type Archive } from '../archive.js';
import type { EncodedTile, FieldResult, FieldSpec } from '../codec/field.js';
import { ErrorTally } from '../codec/tally.js';
import { FormatCode, FormatError, InputCode, InputError } from '../errors.js';
import type { Sink } from '../format/container.js';
import { crc32 } from '../format/crc32.js';
import { pageGrid, pageTiles, type Attrs, type FieldHeader, type FieldIndex, type Limits } from '../format/schema.js';
import type { ByteSource } from '../io/source.js';
import { ArchiveBuilder } from '../pack.js';
import { partRange } from './plan.js';
import { PART_KEYS } from './part.js';

/** One part as join reads it. */
interface Part {
  label: string;
  src: ByteSource;
  archive: Archive;
  run: string;
  plan: string;
  k: number;
  n: number;
  rows: [number, number, number];
  header: FieldHeader;
  page: [number, number];
  tally: number[];
  nd: { ndShape?: number[]; dims?: string[]; layout?: string };
}

function intPair(v: unknown, n: number): number[] | null {
  return Array.isArray(v) && v.length === n && v.every((x) => typeof x === 'number' && Number.isSafeInteger(x) && x >= 0) ? (v as number[]) : null;
}

/** Read and check the attributes of one part. */
async function readPart(src: ByteSource, limits?: Partial<Limits>): Promise<Part> {
  const label = src.label;
  const archive = await open(src, limits ? { limits } : {});
  const a: Attrs = archive.header.attrs;
  const run = a[PART_KEYS.run];
  const plan = a[PART_KEYS.plan];
  const kn = intPair(a[PART_KEYS.part], 2);
  if (typeof run !== 'string' || typeof plan !== 'string' || kn === null) {
    throw new InputError(InputCode.Option, `${label}: not a part of a run (it has no ${PART_KEYS.part}, ${PART_KEYS.run} and ${PART_KEYS.plan} attributes); join takes archives written by 'pack --plan PLAN --part K/N'`);
  }
  const bad = (why: string): never => {
    throw new FormatError(FormatCode.Malformed, `${label}: part ${kn[0]}/${kn[1]} of run '${run}': ${why}`);
  };
  // Parts never carry a field layer (spec/FORMAT.md 6.2.2): its factors span every part's rows.
  const layered = archive.header.fields.find((f) => f.layer !== undefined);
  if (layered) bad(`field '${layered.name}' has a field layer, which a part never has: the parts of a run are packed without one`);
  if (archive.header.fields.length !== 1) bad(`it holds ${archive.header.fields.length} fields, a part holds one`);
  const rows = intPair(a[PART_KEYS.rows], 3) ?? bad(`${PART_KEYS.rows} is not [first row, end row, rows]`);
  const tally = a[PART_KEYS.tally];
  if (!Array.isArray(tally) || !tally.every((x) => typeof x === 'number')) bad(`${PART_KEYS.tally} is not an array of numbers`);
  const { header, directory } = archive.field();
  const nd: Part['nd'] = {};
  const ndShape = a[PART_KEYS.ndShape];
  const dims = a[PART_KEYS.dims];
  const layout = a[PART_KEYS.layout];
  if (ndShape !== undefined) nd.ndShape = Array.isArray(ndShape) && ndShape.every((x) => typeof x === 'number') ? (ndShape as number[]) : bad(`${PART_KEYS.ndShape} is not an array of numbers`);
  if (dims !== undefined) nd.dims = Array.isArray(dims) && dims.every((x) => typeof x === 'string') ? (dims as string[]) : bad(`${PART_KEYS.dims} is not an array of names`);
  if (layout !== undefined) nd.layout = typeof layout === 'string' ? layout : bad(`${PART_KEYS.layout} is not a string`);
  return { label, src, archive, run, plan, k: kn[0], n: kn[1], rows: rows as [number, number, number], header, page: directory.page, tally: tally as number[], nd };
}

/** The one-line reason why `parts` do not make one whole run, or null. */
function mismatch(parts: Part[]): string | null {
  const p0 = parts[0];
  for (const p of parts) {
    if (p.run !== p0.run || p.plan !== p0.plan) {
      return `'${p.label}' is part ${p.k}/${p.n} of run '${p.run}' (plan ${p.plan.slice(0, 12)}), '${p0.label}' of run '${p0.run}' (plan ${p0.plan.slice(0, 12)}): join the parts of one run, packed with one plan`;
    }
    if (p.archive.header.writer !== p0.archive.header.writer) return `'${p.label}' was written by ${p.archive.header.writer}, '${p0.label}' by ${p0.archive.header.writer}: the parts of a run are packed by one program`;
    if (p.n !== p0.n) return `'${p.label}' is part ${p.k} of ${p.n}, '${p0.label}' part ${p0.k} of ${p0.n}: the parts of one run share one count`;
    if (p.k < 1 || p.k > p.n) return `'${p.label}' says it is part ${p.k} of ${p.n}`;
  }
  const n = p0.n;
  const seen = new Map<number, Part>();
  for (const p of parts) {
    const other = seen.get(p.k);
    if (other) return `part ${p.k}/${n} of run '${p0.run}' is given twice: '${other.label}' and '${p.label}'`;
    seen.set(p.k, p);
  }
  const missing: number[] = [];
  for (let k = 1; k <= n; k++) if (!seen.has(k)) missing.push(k);
  if (missing.length > 0) {
    const list = missing.length > 12 ? `${missing.slice(0, 12).join(', ')}, ... (${missing.length} in all)` : missing.join(', ');
    return `run '${p0.run}' has ${n} parts; part${missing.length === 1 ? '' : 's'} ${list} ${missing.length === 1 ? 'is' : 'are'} missing`;
  }
  return null;
}

/** The part's field and the first part's agree on everything but their rows. */
function sameField(a: Part, b: Part): string | null {
  const ha = a.header;
  const hb = b.header;
  const key = (h: FieldHeader, p: Part) => JSON.stringify([h.name, h.dtype, h.shape[1], h.tile, h.bound.mode, h.bound.value, h.bound.tolerance, h.bound.range, h.fill === null ? null : [h.fill, Object.is(h.fill, -0)], h.attrs, p.page, p.rows[2], p.nd]);
  return key(ha, a) === key(hb, b) ? null : `'${b.label}' and '${a.label}' describe different fields (name, type, columns, tile, bound, fill or page shape differ) although they name the same run and plan`;
}

/** Options of {@link joinParts}. */
export interface JoinOptions {
  /** Called after each tile's payload is written, with tiles done and the field's tile count. */
  onProgress?: (done: number, total: number) => void;
  /** Reader limits the parts are opened with (default: the readers' defaults). */
  limits?: Partial<Limits>;
}

/** What {@link joinParts} joined. */
export interface JoinResult {
  run: string;
  plan: string;
  parts: number;
  header: FieldHeader;
}

/**
 * Join the parts read from `sources` (any order) into one archive in `sink`.
 * Refuses, with one line, parts of different runs or plans, a part given
 * twice or missing, and parts whose fields disagree; a payload whose CRC-32
 * does not match its part's index is a FormatError naming the part and tile.
 * The sources are closed.
 */
export async function joinParts(sources: readonly ByteSource[], sink: Sink, o: JoinOptions = {}): Promise<JoinResult> {
  const parts: Part[] = [];
  try {
    if (sources.length === 0) throw new InputError(InputCode.Option, 'join needs the parts of a run');
    for (const s of sources) parts.push(await readPart(s, o.limits));
    const why = mismatch(parts);
    if (why) throw new InputError(InputCode.Option, why);
    parts.sort((a, b) => a.k - b.k);
    for (const p of parts) {
      const why2 = sameField(parts[0], p);
      if (why2) throw new InputError(InputCode.Option, why2);
    }
    return await write(parts, sink, o);
  } finally {
    for (const p of parts) await p.archive.close().catch(() => undefined);
    for (const s of sources) await s.close?.().catch(() => undefined);
  }
}

async function write(parts: Part[], sink: Sink, o: JoinOptions): Promise<JoinResult> {
  const p0 = parts[0];
  const h0 = p0.header;
  const rows = p0.rows[2];
  const cols = h0.shape[1];
  const plan = { field: { shape: [rows, cols] as [number, number], tile: h0.tile as [number, number], page: p0.page } };
  const indexes: FieldIndex[] = [];
  for (const p of parts) {
    const want = partRange(plan, p.k, p.n);
    if (p.rows[0] !== want.rows[0] || p.rows[1] !== want.rows[1] || p.header.shape[0] !== want.rows[1] - want.rows[0]) {
      const band = h0.tile[0] * p0.page[0];
      throw new FormatError(FormatCode.Malformed, `${p.label}: part ${p.k}/${p.n} holds rows ${p.rows[0]}..${p.rows[1] - 1} (${p.header.shape[0]} rows), but part ${p.k} of ${p.n} of a field of ${rows} rows in bands of ${band} is rows ${want.rows[0]}..${want.rows[1] - 1}`);
    }
    const ix = await p.archive.fieldIndex();
    if (p.tally.length !== 2 * ix.length.length) throw new FormatError(FormatCode.Malformed, `${p.label}: ${PART_KEYS.tally} holds ${p.tally.length} numbers, not 2 for each of the part's ${ix.length.length} tiles`);
    indexes.push(ix);
  }
  const spec: FieldSpec = { name: h0.name, dtype: h0.dtype, rows, cols, tileRows: h0.tile[0], tileCols: h0.tile[1], bound: { mode: h0.bound.mode, value: h0.bound.value }, fill: h0.fill, progressive: indexes[0].prefix !== undefined };
  const builder = new ArchiveBuilder(sink);
  const nd = { ndShape: p0.nd.ndShape, dims: p0.nd.dims, layout: p0.nd.layout };
  const header = await builder.addCoded(spec, { attrs: h0.attrs, ...nd, onProgress: o.onProgress }, p0.page, async (emit) => {
    const total = new ErrorTally();
    let valid = 0;
    let t0 = 0;
    for (const [i, p] of parts.entries()) {
      valid += await copyPart(p, indexes[i], t0, emit, total);
      t0 += indexes[i].length.length;
    }
    const result: FieldResult = { tolerance: h0.bound.tolerance, range: h0.bound.range as [number, number] | null, valid, maxErr: total.max, rmse: total.rmse };
    return result;
  });
  builder.finish();
  return { run: p0.run, plan: p0.plan, parts: parts.length, header };
}

/** A tally state [count, max, scale, ssq] as a tile of `valid` cells leaves it: finite, not negative, counting its valid cells. */
function validTally(s: readonly number[], valid: number): boolean {
  const [count, max, scale, ssq] = s;
  return count === valid && s.every((x) => Number.isFinite(x) && x >= 0) && (scale === 0 ? max === 0 : ssq >= 1 && max > 0);
}

/**
 * Hand every tile of part `p` (index `ix`) to `emit` in tile order, as
 * tile `t0 + t` of the field, with its payload checked against its CRC-32,
 * and merge its error tally into `total`. Returns the part's valid cells.
 */
async function copyPart(p: Part, ix: FieldIndex, t0: number, emit: (t: number, tile: EncodedTile) => void, total: ErrorTally): Promise<number> {
  const h = p.header;
  const d = p.archive.directory.fields[0];
  const [pr, pc] = pageGrid(h, p.page);
  let valid = 0;
  // One band of index pages at a time: its payloads lie back to back in the part, page after page.
  for (let pi = 0; pi < pr; pi++) {
    const first = pi * pc;
    const start = d.data_offset[first];
    const end = d.data_offset[first + pc - 1] + d.data_length[first + pc - 1];
    const run = await p.src.read(start, end - start);
    const tiles: number[] = [];
    for (let pj = 0; pj < pc; pj++) tiles.push(...pageTiles(h, p.page, first + pj));
    tiles.sort((a, b) => a - b);
    for (const t of tiles) {
      const at = ix.offset[t] - start;
      const payload = run.slice(at, at + ix.length[t]);
      if (crc32(payload) !== ix.crc[t]) throw new FormatError(FormatCode.Checksum, `${p.label}: tile ${t} of part ${p.k}/${p.n} (tile ${t0 + t} of the field): payload CRC-32 mismatch`);
      // The state [count, max, scale, ssq] from the two numbers a part records (see PART_KEYS.tally).
      const [max, ssq] = p.tally.slice(2 * t, 2 * t + 2);
      const state = [ix.valid[t], max, max > 0 ? max : 0, ssq];
      if (!validTally(state, ix.valid[t])) throw new FormatError(FormatCode.Malformed, `${p.label}: tile ${t} of part ${p.k}/${p.n}: its error tally in ${PART_KEYS.tally} (${state.join(', ')}) is not one of ${ix.valid[t]} valid cells`);
      total.merge(ErrorTally.fromState(state));
      valid += ix.valid[t];
      emit(t0 + t, { payload, stats: { method: ix.method[t], rank: ix.rank[t], valid: ix.valid[t], maxErr: ix.max_err[t], rmse: ix.rmse[t], valueCrc: ix.value_crc[t], prefix: ix.prefix?.[t] ?? [] } });
    }
  }
  return valid;
}
