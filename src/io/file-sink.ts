/**
 * A {@link Sink} that writes archive bytes to a file as they come, through a
 * file descriptor, with a small buffer so that many small payloads do not
 * cost one system call each. Writes are synchronous because the archive
 * writer emits payloads from inside the encoder's (synchronous) tile loop.
 */
import { closeSync, fsyncSync, openSync, write, writeSync } from 'node:fs';
import type { Sink } from '../format/container.js';

/** Default buffer: 1 MiB. */
const BUFFER_BYTES = 1 << 20;

/** Writes bytes in order to one file. */
export class FileSink implements Sink {
  /** Bytes handed to {@link write} so far. */
  bytesWritten = 0;
  private fd: number | null;
  private readonly buffer: Uint8Array;
  private used = 0;

  /** Write to an open descriptor (which {@link close} closes). */
  constructor(fd: number, readonly path: string, bufferBytes = BUFFER_BYTES) {
    this.fd = fd;
    this.buffer = new Uint8Array(Math.max(1, bufferBytes));
  }

  /** Create `path` for writing, refusing an existing file (mode 0644). */
  static create(path: string): FileSink {
    return new FileSink(openSync(path, 'wx', 0o644), path);
  }

  private handle(): number {
    if (this.fd === null) throw new Error(`${this.path}: write after the file sink was closed`);
    return this.fd;
  }

  private writeAll(bytes: Uint8Array): void {
    const fd = this.handle();
    for (let at = 0; at < bytes.length; ) at += writeSync(fd, bytes, at, bytes.length - at);
  }

  write(bytes: Uint8Array): void {
    this.handle();
    this.bytesWritten += bytes.length;
    if (this.used + bytes.length <= this.buffer.length) {
      this.buffer.set(bytes, this.used);
      this.used += bytes.length;
      return;
    }
    this.flush();
    // Large writes skip the buffer.
    if (bytes.length >= this.buffer.length) this.writeAll(bytes);
    else {
      this.buffer.set(bytes);
      this.used = bytes.length;
    }
  }

  /**
   * Write `bytes` after everything handed over before, without blocking
   * this thread (the write runs in libuv's thread pool); resolves once they
   * are written. The caller leaves them unchanged until then, and neither
   * writes nor closes meanwhile.
   */
  writeAsync(bytes: Uint8Array): Promise<void> {
    this.flush();
    const fd = this.handle();
    this.bytesWritten += bytes.length;
    return new Promise((resolve, reject) => {
      const from = (at: number): void => {
        if (at >= bytes.length) resolve();
        else write(fd, bytes, at, bytes.length - at, null, (e, n) => (e ? reject(e) : from(at + n)));
      };
      from(0);
    });
  }

  /**
   * Overwrite bytes handed over before, at `offset` (the archive writer sets
   * a required flag in the prologue this way once it knows a field needs
   * it): the part still buffered is changed in the buffer, the part already
   * written by a positional write, which leaves the file position alone.
   */
  patch(offset: number, bytes: Uint8Array): void {
    const fd = this.handle();
    const flushed = this.bytesWritten - this.used;
    if (!(offset >= 0 && offset + bytes.length <= this.bytesWritten)) throw new Error(`${this.path}: patch of bytes ${offset}..${offset + bytes.length} outside the ${this.bytesWritten} written`);
    const head = Math.max(0, Math.min(bytes.length, flushed - offset));
    for (let at = 0; at < head; ) at += writeSync(fd, bytes, at, head - at, offset + at);
    if (head < bytes.length) this.buffer.set(bytes.subarray(head), offset + head - flushed);
  }

  /** Write out what is buffered. */
  flush(): void {
    if (this.used > 0) {
      const n = this.used;
      this.used = 0;
      this.writeAll(this.buffer.subarray(0, n));
    }
  }

  /** Flush, fsync (`sync`, default true) and close. Closing twice is harmless; a failed flush still closes the file. */
  close(sync = true): void {
    const fd = this.fd;
    if (fd === null) return;
    try {
      this.flush();
      if (sync) fsyncSync(fd);
    } finally {
      this.fd = null;
      closeSync(fd);
    }
  }

  /** Close without writing what is buffered (after a failure). */
  abandon(): void {
    const fd = this.fd;
    this.fd = null;
    this.used = 0;
    if (fd !== null) closeSync(fd);
  }
}
