/**
 * File handling of the command line: inputs are opened read-only; outputs
 * are written to a temporary file in the destination folder, flushed, and
 * renamed over the destination, so a failure never leaves a half-written
 * output and never touches an existing one.
 */
import { randomBytes } from 'node:crypto';
import { rmSync, unlinkSync, type Stats } from 'node:fs';
import { lstat, open as openFile, rename, stat, unlink } from 'node:fs/promises';
import { basename, dirname, join, resolve } from 'node:path';
import { parentPort, workerData } from 'node:worker_threads';
import { HttpSource } from '../format/http-source.js';
import { open, type Archive, type Sink } from '../index.js';
import { FileSink } from '../io/file-sink.js';
import { FileSource } from '../io/file-source.js';
import { FileError, UsageError, fileError, isSystemError } from './errors.js';

/** Temporary files being written, and temporary folders in use; removed on a signal (see {@link removeTempFilesSync}). */
const pending = new Set<string>();
const pendingDirs = new Set<string>();

/** Mark a temporary folder for removal should the process be interrupted (`false`: it is removed already). */
export function trackTempDir(dir: string, active: boolean): void {
  if (active) pendingDirs.add(dir);
  else pendingDirs.delete(dir);
  // In the command's worker (see worker.ts), the main thread handles signals: tell it too.
  if (inCommandWorker()) parentPort?.postMessage({ dir, active });
}

/** Mark a temporary file for removal should the process be interrupted (`false`: renamed or removed already). */
export function trackTempFile(path: string, active: boolean): void {
  if (active) pending.add(path);
  else pending.delete(path);
  if (inCommandWorker()) parentPort?.postMessage({ tmp: path, active });
}

/** True inside the worker thread that bin/rankfield runs long commands in. */
function inCommandWorker(): boolean {
  return (workerData as { rankfieldWorker?: boolean } | null)?.rankfieldWorker === true;
}

/** Remove every temporary file still being written, and every tracked temporary folder (for signal handlers). */
export function removeTempFilesSync(): void {
  for (const p of pending) {
    try {
      unlinkSync(p);
    } catch {
      // Already gone, or not removable: nothing more can be done while exiting.
    }
  }
  pending.clear();
  for (const d of pendingDirs) rmSync(d, { recursive: true, force: true });
  pendingDirs.clear();
}

function emptyFile(path: string): FileError {
  return new FileError(`'${path}' is empty (0 bytes)`, 'EMPTY');
}

function notDirectory(path: string): FileError {
  return new FileError(`cannot read '${path}': is a directory`, 'EISDIR');
}

/** True when an input names an http(s) URL rather than a file. */
export function isUrl(input: string): boolean {
  return /^https?:\/\//i.test(input);
}

/** Stat an input that must be an existing, non-empty, non-directory file. */
export async function statInput(path: string): Promise<Stats> {
  let st: Stats;
  try {
    st = await stat(path);
  } catch (e) {
    throw fileError(e, 'read', path);
  }
  if (st.isDirectory()) throw notDirectory(path);
  if (st.isFile() && st.size === 0) throw emptyFile(path);
  return st;
}

/** Read a whole input file (opened read-only). */
export async function readInput(path: string): Promise<Uint8Array> {
  let handle;
  try {
    handle = await openFile(path, 'r');
  } catch (e) {
    throw fileError(e, 'read', path);
  }
  try {
    const st = await handle.stat();
    if (st.isDirectory()) throw notDirectory(path);
    const bytes = await handle.readFile();
    if (bytes.length === 0) throw emptyFile(path);
    return new Uint8Array(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  } catch (e) {
    throw fileError(e, 'read', path);
  } finally {
    await handle.close();
  }
}

/**
 * Open an archive for random access, from a file or an http(s) URL (read
 * with Range requests); the caller closes it. Only the tail, header and
 * index are read here.
 */
export async function openArchive(path: string): Promise<Archive> {
  if (isUrl(path)) {
    const src = new HttpSource(path);
    try {
      return await open(src);
    } catch (e) {
      await src.close();
      throw e;
    }
  }
  await statInput(path);
  let src: FileSource;
  try {
    src = await FileSource.open(path);
  } catch (e) {
    throw fileError(e, 'read', path);
  }
  try {
    if ((await src.size()) === 0) throw emptyFile(path);
    return await open(src);
  } catch (e) {
    await src.close();
    throw fileError(e, 'read', path);
  }
}

/** Options of {@link checkOutput} and {@link writeOutput}. */
export interface OutputOptions {
  /** Overwrite an existing output. */
  force: boolean;
  /** Input paths the output must not be. */
  inputs: string[];
}

async function statOrNull(path: string, action: string, how: typeof stat = stat): Promise<Stats | null> {
  try {
    return await how(path);
  } catch (e) {
    if (isSystemError(e) && e.code === 'ENOENT') return null;
    throw fileError(e, action, path);
  }
}

/**
 * Refuse an output that is one of the inputs, that exists (unless `force`),
 * that is a directory, or whose folder does not exist. Called before any
 * work is done and again just before the output is renamed into place.
 */
export async function checkOutput(out: string, o: OutputOptions): Promise<void> {
  if (out.length === 0 || out.endsWith('/')) throw new UsageError(`output '${out}' is not a file name`);
  const target = await statOrNull(out, 'write', lstat);
  for (const input of o.inputs) {
    let same = resolve(input) === resolve(out);
    if (!same && target !== null) {
      const a = await statOrNull(input, 'read');
      const b = await statOrNull(out, 'write');
      same = a !== null && b !== null && a.dev === b.dev && a.ino === b.ino;
    }
    if (same) throw new UsageError(`output '${out}' is the input file; choose another output name`);
  }
  if (target !== null) {
    if (target.isDirectory()) throw new FileError(`cannot write '${out}': is a directory`, 'EISDIR');
    if (!o.force) throw new UsageError(`output '${out}' already exists; use --force to overwrite it`);
  }
  const folder = dirname(out);
  const dir = await statOrNull(folder, 'write');
  if (dir === null) throw new FileError(`cannot write '${out}': folder '${folder}' does not exist`, 'ENOENT');
  if (!dir.isDirectory()) throw new FileError(`cannot write '${out}': '${folder}' is not a directory`, 'ENOTDIR');
}

/**
 * Write `bytes` to `out` atomically: a temporary file `.NAME.<pid>.<random>.tmp`
 * in the same folder, fsync, rename over `out`, then fsync the folder. On any
 * failure the temporary file is removed and `out` is left as it was.
 */
export async function writeOutput(out: string, bytes: Uint8Array, o: OutputOptions): Promise<void> {
  await writeOutputWith(out, o, (sink) => sink.write(bytes));
}

/**
 * Write `out` atomically from `produce`, which writes into a sink as it goes
 * (so the output need never be in memory): into a temporary file in the
 * same folder, flushed, fsynced and renamed over `out` once `produce`
 * returns. If `produce` or any step fails, or the process is interrupted,
 * the temporary file is removed and `out` is left as it was. Errors thrown
 * by `produce` itself pass on unchanged; those of writing are phrased with
 * `out`.
 */
export async function writeOutputWith(out: string, o: OutputOptions, produce: (sink: Sink) => void | Promise<void>): Promise<void> {
  await checkOutput(out, o);
  const folder = dirname(out);
  const tmp = join(folder, `.${basename(out)}.${process.pid}.${randomBytes(6).toString('hex')}.tmp`);
  let sink: FileSink;
  try {
    sink = FileSink.create(tmp);
  } catch (e) {
    throw fileError(e, 'write', out);
  }
  trackTempFile(tmp, true);
  const writing: Sink = {
    write(bytes) {
      try {
        sink.write(bytes);
      } catch (e) {
        throw fileError(e, 'write', out);
      }
    },
  };
  try {
    await produce(writing);
    try {
      sink.close(true);
    } catch (e) {
      throw fileError(e, 'write', out);
    }
    await checkOutput(out, o);
    await rename(tmp, out).catch((e: unknown) => Promise.reject(fileError(e, 'write', out)));
    trackTempFile(tmp, false);
  } catch (e) {
    try {
      sink.abandon();
    } catch {
      // Already closed, or not closable: the file is removed below either way.
    }
    await unlink(tmp).catch(() => undefined);
    trackTempFile(tmp, false);
    throw e;
  }
  await syncFolder(folder);
}

/** Flush a folder so that a rename in it survives a crash; best effort (not every system allows it). */
async function syncFolder(folder: string): Promise<void> {
  try {
    const dir = await openFile(folder, 'r');
    try {
      await dir.sync();
    } finally {
      await dir.close();
    }
  } catch {
    // Some file systems refuse fsync on a directory; the data itself is already flushed.
  }
}
