/**
 * A NetCDF file read from disk with positioned reads (an {@link NcBytes}),
 * so that its header is read alone and a variable a band of rows at a time,
 * whatever the file's size. As for .npy input (src/io/bands.ts), the file's
 * size and modification time are compared with those seen at open before
 * every read, so a file rewritten while it is being read is reported instead
 * of being packed from a mixture of old and new bytes.
 */
import { closeSync, fstatSync, readSync } from 'node:fs';
import { InputCode, InputError } from '../errors.js';
import type { NcBytes } from './netcdf-read.js';
import { openRegularSync } from './regular-file.js';

/** A NetCDF (or any) file open for synchronous positioned reads. */
export class NcFileBytes implements NcBytes {
  readonly size: number;
  /** Bytes read from the file so far. */
  bytesRead = 0;
  private fd: number | null;
  private readonly mtime: number;

  private constructor(
    fd: number,
    readonly path: string,
    stat: { size: number; mtimeMs: number },
  ) {
    this.fd = fd;
    this.size = stat.size;
    this.mtime = stat.mtimeMs;
  }

  /** Open `path` read-only without blocking, refusing anything but a regular file (src/io/regular-file.ts). */
  static open(path: string): NcFileBytes {
    const { fd, stat } = openRegularSync(path);
    return new NcFileBytes(fd, path, stat);
  }

  private handle(): number {
    if (this.fd === null) throw new InputError(InputCode.Option, `${this.path}: read after the file was closed`);
    return this.fd;
  }

  read(offset: number, length: number): Uint8Array {
    const fd = this.handle();
    if (!Number.isSafeInteger(offset) || !Number.isSafeInteger(length) || offset < 0 || length < 0 || offset + length > this.size) {
      throw new InputError(InputCode.File, `${this.path}: bytes ${offset}..${offset + length} lie beyond its ${this.size} bytes`);
    }
    const st = fstatSync(fd);
    if (st.size !== this.size || st.mtimeMs !== this.mtime) {
      const what = st.size !== this.size ? `its size went from ${this.size} to ${st.size} bytes` : 'it was modified';
      throw new InputError(InputCode.File, `${this.path}: the file changed while being read (${what}); read it once it is complete and no longer written`);
    }
    const out = new Uint8Array(length);
    for (let done = 0; done < length; ) {
      const n = readSync(fd, out, done, length - done, offset + done);
      if (n === 0) throw new InputError(InputCode.File, `${this.path}: the file ended at byte ${offset + done}, before the ${this.size} bytes it had when opened (it changed while being read)`);
      done += n;
      this.bytesRead += n;
    }
    return out;
  }

  /** Close the file; further reads are refused. Closing twice is harmless. */
  close(): void {
    const fd = this.fd;
    this.fd = null;
    if (fd !== null) closeSync(fd);
  }
}
