/**
 * A {@link ByteSource} over a file on disk, read with random access: each
 * `read` fetches exactly the requested range with `FileHandle.read`, so an
 * archive can be opened and single tiles decoded without loading the file.
 * The file is opened read-only and never written.
 */
import type { FileHandle } from 'node:fs/promises';
import { FormatCode, FormatError, InputCode, InputError } from '../errors.js';
import type { ByteSource } from './source.js';
import { openRegular } from './regular-file.js';

/** A read-only, random-access byte source over one file. */
export class FileSource implements ByteSource {
  readonly label: string;
  private handle: FileHandle | null;
  private readonly bytes: number;

  private constructor(handle: FileHandle, bytes: number, label: string) {
    this.handle = handle;
    this.bytes = bytes;
    this.label = label;
  }

  /**
   * Open `path` read-only. File system errors (ENOENT, EACCES, ...) are
   * passed on as Node reports them; a directory is refused with an EISDIR
   * error of the same shape (Linux lets `open` succeed on one), and a FIFO,
   * device or socket with an InputError (code `file`): the file is opened
   * without blocking, so a FIFO with no writer cannot hold the open up.
   * `label` names the source in messages; default the path.
   */
  static async open(path: string, label: string = path): Promise<FileSource> {
    const { handle, stat } = await openRegular(path);
    return new FileSource(handle, stat.size, label);
  }

  /** Size of the file when it was opened. */
  async size(): Promise<number> {
    return this.bytes;
  }

  /**
   * Exactly `length` bytes from `offset`. A range beyond the size at open
   * time, or a file that has since shrunk (a read that comes back short),
   * throws FormatError Truncated.
   */
  async read(offset: number, length: number): Promise<Uint8Array> {
    if (!Number.isSafeInteger(offset) || !Number.isSafeInteger(length) || offset < 0 || length < 0) {
      throw new FormatError(FormatCode.Malformed, `${this.label}: byte range ${offset}+${length} is not a pair of non-negative integers`);
    }
    if (offset + length > this.bytes) {
      throw new FormatError(FormatCode.Truncated, `${this.label}: bytes ${offset}..${offset + length} lie beyond its ${this.bytes} bytes`);
    }
    const handle = this.handle;
    if (handle === null) throw new InputError(InputCode.Option, `${this.label}: read after the file source was closed`);
    const out = new Uint8Array(length);
    let done = 0;
    while (done < length) {
      // A single read may return fewer bytes than asked; loop until the range is full.
      const { bytesRead } = await handle.read(out, done, length - done, offset + done);
      if (bytesRead === 0) {
        throw new FormatError(
          FormatCode.Truncated,
          `${this.label}: file ended at byte ${offset + done} while reading bytes ${offset}..${offset + length} (it was ${this.bytes} bytes when opened)`,
        );
      }
      done += bytesRead;
    }
    return out;
  }

  /** Close the file; further reads are refused. Closing twice is harmless. */
  async close(): Promise<void> {
    const handle = this.handle;
    this.handle = null;
    if (handle !== null) await handle.close();
  }
}
