/**
 * Parsers of option values for commander. Each checks its value fully and
 * throws commander's InvalidArgumentError, so that commander reports the
 * option by name ("option '--tile <RxC>' argument '0' is invalid. ...").
 */
import { InvalidArgumentError } from 'commander';
import { parseBound } from '../codec/bound.js';
import { MAX_TILE_SIDE } from '../geometry.js';
import { MAX_THREADS } from '../parallel/pool.js';
import type { Bound, Dtype } from '../types.js';
import { parseDtype, parseShape } from '../io/raw.js';

const DECIMAL = /^[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?$/;

function wrap<T>(fn: () => T): T {
  try {
    return fn();
  } catch (e) {
    if (e instanceof Error) throw new InvalidArgumentError(e.message);
    throw e;
  }
}

/**
 * A value typed as `text` that is not a finite number, named the way a
 * message should say it ("infinity ('inf')", "NaN ('nan': not a number)",
 * "'1e999', beyond the float64 range (infinity)"), or null when it is a
 * finite number.
 */
export function nonFinite(text: string): string | null {
  const t = text.trim();
  const v = Number(t);
  if (Number.isFinite(v)) return null;
  if (/^[+-]?inf(inity)?$/i.test(t)) return `${t.startsWith('-') ? 'minus infinity' : 'infinity'} ('${t}')`;
  if (/^[+-]?nan$/i.test(t)) return `NaN ('${t}': not a number)`;
  if (DECIMAL.test(t)) return `'${t}', beyond the float64 range (${v < 0 ? 'minus ' : ''}infinity)`;
  return `'${t}', which is not a number`;
}

/**
 * `--bound MODE:VALUE`, by the library's own parser, after naming the
 * values it would report as just NaN or Infinity: `abs:inf` is infinity,
 * `abs:1e999` beyond the float64 range, `abs:x` not a number.
 */
export function boundOption(text: string): Bound {
  const m = /^([a-z]+):(.+)$/.exec(text.trim());
  const named = m === null ? null : nonFinite(m[2]);
  if (m !== null && named !== null && ['abs', 'rel', 'rmse', 'psnr'].includes(m[1])) {
    throw new InvalidArgumentError(`bound value for '${m[1]}' must be a positive finite number, got ${named}`);
  }
  return wrap(() => parseBound(text));
}

/** `--tile RxC` or `--tile N` (square): positive integers up to {@link MAX_TILE_SIDE}. */
export function tileOption(text: string): [number, number] | 'auto' {
  if (text === 'auto') return 'auto';
  const parts = text.split('x');
  if (parts.length > 2 || !parts.every((p) => /^[0-9]+$/.test(p))) {
    throw new InvalidArgumentError(`tile must be RxC or one number (e.g. 64x64 or 64), got '${text}'`);
  }
  const sides = parts.map(Number);
  for (const s of sides) {
    if (!Number.isSafeInteger(s) || s < 1 || s > MAX_TILE_SIDE) {
      throw new InvalidArgumentError(`tile sides must be integers in 1..${MAX_TILE_SIDE}, got '${text}'`);
    }
  }
  return sides.length === 1 ? [sides[0], sides[0]] : [sides[0], sides[1]];
}

/** `--fill V`: a finite decimal number. */
export function fillOption(text: string): number {
  const t = text.trim();
  const v = Number(t);
  if (!DECIMAL.test(t) || !Number.isFinite(v)) {
    throw new InvalidArgumentError(`fill value must be a finite number (e.g. -999 or 9.96921e36), got '${text}'; NaN and infinities are kept exactly without it`);
  }
  return v;
}

/** `--shape RxC`: exactly two positive integers. */
export function shapeOption(text: string): [number, number] {
  const dims = wrap(() => parseShape(text));
  if (dims.length !== 2) throw new InvalidArgumentError(`shape must be RxC (2-D); ${dims.length}-D fields are not supported yet, got '${text}'`);
  return [dims[0], dims[1]];
}

/** `--shape RxC`, `AxBxC`, ...: two or more positive integers (an N-D raw field in C order). */
export function ndShapeOption(text: string): number[] {
  return wrap(() => parseShape(text));
}

/** `--dtype f32|f64` (also float32, float64). */
export function dtypeOption(text: string): Dtype {
  return wrap(() => parseDtype(text));
}

/** `--endian little|big`. */
export function endianOption(text: string): 'little' | 'big' {
  if (text !== 'little' && text !== 'big') throw new InvalidArgumentError(`byte order must be 'little' or 'big', got '${text}'`);
  return text;
}

/** `--name NAME`: a field name of 1 to 1024 characters. */
export function nameOption(text: string): string {
  if (text.length === 0 || text.length > 1024) throw new InvalidArgumentError('field name must have 1 to 1024 characters');
  return text;
}

/** `--layer auto|off|K`: a field layer chosen by bytes, none, or of rank K (1 to 64; the field's own sides are checked by the library). */
export function layerOption(text: string): 'auto' | 'off' | number {
  const t = text.trim();
  if (t === 'auto' || t === 'off') return t;
  const n = Number(t);
  if (!/^[0-9]{1,9}$/.test(t) || n < 1 || n > 64) throw new InvalidArgumentError(`layer must be auto, off or a rank from 1 to 64, got '${text}'`);
  return n;
}

/** `--threads N`: worker threads, an integer from 1 to {@link MAX_THREADS}. */
export function threadsOption(text: string): number {
  const t = text.trim();
  const n = Number(t);
  if (!/^[0-9]+$/.test(t) || !Number.isSafeInteger(n) || n < 1 || n > MAX_THREADS) {
    throw new InvalidArgumentError(`threads must be an integer from 1 to ${MAX_THREADS}, got '${text}'`);
  }
  return n;
}

/** Fields of fewer values are packed in one thread unless --threads says otherwise: starting a worker costs about a tenth of a second. */
const MIN_PARALLEL_CELLS = 1 << 18;

/**
 * The threads of one field: as given, or by default 1 for a small field and
 * the core count otherwise; 1 in any case for a field of at most 2^18
 * values whose tile is chosen by trial (`autoTile`), which the library packs
 * in the calling thread (WHOLE_CELLS in src/codec/auto-tile.ts, the same
 * 2^18, not imported here so that short commands load no encoder).
 */
export function defaultThreads(given: number | undefined, cells: number, autoTile = false): number | undefined {
  if (autoTile && cells <= MIN_PARALLEL_CELLS) return 1;
  return given !== undefined ? given : cells < MIN_PARALLEL_CELLS ? 1 : undefined;
}
