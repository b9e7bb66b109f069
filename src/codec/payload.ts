/** Tile payload constants shared by the encoder and decoder (spec/FORMAT.md, "Tile payloads"). */

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
  /** The centre is stored as binary64 (else binary32). */
  WideCentre: 32,
  /** The residual step is stored as binary64 (else binary32); only with Residual. */
  WideStep: 64,
} as const;

/** All flag bits this version defines; any other bit set is refused. */
export const KNOWN_FLAGS = 0x77;

/** Largest byte length of the varints of a payload (rank, group sizes, step-code differences). */
export const VARINT_BYTES = 3;

/**
 * Where the parts of a LowRank payload lie, from a lenient walk of its
 * framing (no stream is decoded, nothing is validated beyond what the walk
 * needs). `groupEnds[k]` is where factor group k ends; the walk stops at the
 * first group that does not fit, so a prefix yields the groups it holds.
 */
interface Walk {
  rank: number;
  /** Where the factor block's group list ends (the first prefix boundary). */
  groupsAt: number;
  /** Per group present: its rank count, the bytes of its step codes, and where it ends. */
  groups: { size: number; stepBytes: number; end: number }[];
  /** True if every declared group is present. */
  allGroups: boolean;
}

/** Unsigned varint at `at`: [value, bytes], or null if it runs past the end or over VARINT_BYTES. */
function varintAt(p: Uint8Array, at: number): [number, number] | null {
  let v = 0;
  for (let k = 0; k < VARINT_BYTES && at + k < p.length; k++) {
    v += (p[at + k] & 0x7f) * 2 ** (7 * k);
    if (p[at + k] < 0x80) return [v, k + 1];
  }
  return null;
}

function walkLowRank(p: Uint8Array): Walk | null {
  if (p[0] !== Method.LowRank || p.length < 3) return null;
  const view = new DataView(p.buffer, p.byteOffset, p.byteLength);
  const u32At = (at: number) => (at + 4 <= p.length ? view.getUint32(at, true) : Infinity);
  const flags = p[1];
  const rank = varintAt(p, 2);
  if (rank === null) return null;
  let at = 2 + rank[1] + (flags & Flag.WideCentre ? 8 : 4);
  if (flags & Flag.Mask) at += 8 + u32At(at) + u32At(at + 4);
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
  walk.groupsAt = at;
  // A group is its step codes (two signed varints a rank), a u32 length and its coded stream.
  for (const size of sizes) {
    const start = at;
    for (let k = 0; k < 2 * size && at <= p.length; k++) {
      const c = varintAt(p, at);
      at = c === null ? Infinity : at + c[1];
    }
    const stepBytes = at - start;
    at += 4 + u32At(at);
    if (!(at <= p.length)) {
      walk.allGroups = false;
      break;
    }
    walk.groups.push({ size, stepBytes, end: at });
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
  // Method, flags and the section's two lengths frame the exact values.
  if (payload[0] === Method.Exact) return { factors: 0, residual: 0, exceptions: payload.length, framing: Math.min(payload.length, 10) };
  const walk = walkLowRank(payload);
  if (walk === null || !walk.allGroups) return null;
  let at = walk.groups.length > 0 ? walk.groups[walk.groups.length - 1].end : walk.groupsAt;
  const factors = at - walk.groupsAt;
  const view = new DataView(payload.buffer, payload.byteOffset, payload.byteLength);
  // Each group: its step codes and a u32 length.
  let framing = walk.groups.reduce((sum, g) => sum + g.stepBytes + 4, 0);
  let residual = 0;
  let exceptions = 0;
  if (payload[1] & Flag.Residual) {
    // Step (binary32 or binary64), predictor and a u32 length.
    const head = (payload[1] & Flag.WideStep ? 8 : 4) + 5;
    if (at + head > payload.length) return null;
    residual = head + view.getUint32(at + head - 4, true);
    framing += head;
    at += residual;
  }
  if (payload[1] & Flag.Exceptions) {
    if (at + 8 > payload.length) return null;
    exceptions = 8 + view.getUint32(at + 4, true);
    framing += 8;
    at += exceptions;
  }
  return at === payload.length ? { factors, residual, exceptions, framing } : null;
}
