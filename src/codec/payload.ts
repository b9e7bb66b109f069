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
