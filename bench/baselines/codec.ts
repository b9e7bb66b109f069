/** What every baseline implements, so that the harness encodes, decodes and checks each the same way. */
import type { FieldData, Target } from '../metrics.js';

export interface Codec {
  /** Short name used in tables, plots and file names. */
  id: string;
  /** One line for RESULTS.md: what the method stores. */
  describe: string;
  /** A reason to skip this (field, bound) cell, or null to run it. */
  skip?(field: FieldData, target: Target): string | null;
  /** Compress; may throw BaselineFailure when the bound cannot be met. */
  encode(field: FieldData, target: Target): Uint8Array;
  /** Decompress from the bytes alone. */
  decode(bytes: Uint8Array): Float32Array | Promise<Float32Array>;
}
