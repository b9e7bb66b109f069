/** Where archive bytes come from: anything that can read a byte range and knows its size. */
import { FormatCode, FormatError } from '../errors.js';

/** A random-access byte source (memory, file, HTTP). */
export interface ByteSource {
  /** Total size in bytes. */
  size(): Promise<number>;
  /** Exactly `length` bytes from `offset`; throws if the source is shorter. */
  read(offset: number, length: number): Promise<Uint8Array>;
  /** Release resources (file handles); optional. */
  close?(): Promise<void>;
  /** For messages: a path or URL. */
  readonly label: string;
}

/** A byte source over bytes already in memory. */
export class MemorySource implements ByteSource {
  readonly label: string;
  constructor(
    private readonly bytes: Uint8Array,
    label = 'archive',
  ) {
    this.label = label;
  }
  async size(): Promise<number> {
    return this.bytes.length;
  }
  async read(offset: number, length: number): Promise<Uint8Array> {
    if (offset < 0 || length < 0 || offset + length > this.bytes.length) {
      throw new FormatError(FormatCode.Truncated, `${this.label}: bytes ${offset}..${offset + length} lie beyond its ${this.bytes.length} bytes`);
    }
    return this.bytes.subarray(offset, offset + length);
  }
}
