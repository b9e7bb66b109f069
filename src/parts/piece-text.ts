/**
 * The JSON form of the pieces of a plan made in parts (see plan-pieces.ts;
 * spec/FORMAT.md, 20.1): the keys of a piece, its arrays of per-tile
 * numbers as base64 of little-endian values, and a SHA-256 of the rest of
 * its content, so that a piece changed after it was written is refused.
 */
import { createHash } from 'node:crypto';
import { InputCode, InputError } from '../errors.js';
import type { BoundMode, Dtype } from '../types.js';
import { readJson } from './json-read.js';
import { PIECE_VERSION, type PieceAsk, type PlanPiece } from './plan-pieces.js';
import { exact, parsePlan, planText } from './plan.js';

/** Little-endian bytes of 32-bit integers or 64-bit floats, as base64. */
function b64(a: Int32Array | Float64Array): string {
  const bytes = new Uint8Array(a.length * a.BYTES_PER_ELEMENT);
  const view = new DataView(bytes.buffer);
  if (a instanceof Int32Array) a.forEach((x, i) => view.setInt32(4 * i, x, true));
  else a.forEach((x, i) => view.setFloat64(8 * i, x, true));
  return Buffer.from(bytes).toString('base64');
}

/** The JSON text of a piece, with a SHA-256 of the rest of its content. */
export function pieceText(p: PlanPiece): string {
  const body: Record<string, unknown> =
    p.pass === 'range'
      ? { rankfield_plan_piece: PIECE_VERSION, pass: p.pass, writer: p.writer, ask: { ...p.ask, bound: [p.ask.bound[0], exact(p.ask.bound[1])], fill: p.ask.fill === null ? null : exact(p.ask.fill) }, part: p.part, rows: p.rows, range: p.range === null ? null : p.range.map(exact), watch: p.watch === null ? null : p.watch.map(exact), row_crc: p.row_crc }
      : { rankfield_plan_piece: PIECE_VERSION, pass: p.pass, writer: p.writer, base: JSON.parse(planText(p.base, true)), part: p.part, tiles: p.tiles, m: b64(p.m), n: b64(p.n), valid: b64(p.valid), full: b64(p.full), held: b64(p.held), values: b64(p.values), sample_crc: p.sample_crc };
  const hash = createHash('sha256').update(JSON.stringify(body)).digest('hex');
  return `${JSON.stringify({ ...body, hash })}\n`;
}

/** Read a piece written by {@link pieceText}; anything else, or a piece changed since, is refused with one line naming `label`. */
export function parsePiece(text: string, label: string): PlanPiece {
  const bad = (why: string): never => {
    throw new InputError(InputCode.Option, `${label}: not a piece written by 'rankfield plan --part' (${why})`);
  };
  const { root: r, obj, num, int, arr, pair } = readJson(text, 'the piece', bad);
  if (r.rankfield_plan_piece !== PIECE_VERSION) bad(r.rankfield_plan_piece === undefined ? 'no rankfield_plan_piece key' : `piece version ${JSON.stringify(r.rankfield_plan_piece)}; this program reads version ${PIECE_VERSION}`);
  const { hash, ...body } = r;
  if (hash !== createHash('sha256').update(JSON.stringify(body)).digest('hex')) {
    throw new InputError(InputCode.Option, `${label}: the piece was changed after 'rankfield plan' wrote it (its content does not match its hash); make it again`);
  }
  const part = pair(r.part, 'part', 1);
  if (part[0] > part[1]) bad(`part ${part.join('/')}`);
  const writer = typeof r.writer === 'string' ? r.writer : bad('writer is not a string');
  if (r.pass === 'range') {
    const a = obj(r.ask, 'ask');
    const strs = (v: unknown, what: string): string[] | null => (v === null ? null : arr(v, what).map((x) => (typeof x === 'string' ? x : bad(`${what} is not an array of strings`))));
    const b = arr(a.bound, 'ask.bound', 2);
    if (!['abs', 'rel', 'rmse', 'psnr'].includes(b[0] as string)) bad('ask.bound[0] is not a bound mode');
    if (a.dtype !== 'f32' && a.dtype !== 'f64') bad('ask.dtype is not f32 or f64');
    const ask: PieceAsk = {
      name: typeof a.name === 'string' ? a.name : bad('ask.name is not a string'),
      dtype: a.dtype as Dtype,
      shape: pair(a.shape, 'ask.shape', 1),
      nd_shape: a.nd_shape === null ? null : arr(a.nd_shape, 'ask.nd_shape').map((x) => int(x, 'ask.nd_shape', 1)),
      dims: strs(a.dims, 'ask.dims'),
      layout: a.layout === null ? null : typeof a.layout === 'string' ? a.layout : bad('ask.layout is not a string'),
      tile: a.tile === 'auto' ? 'auto' : pair(a.tile, 'ask.tile', 1),
      page: pair(a.page, 'ask.page', 1),
      bound: [b[0] as BoundMode, num(b[1], 'ask.bound[1]')],
      fill: a.fill === null ? null : num(a.fill, 'ask.fill'),
      progressive: a.progressive === true,
    };
    const rows = pair(r.rows, 'rows', 0);
    const row_crc = arr(r.row_crc, 'row_crc', rows[1] - rows[0]).map((x) => (typeof x === 'number' && Number.isInteger(x) && x >= 0 && x <= 0xffffffff ? x : bad('row_crc holds a number that is not a CRC-32')));
    if (rows[1] > ask.shape[0]) bad(`rows ${rows.join('..')} pass the field's ${ask.shape[0]}`);
    const range = r.range === null ? null : (arr(r.range, 'range', 2).map((x) => num(x, 'range')) as [number, number]);
    const watch = r.watch === null ? null : arr(r.watch, 'watch', 11).map((x) => num(x, 'watch'));
    return { pass: 'range', writer, ask, part, rows, range, watch, row_crc };
  }
  if (r.pass !== 'spectra') bad(`pass ${JSON.stringify(r.pass)}`);
  const base = parsePlan(JSON.stringify(obj(r.base, 'base')), `${label} (its base)`, true);
  const tiles = pair(r.tiles, 'tiles', 0);
  const count = tiles[1] - tiles[0];
  if (count < 0) bad(`tiles ${tiles.join('..')}`);
  const bytes = (v: unknown, what: string, size: number, n?: number): DataView => {
    const s = typeof v === 'string' && /^[A-Za-z0-9+/]*={0,2}$/.test(v) ? Buffer.from(v, 'base64') : bad(`${what} is not base64`);
    if (s.length % size !== 0 || (n !== undefined && s.length !== n * size)) bad(`${what} holds ${s.length} bytes, not ${n === undefined ? 'a whole number of values' : n * size}`);
    return new DataView(s.buffer, s.byteOffset, s.length);
  };
  const ints = (v: unknown, what: string): Int32Array => {
    const d = bytes(v, what, 4, count);
    return Int32Array.from({ length: count }, (_, i) => {
      const x = d.getInt32(4 * i, true);
      return x >= 0 ? x : bad(`${what} holds a negative count`);
    });
  };
  const [m, n, valid, full, held] = (['m', 'n', 'valid', 'full', 'held'] as const).map((k) => ints(r[k], k));
  let total = 0;
  for (const h of held) total += h;
  const d = bytes(r.values, 'values', 8, total);
  const values = Float64Array.from({ length: total }, (_, i) => {
    const x = d.getFloat64(8 * i, true);
    return Number.isFinite(x) ? x : bad('values holds a number that is not finite');
  });
  const sample_crc = arr(r.sample_crc, 'sample_crc').map((x) => pair(x, 'sample_crc', 0));
  return { pass: 'spectra', writer, base, part, tiles, m, n, valid, full, held, values, sample_crc };
}
