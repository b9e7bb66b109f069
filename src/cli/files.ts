/**
 * File handling of the command line. Inputs are opened read-only and
 * without blocking, and must be regular files. Outputs go to a temporary
 * file in the destination folder, named `.NAME.rankfield-tmp-HOST-PID-RANDOM`,
 * which is flushed and then published: without --force by a hard link
 * (which fails if the name exists, so of several concurrent writers exactly
 * one wins), with --force by a rename (the last one wins, and readers see
 * either the old file or a complete new one). A destination that exists
 * and is not a regular file (a device, FIFO, socket, directory or symbolic
 * link) is refused, with or without --force. Temporary files of runs that
 * ended without removing theirs (killed by SIGKILL, power loss) are removed
 * by the next run that writes to the same folder from the same machine.
 */
import { createHash, randomBytes } from 'node:crypto';
import { constants as fsConstants, type Stats } from 'node:fs';
import { link, lstat, open as openFile, opendir, readlink, rename, stat, unlink } from 'node:fs/promises';
import { hostname } from 'node:os';
import { basename, dirname, join, resolve } from 'node:path';
import { HttpSource } from '../io/http-source.js';
import type { Archive } from '../archive.js';
import type { Sink } from '../format/container.js';
import type { ByteSource } from '../io/source.js';
import { open } from '../open-file.js';
import { FileSink } from '../io/file-sink.js';
import { FileSource } from '../io/file-source.js';
import { fileKind, openRegular } from '../io/regular-file.js';
import { FileError, UsageError, fileError, isSystemError } from './errors.js';
import { httpOptions } from './http.js';
import { trackTempFile } from './temp-track.js';

export { removeTempFilesSync, trackTempDir, trackTempFile } from './temp-track.js';


/** What temporary file names carry after `.NAME.`: `rankfield-tmp-HOST-PID-RANDOM`. */
const TEMP_MARK = 'rankfield-tmp';
/** A temporary file name: NAME, the host's tag, the writer's process id, the random part. */
const TEMP_NAME = /^\.(.*)\.rankfield-tmp-([0-9a-f]{8})-([0-9]{1,10})-([0-9a-f]{12})$/s;
/** Longest NAME kept in a temporary file name, in UTF-8 bytes (file names are limited to 255 bytes). */
const TEMP_NAME_BYTES = 160;

/**
 * This machine's tag in temporary file names: 8 hex digits of the SHA-256
 * of its host name. A process id only means something on the machine that
 * wrote it, so stale files are recognised only by the machine that made
 * them (a folder shared by several cluster nodes is safe).
 */
const HOST_TAG = createHash('sha256').update(hostname()).digest('hex').slice(0, 8);

/** The temporary file for `out`: `.NAME.rankfield-tmp-HOST-PID-RANDOM` beside it (NAME shortened when long). */
export function tempPath(out: string): string {
  let name = basename(out);
  if (Buffer.byteLength(name) > TEMP_NAME_BYTES) {
    const chars = [...name];
    while (Buffer.byteLength(chars.join('')) > TEMP_NAME_BYTES) chars.pop();
    name = chars.join('');
  }
  return join(dirname(out), `.${name}.${TEMP_MARK}-${HOST_TAG}-${process.pid}-${randomBytes(6).toString('hex')}`);
}

/** True when process `pid` exists on this machine (a process of another user counts: EPERM). */
function alive(pid: number): boolean {
  try {
    process.kill(pid, 0);
    return true;
  } catch (e) {
    return !(isSystemError(e) && e.code === 'ESRCH');
  }
}

/** Folders already cleared of stale temporary files by this process. */
const swept = new Set<string>();

/**
 * Remove the temporary files that runs on this machine left in `folder`
 * when they ended without removing them (SIGKILL, a crash, power loss):
 * regular files named by {@link tempPath}, with this machine's tag, owned
 * by this user, whose process no longer exists. Best effort, once per
 * folder and process; returns the names removed.
 */
export async function removeStaleTemps(folder: string): Promise<string[]> {
  const key = resolve(folder);
  if (swept.has(key)) return [];
  swept.add(key);
  const removed: string[] = [];
  try {
    const dir = await opendir(folder);
    for await (const entry of dir) {
      if (!entry.name.includes(TEMP_MARK)) continue;
      const m = TEMP_NAME.exec(entry.name);
      if (m === null || m[2] !== HOST_TAG) continue;
      const pid = Number(m[3]);
      if (pid === process.pid || alive(pid)) continue;
      const path = join(folder, entry.name);
      try {
        const st = await lstat(path);
        if (!st.isFile() || (process.getuid !== undefined && st.uid !== process.getuid())) continue;
        await unlink(path);
        removed.push(entry.name);
      } catch {
        // Gone already (another run removed it), or not ours to remove.
      }
    }
  } catch {
    // An unreadable folder: the output itself will report the problem.
  }
  return removed;
}

export function emptyFile(path: string): FileError {
  return new FileError(`'${path}' is empty (0 bytes)`, 'EMPTY');
}

function notDirectory(path: string): FileError {
  return new FileError(`cannot read '${path}': is a directory`, 'EISDIR');
}

/** True when an input names an http(s) URL rather than a file. */
export function isUrl(input: string): boolean {
  return /^https?:\/\//i.test(input);
}

/**
 * Stat an input that must be an existing, non-empty regular file (a
 * symbolic link to one is followed). A FIFO, device or socket is refused:
 * it cannot be sized or read twice, and a FIFO without a writer would hold
 * the command up.
 */
export async function statInput(path: string): Promise<Stats> {
  let st: Stats;
  try {
    st = await stat(path);
  } catch (e) {
    throw fileError(e, 'read', path);
  }
  if (st.isDirectory()) throw notDirectory(path);
  if (!st.isFile()) throw new FileError(`cannot read '${path}': it is ${fileKind(st)}, not a regular file (inputs must be files that can be sized and read again)`, 'ENOTREG');
  if (st.size === 0) throw emptyFile(path);
  return st;
}

/** Read a whole input file (opened read-only, without blocking; regular files only). */
export async function readInput(path: string): Promise<Uint8Array> {
  let handle;
  try {
    ({ handle } = await openRegular(path));
  } catch (e) {
    throw fileError(e, 'read', path);
  }
  try {
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
 * with Range requests, within the deadlines of {@link httpOptions}); the
 * caller closes it. Only the tail, header and index are read here.
 */
export async function openArchive(path: string): Promise<Archive> {
  return (await openArchiveSource(path)).archive;
}

/**
 * {@link openArchive}, also giving the byte source the archive reads, so a
 * caller can read more of the same file through the same open file (another
 * open of the path could meet a file that has been replaced in between).
 */
export async function openArchiveSource(path: string): Promise<{ archive: Archive; src: ByteSource }> {
  if (isUrl(path)) {
    const src = new HttpSource(path, httpOptions());
    try {
      return { archive: await open(src), src };
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
    return { archive: await open(src), src };
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

function exists(out: string): UsageError {
  return new UsageError(`output '${out}' already exists; use --force to overwrite it`);
}

/**
 * Refuse an output that is one of the inputs; that exists and is not a
 * regular file (a directory, device, FIFO, socket or symbolic link: with or
 * without `force`); that exists at all, unless `force`; or whose folder
 * does not exist. Called before any work is done and again just before the
 * output is published.
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
    if (target.isSymbolicLink()) {
      const to = await readlink(out).catch(() => null);
      throw new FileError(`cannot write '${out}': it is a symbolic link${to === null ? '' : ` to '${to}'`}; rankfield does not write through links (name the file itself)`, 'ELINK');
    }
    if (!target.isFile()) throw new FileError(`cannot write '${out}': it is ${fileKind(target)}; rankfield writes only regular files and new paths, with or without --force`, 'ENOTREG');
    if (!o.force) throw exists(out);
  }
  const folder = dirname(out);
  const dir = await statOrNull(folder, 'write');
  if (dir === null) throw new FileError(`cannot write '${out}': folder '${folder}' does not exist`, 'ENOENT');
  if (!dir.isDirectory()) throw new FileError(`cannot write '${out}': '${folder}' is not a directory`, 'ENOTDIR');
}

/**
 * Write `bytes` to `out` atomically: a temporary file beside it (see
 * {@link tempPath}), fsync, publish, then fsync the folder. On any failure
 * the temporary file is removed and `out` is left as it was.
 */
export async function writeOutput(out: string, bytes: Uint8Array, o: OutputOptions): Promise<void> {
  await writeOutputWith(out, o, (sink) => sink.write(bytes));
}

/** Codes of a hard link refused because the file system has none. */
const NO_LINKS = new Set(['EPERM', 'ENOTSUP', 'EOPNOTSUPP', 'ENOSYS']);

/**
 * Give the finished temporary file `tmp` the name `out`. Without `force`,
 * by a hard link, which fails if `out` exists (whatever it is, and however
 * recently it appeared), so of several writers exactly one wins; then the
 * temporary name is removed. On a file system without hard links, `out` is
 * first created empty and exclusively (O_EXCL), which claims the name as
 * surely, and the temporary file is renamed over it. With `force`, by a
 * rename over a regular file, so the last writer wins and no reader ever
 * sees a partial file.
 */
async function publish(tmp: string, out: string, o: OutputOptions): Promise<void> {
  await checkOutput(out, o);
  if (o.force) {
    await rename(tmp, out).catch((e: unknown) => Promise.reject(fileError(e, 'write', out)));
    return;
  }
  try {
    await link(tmp, out);
  } catch (e) {
    if (isSystemError(e) && e.code === 'EEXIST') {
      // Someone else's output (or another kind of file) appeared meanwhile: say what it is.
      await checkOutput(out, o);
      throw exists(out);
    }
    if (!(isSystemError(e) && NO_LINKS.has(e.code as string))) throw fileError(e, 'write', out);
    await claimAndRename(tmp, out, o);
    return;
  }
  await unlink(tmp).catch(() => undefined);
}

/** Publish without hard links: create `out` empty and exclusively, then rename `tmp` over it. */
async function claimAndRename(tmp: string, out: string, o: OutputOptions): Promise<void> {
  let claim;
  try {
    claim = await openFile(out, fsConstants.O_WRONLY | fsConstants.O_CREAT | fsConstants.O_EXCL, 0o644);
  } catch (e) {
    if (isSystemError(e) && e.code === 'EEXIST') {
      await checkOutput(out, o);
      throw exists(out);
    }
    throw fileError(e, 'write', out);
  }
  // Until the rename, the empty placeholder is ours to remove if the run is interrupted.
  trackTempFile(out, true);
  try {
    await claim.close();
    await rename(tmp, out);
  } catch (e) {
    await unlink(out).catch(() => undefined);
    throw fileError(e, 'write', out);
  } finally {
    trackTempFile(out, false);
  }
}

/** The sink {@link writeOutputWith} hands its producer: synchronous writes, and writes that overlap with the producer's work. */
export interface OutputSink extends Sink {
  /**
   * Write `bytes` after everything handed over before, in the background
   * (libuv's thread pool), so that the producer goes on (decoding the next
   * band) meanwhile. Resolves once the write queued before this one is done,
   * and rejects if a write failed: a producer that awaits each call has at
   * most two in the queue. The bytes must stay unchanged until the output is
   * complete (fresh buffers, as decoded bands are).
   */
  later(bytes: Uint8Array): Promise<void>;
}

/**
 * Write `out` atomically from `produce`, which writes into a sink as it goes
 * (so the output need never be in memory): into a temporary file in the
 * same folder, flushed and fsynced, then published (see {@link publish})
 * once `produce` returns. If `produce` or any step fails, or the process is
 * interrupted, the temporary file is removed and `out` is left as it was.
 * Stale temporary files of ended runs in the folder are removed first.
 * Errors thrown by `produce` itself pass on unchanged; those of writing are
 * phrased with `out`.
 */
export async function writeOutputWith(out: string, o: OutputOptions, produce: (sink: OutputSink) => void | Promise<void>): Promise<void> {
  await checkOutput(out, o);
  const folder = dirname(out);
  await removeStaleTemps(folder);
  const tmp = tempPath(out);
  // Tracked before it exists, so that no moment passes in which an interrupt would leave it behind.
  trackTempFile(tmp, true);
  let sink: FileSink;
  try {
    sink = FileSink.create(tmp);
  } catch (e) {
    trackTempFile(tmp, false);
    throw fileError(e, 'write', out);
  }
  // Writes queued by later(), in order; a synchronous write that comes while some are queued joins the queue.
  let queue: Promise<void> = Promise.resolve();
  let queued = 0;
  const enqueue = (op: () => void | Promise<void>): Promise<void> => {
    const before = queue;
    queued++;
    queue = before.then(op).then(
      () => void queued--,
      (e: unknown) => {
        queued--;
        throw fileError(e, 'write', out);
      },
    );
    // Awaited below (or by the producer); marked handled so that a failure waits for that instead of ending the process.
    queue.catch(() => undefined);
    return before;
  };
  const writing: OutputSink = {
    write(bytes) {
      if (queued > 0) {
        const copy = bytes.slice();
        void enqueue(() => sink.write(copy));
        return;
      }
      try {
        sink.write(bytes);
      } catch (e) {
        throw fileError(e, 'write', out);
      }
    },
    later: (bytes) => enqueue(() => sink.writeAsync(bytes)),
    // A required flag set once a field needs it (the prologue's bytes): after every write queued before it.
    patch(offset, bytes) {
      const copy = bytes.slice();
      if (queued > 0) {
        void enqueue(() => sink.patch(offset, copy));
        return;
      }
      try {
        sink.patch(offset, copy);
      } catch (e) {
        throw fileError(e, 'write', out);
      }
    },
  };
  try {
    try {
      await produce(writing);
    } finally {
      // No write may be in flight when the file is closed (its descriptor could be reused meanwhile).
      await queue.catch(() => undefined);
    }
    await queue;
    try {
      sink.close(true);
    } catch (e) {
      throw fileError(e, 'write', out);
    }
    await publish(tmp, out, o);
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
    // O_NONBLOCK and O_DIRECTORY: a folder replaced by a FIFO meanwhile cannot hold this up.
    const dir = await openFile(folder, fsConstants.O_RDONLY | (fsConstants.O_DIRECTORY ?? 0) | (fsConstants.O_NONBLOCK ?? 0));
    try {
      await dir.sync();
    } finally {
      await dir.close();
    }
  } catch {
    // Some file systems refuse fsync on a directory; the data itself is already flushed.
  }
}
