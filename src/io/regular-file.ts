/**
 * Opening input files without ever blocking: a FIFO (named pipe) opened for
 * reading waits in open() until a writer appears, and a thread blocked
 * there cannot be stopped (not even by process.exit, which waits for it).
 * Inputs are therefore opened with O_NONBLOCK, which makes open() return at
 * once whatever the file is (it changes nothing for reads of a regular
 * file), and then refused unless fstat shows a regular file: only those
 * can be sized and read again, as every reader here needs.
 */
import { closeSync, constants, fstatSync, openSync, type Stats } from 'node:fs';
import { open as openFile, type FileHandle } from 'node:fs/promises';
import { InputCode, InputError } from '../errors.js';

/** Flags of every input open: read-only and never blocking (O_NONBLOCK is absent on Windows, where FIFOs are not files). */
export const READ_FLAGS = constants.O_RDONLY | (constants.O_NONBLOCK ?? 0);

/** What a file that is not a regular file is, in words ("a FIFO (named pipe)"). */
export function fileKind(st: Stats): string {
  if (st.isDirectory()) return 'a directory';
  if (st.isFIFO()) return 'a FIFO (named pipe)';
  if (st.isCharacterDevice()) return 'a character device';
  if (st.isBlockDevice()) return 'a block device';
  if (st.isSocket()) return 'a socket';
  if (st.isSymbolicLink()) return 'a symbolic link';
  return st.isFile() ? 'a regular file' : 'not a regular file';
}

/**
 * Refuse an input that is not a regular file. A directory gets an EISDIR
 * error shaped like Node's own (callers phrase those already); anything
 * else (FIFO, device, socket) an InputError with code `file`.
 */
export function checkRegular(st: Stats, path: string): void {
  if (st.isFile()) return;
  if (st.isDirectory()) {
    throw Object.assign(new Error(`EISDIR: illegal operation on a directory, open '${path}'`), { code: 'EISDIR', errno: -21, syscall: 'open', path });
  }
  throw new InputError(InputCode.File, `cannot read '${path}': it is ${fileKind(st)}, not a regular file (inputs must be files that can be sized and read again)`);
}

/** Open `path` read-only without blocking, refusing anything but a regular file; returns the descriptor and its stat. */
export function openRegularSync(path: string): { fd: number; stat: Stats } {
  const fd = openSync(path, READ_FLAGS);
  try {
    const stat = fstatSync(fd);
    checkRegular(stat, path);
    return { fd, stat };
  } catch (e) {
    closeSync(fd);
    throw e;
  }
}

/** Open `path` read-only without blocking, refusing anything but a regular file; the caller closes the handle. */
export async function openRegular(path: string): Promise<{ handle: FileHandle; stat: Stats }> {
  const handle = await openFile(path, READ_FLAGS);
  try {
    const stat = await handle.stat();
    checkRegular(stat, path);
    return { handle, stat };
  } catch (e) {
    await handle.close();
    throw e;
  }
}
