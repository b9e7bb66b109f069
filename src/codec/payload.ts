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
} as const;

/** All flag bits this version defines; any other bit set is refused. */
export const KNOWN_FLAGS = 0x17;

/**
 * The method and rank a payload declares (its first byte, and for LowRank
 * the u16 at byte 2); rank 0 for other methods or a payload too short to
 * hold it. The one reader of these bytes outside the decoder, for the
 * index checks and the writer's statistics.
 */
export function payloadHead(payload: Uint8Array): { method: number; rank: number } {
  const method = payload.length > 0 ? payload[0] : -1;
  const rank = method === Method.LowRank && payload.length >= 4 ? payload[2] | (payload[3] << 8) : 0;
  return { method, rank };
}

/**
 * Byte lengths of the progressive prefixes of a LowRank payload: entry k is
 * where factor group k begins (entry 0: the fixed part, mask section and
 * group list; the last entry: the end of the last factor group present).
 * Returns an empty list for other methods or a payload too short to walk.
 */
export function prefixLengths(payload: Uint8Array): number[] {
  if (payload[0] !== Method.LowRank || payload.length < 13) return [];
  const view = new DataView(payload.buffer, payload.byteOffset, payload.byteLength);
  const u32At = (at: number) => (at + 4 <= payload.length ? view.getUint32(at, true) : Infinity);
  let at = 12;
  if (payload[1] & Flag.Mask) at += 8 + u32At(at) + u32At(at + 4);
  if (!(at < payload.length)) return [];
  const groups = payload[at];
  const sizes: number[] = [];
  for (let g = 0; g < groups; g++) sizes.push(at + 3 + 2 * g <= payload.length ? view.getUint16(at + 1 + 2 * g, true) : 0);
  at += 1 + 2 * groups;
  if (!(at <= payload.length)) return [];
  const out = [at];
  // A group is its step codes (4 bytes a rank), a u32 length and its coded stream.
  // On a prefix the walk stops at the last group that is complete.
  for (let g = 0; g < groups; g++) {
    at += 4 * sizes[g];
    at += 4 + u32At(at);
    if (!(at <= payload.length)) break;
    out.push(at);
  }
  return out;
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
  if (payload[0] !== Method.LowRank) return null;
  const lens = prefixLengths(payload);
  if (lens.length === 0) return null;
  const factors = lens[lens.length - 1] - lens[0];
  let at = lens[lens.length - 1];
  const view = new DataView(payload.buffer, payload.byteOffset, payload.byteLength);
  // Each group: 4 bytes of step codes a rank and a u32 length; the ranks add up to the payload's rank.
  let framing = 4 * (lens.length - 1) + 4 * payloadHead(payload).rank;
  let residual = 0;
  let exceptions = 0;
  if (payload[1] & Flag.Residual) {
    if (at + 13 > payload.length) return null;
    residual = 13 + view.getUint32(at + 9, true);
    framing += 13;
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
