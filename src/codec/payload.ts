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
  Lorenzo: 8,
} as const;

/** All flag bits this version defines; any other bit set is refused. */
export const KNOWN_FLAGS = 0x0f;

/**
 * Byte lengths of the progressive prefixes of a LowRank payload: entry k is
 * where factor group k begins (entry 0: the fixed part, mask section and
 * group list; the last entry: the end of the last factor group present).
 * Returns an empty list for other methods or a payload too short to walk.
 */
export function prefixLengths(payload: Uint8Array): number[] {
  if (payload[0] !== Method.LowRank || payload.length < 13) return [];
  const view = new DataView(payload.buffer, payload.byteOffset, payload.byteLength);
  const section = (at: number) => (at + 8 <= payload.length ? at + 8 + view.getUint32(at + 4, true) : Infinity);
  let at = 12;
  if (payload[1] & Flag.Mask) at = section(at);
  if (!(at < payload.length)) return [];
  const groups = payload[at];
  at += 1 + 2 * groups;
  if (!(at <= payload.length)) return [];
  const out = [at];
  // On a prefix the walk stops at the last group that is complete.
  for (let g = 0; g < groups; g++) {
    at = section(at);
    if (!(at <= payload.length)) break;
    out.push(at);
  }
  return out;
}
