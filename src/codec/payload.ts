/** Tile payload constants shared by the encoder and decoder (spec/FORMAT.md, "Tile payloads"). */
import { LENGTH_BYTES } from '../format/bytes.js';
import { binary32Below } from './steps.js';

/** Payload methods: the first byte of every payload. */
export const Method = {
  /** Every value stored losslessly (byte-shuffled, DEFLATE). */
  Exact: 0,
  /** Centre + quantized low-rank factors + optional residual and exceptions. */
  LowRank: 1,
} as const;
export type Method = (typeof Method)[keyof typeof Method];

/** Names of methods, for reports. */
export const METHOD_NAMES: Record<number, string> = { 0: 'exact', 1: 'lowrank' };

/** Flag bits of a LowRank payload (second byte). */
export const Flag = {
  Mask: 1,
  Residual: 2,
  Exceptions: 4,
  /** Factor codes are stored as first differences along each factor vector. */
  FactorDelta: 16,
} as const;

/** Bits 5-6 of the flags: how the centre is stored ({@link CentreForm}). */
export const CENTRE_FORM_SHIFT = 5;

/** How the centre is stored (flags bits 5-6). */
export const CentreForm = {
  /** binary32, 4 bytes. */
  Binary32: 0,
  /** binary64, 8 bytes. */
  Binary64: 1,
  /** An integer, as a signed varint of at most {@link NUMBER_BYTES} bytes. */
  Integer: 2,
} as const;

/** All flag bits this version defines (Mask, Residual, Exceptions, FactorDelta and the centre form, whose code 3 is refused); any other bit set is refused. */
export const KNOWN_FLAGS = 0x77;

/** Bits 4-5 of the residual byte: how the residual step is stored ({@link StepForm}); bits 0-2 hold the predictor. */
export const STEP_FORM_SHIFT = 4;

/** How the residual step is stored (residual byte bits 4-5). */
export const StepForm = {
  /** Not stored: the field's step (see {@link fieldStep}). */
  Field: 0,
  /** binary32, 4 bytes. */
  Binary32: 1,
  /** binary64, 8 bytes. */
  Binary64: 2,
  /** A positive integer, as an unsigned varint of at most {@link NUMBER_BYTES} bytes. */
  Integer: 3,
} as const;

/** Residual byte bit 3, "coder": the residual stream is coded with the symbol coder (./code-symbols.ts), not the binary one. */
export const RESIDUAL_SYMBOLS = 0x08;

/** Bits of the residual byte this version defines (predictor 0-2, coder 3, step form 4-5). */
export const KNOWN_RESIDUAL_BITS = 0x3f;

/** Largest byte length of an integer centre (a signed varint: magnitude below 2^31) or an integer step (an unsigned varint: below 2^32). */
export const NUMBER_BYTES = 5;

/** Varint bytes of a signed integer (its zigzag code), or Infinity if it is not an integer of magnitude below 2^31. */
export function svarintBytes(k: number): number {
  if (!Number.isInteger(k) || Math.abs(k) >= 2 ** 31) return Infinity;
  return varintBytes(k < 0 ? -2 * k - 1 : 2 * k);
}

/** Varint bytes of a non-negative integer below 2^32 (else Infinity). */
export function varintBytes(v: number): number {
  if (!Number.isInteger(v) || v < 0 || v >= 2 ** 32) return Infinity;
  let b = 1;
  while (v >= 0x80) {
    v = Math.floor(v / 128);
    b++;
  }
  return b;
}

/**
 * The cheapest form of a centre (flags bits 5-6) that holds it exactly: an
 * integer of at most 4 varint bytes (not -0), else binary32 when the centre
 * is a binary32 value, else binary64. Returns the form and, for the integer
 * form, the integer stored.
 */
export function centreForm(center: number): { form: number; k: number } {
  // -0 stays binary32: a varint has no negative zero, and a constant tile of -0 keeps its sign through its centre.
  if (svarintBytes(center) <= 4 && !Object.is(center, -0)) return { form: CentreForm.Integer, k: center };
  return { form: Math.fround(center) === center ? CentreForm.Binary32 : CentreForm.Binary64, k: 0 };
}

/** The cheapest form of a residual step (residual byte bits 4-5): the field's, an integer varint shorter than 4 bytes, binary32, binary64. */
export function stepForm(step: number, deltaF: number): number {
  if (deltaF > 0 && step === deltaF) return StepForm.Field;
  if (step >= 1 && varintBytes(step) < 4) return StepForm.Integer;
  return Math.fround(step) === step ? StepForm.Binary32 : StepForm.Binary64;
}

/** Bytes of the centre in each form (the varint forms: at most). */
export function centreBytes(form: number, p: Uint8Array, at: number): number {
  if (form === CentreForm.Binary32) return 4;
  if (form === CentreForm.Binary64) return 8;
  return varintAt(p, at, NUMBER_BYTES)?.[1] ?? Infinity;
}

/** Largest byte length of the varints of a payload that are not byte lengths (rank, group sizes, step codes and their differences). */
export const VARINT_BYTES = 3;

/**
 * The field's residual step, named by flag FieldStep instead of stored:
 * the largest binary32 value not above twice the field's tolerance (the
 * step of a pointwise bound's plain residual, which nearly every tile of
 * such a field uses), or twice the tolerance itself outside binary32's
 * normal range; 0 (none: the flag is refused) when that is not a positive
 * finite number.
 */
export function fieldStep(tolerance: number): number {
  const s = binary32Below(2 * tolerance);
  return s > 0 && Number.isFinite(s) ? s : 0;
}

/**
 * Where the parts of a LowRank payload lie, from a lenient walk of its
 * framing (no stream is decoded, nothing is validated beyond what the walk
 * needs). `groupEnds[k]` is where factor group k ends; the walk stops at the
 * first group that does not fit, so a prefix yields the groups it holds.
 */
interface Walk {
  rank: number;
  /** Where the factor block's group list and right step code end (the first prefix boundary). */
  groupsAt: number;
  /** Per group present: its rank count, the bytes of its step codes and length varint, and where it ends. */
  groups: { size: number; framing: number; end: number }[];
  /** True if every declared group is present. */
  allGroups: boolean;
}

/** Unsigned varint at `at` of at most `max` bytes: [value, bytes], or null if it runs past the end or over `max`. */
function varintAt(p: Uint8Array, at: number, max = VARINT_BYTES): [number, number] | null {
  let v = 0;
  for (let k = 0; k < max && at + k < p.length; k++) {
    v += (p[at + k] & 0x7f) * 2 ** (7 * k);
    if (p[at + k] < 0x80) return [v, k + 1];
  }
  return null;
}

/** A length varint at `at` and the bytes it announces: [bytes of the varint, bytes announced], or Infinity past the end. */
function lengthAt(p: Uint8Array, at: number): [number, number] {
  const v = varintAt(p, at, LENGTH_BYTES);
  return v === null ? [Infinity, Infinity] : [v[1], v[0]];
}

function walkLowRank(p: Uint8Array): Walk | null {
  if (p[0] !== Method.LowRank || p.length < 3) return null;
  const flags = p[1];
  const rank = varintAt(p, 2);
  if (rank === null) return null;
  let at = 2 + rank[1];
  at += centreBytes((flags >> CENTRE_FORM_SHIFT) & 3, p, at);
  if (flags & Flag.Mask) {
    // Two length varints (class map, raw NaN bits), then the bytes they announce.
    const [b1, classMap] = lengthAt(p, at);
    const [b2, rawNaN] = lengthAt(p, at + b1);
    at += b1 + b2 + classMap + rawNaN;
  }
  if (!(at <= p.length)) return null;
  const walk: Walk = { rank: rank[0], groupsAt: at, groups: [], allGroups: true };
  if (rank[0] === 0) return walk;
  if (!(at < p.length)) return null;
  const count = p[at++];
  const sizes: number[] = [];
  for (let g = 0; g < count; g++) {
    const s = varintAt(p, at);
    if (s === null) return null;
    sizes.push(s[0]);
    at += s[1];
  }
  // The right factor's step code, once.
  const right = varintAt(p, at);
  if (right === null) return null;
  at += right[1];
  walk.groupsAt = at;
  // A group is its left step codes (a signed varint a rank), a length varint and its coded stream.
  for (const size of sizes) {
    const start = at;
    for (let k = 0; k < size && at <= p.length; k++) {
      const c = varintAt(p, at);
      at = c === null ? Infinity : at + c[1];
    }
    const stepBytes = at - start;
    const [lb, stream] = at < p.length ? lengthAt(p, at) : [Infinity, Infinity];
    at += lb + stream;
    if (!(at <= p.length)) {
      walk.allGroups = false;
      break;
    }
    walk.groups.push({ size, framing: stepBytes + lb, end: at });
  }
  return walk;
}

/**
 * The method and rank a payload declares (its first byte, and for LowRank
 * the varint at byte 2); rank 0 for other methods or a payload too short to
 * hold it. The one reader of these bytes outside the decoder, for the
 * index checks and the writer's statistics.
 */
export function payloadHead(payload: Uint8Array): { method: number; rank: number } {
  const method = payload.length > 0 ? payload[0] : -1;
  const rank = method === Method.LowRank ? (varintAt(payload, 2)?.[0] ?? 0) : 0;
  return { method, rank };
}

/**
 * Byte lengths of the progressive prefixes of a LowRank payload: entry k is
 * where factor group k begins (entry 0: the fixed part, mask section and
 * group list; the last entry: the end of the last factor group present).
 * Returns an empty list for other methods or a payload too short to walk.
 */
export function prefixLengths(payload: Uint8Array): number[] {
  const walk = walkLowRank(payload);
  if (walk === null) return [];
  return [walk.groupsAt, ...walk.groups.map((g) => g.end)];
}

/** Where a payload's residual lies: its residual byte, the stream's length varint, and the stream. */
export interface ResidualPlace {
  byteAt: number;
  lengthAt: number;
  streamAt: number;
  streamEnd: number;
}

/** The residual of a well-formed LowRank payload with flag Residual, or null (none, or a payload that does not walk). */
export function residualPlace(payload: Uint8Array): ResidualPlace | null {
  if (payload[0] !== Method.LowRank || (payload[1] & Flag.Residual) === 0) return null;
  const walk = walkLowRank(payload);
  if (walk === null || !walk.allGroups) return null;
  const byteAt = walk.groups.length > 0 ? walk.groups[walk.groups.length - 1].end : walk.groupsAt;
  if (!(byteAt < payload.length)) return null;
  // The residual byte, the step (none for the field's, binary32, binary64 or an integer varint), a length varint.
  const form = (payload[byteAt] >> STEP_FORM_SHIFT) & 3;
  const fixed = 1 + (form === StepForm.Field ? 0 : form === StepForm.Binary32 ? 4 : form === StepForm.Binary64 ? 8 : (varintAt(payload, byteAt + 1, NUMBER_BYTES)?.[1] ?? Infinity));
  const lenAt = byteAt + fixed;
  const [lb, stream] = lenAt < payload.length ? lengthAt(payload, lenAt) : [Infinity, Infinity];
  const streamEnd = lenAt + lb + stream;
  if (!(streamEnd <= payload.length)) return null;
  return { byteAt, lengthAt: lenAt, streamAt: lenAt + lb, streamEnd };
}

/**
 * Whether a payload's residual is coded with the symbol coder (residual
 * byte bit 3): what makes a writer set required flag bit 2. False for an
 * exact payload, one without a residual, or one that does not walk.
 */
export function usesSymbolCoder(payload: Uint8Array): boolean {
  const at = residualPlace(payload);
  return at !== null && (payload[at.byteAt] & RESIDUAL_SYMBOLS) !== 0;
}

/** Bytes of a payload by role, for reports: factor streams (with their step codes), residual and exceptions. */
export interface PayloadShares {
  factors: number;
  residual: number;
  exceptions: number;
  /**
   * The part of those three that frames the coded data rather than being
   * it: step codes and length words of the factor groups, the residual's
   * step, predictor and length, the exceptions' (or exact values') method,
   * flags and section lengths. With the fixed part and the mask, these are
   * the tile's header bytes.
   */
  framing: number;
}

/**
 * Walk a well-formed payload (one the decoder accepts) and count its bytes
 * by role; everything else is fixed part, mask and framing. Returns null
 * for a payload that does not walk to its end.
 */
export function payloadShares(payload: Uint8Array): PayloadShares | null {
  if (payload[0] === Method.Exact) {
    // Method, flags and the section's two length varints frame the exact values.
    const [b1] = lengthAt(payload, 2);
    const [b2] = lengthAt(payload, 2 + b1);
    return { factors: 0, residual: 0, exceptions: payload.length, framing: Math.min(payload.length, 2 + b1 + b2) };
  }
  const walk = walkLowRank(payload);
  if (walk === null || !walk.allGroups) return null;
  let at = walk.groups.length > 0 ? walk.groups[walk.groups.length - 1].end : walk.groupsAt;
  const factors = at - walk.groupsAt;
  // Each group: its step codes and its length varint.
  let framing = walk.groups.reduce((sum, g) => sum + g.framing, 0);
  let residual = 0;
  let exceptions = 0;
  if (payload[1] & Flag.Residual) {
    const place = residualPlace(payload);
    if (place === null) return null;
    residual = place.streamEnd - place.byteAt;
    framing += place.streamAt - place.byteAt;
    at += residual;
  }
  if (payload[1] & Flag.Exceptions) {
    const [b1] = lengthAt(payload, at);
    const [b2, stored] = lengthAt(payload, at + b1);
    exceptions = b1 + b2 + stored;
    framing += b1 + b2;
    at += exceptions;
  }
  return at === payload.length ? { factors, residual, exceptions, framing } : null;
}
