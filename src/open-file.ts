/**
 * `open` of the Node entry: what the browser-safe `open` takes, and also a
 * file path or file: URL, read with random access by a {@link FileSource}.
 * Every failure is a FormatError (not an archive) or an InputError (an
 * argument of the wrong kind, or a file that cannot be opened: code `file`,
 * with the system's reason).
 */
import { fileURLToPath } from 'node:url';
import { openOn, type Archive, type OpenOptions } from './archive.js';
import { InputCode, InputError } from './errors.js';
import type { ByteSource } from './io/source.js';
import { FileSource } from './io/file-source.js';

/** Open a path or file: URL as a {@link FileSource}; failures of the file system become an InputError naming the path. */
async function fileSource(where: string | URL): Promise<ByteSource> {
  let path: string;
  try {
    path = typeof where === 'string' && !/^file:/i.test(where) ? where : fileURLToPath(where);
  } catch {
    throw new InputError(InputCode.Option, `'${String(where)}' is neither an http(s) URL nor a file path or file: URL`);
  }
  try {
    return await FileSource.open(path);
  } catch (e) {
    if (e instanceof InputError) throw e;
    const code = (e as NodeJS.ErrnoException | null)?.code;
    const reason = e instanceof Error ? e.message : String(e);
    throw new InputError(InputCode.File, `cannot open archive '${path}': ${typeof code === 'string' ? code : reason}${typeof code === 'string' ? ` (${reason})` : ''}`);
  }
}

/**
 * Open an archive from bytes in memory (Uint8Array or ArrayBuffer), any
 * {@link ByteSource}, an http(s) URL, or a file path or file: URL. The
 * archive's {@link Archive.close} closes a file or connection it opened.
 */
export async function open(source: Uint8Array | ArrayBuffer | ByteSource | URL | string, options: OpenOptions = {}): Promise<Archive> {
  return openOn(source, options, fileSource);
}
