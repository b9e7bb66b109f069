/**
 * Errors of the command line and how they are shown: every failure becomes
 * one line `rankfield: error: <message>` (exit 2); `--debug` adds the stack.
 */
import { CommanderError } from 'commander';
import { FormatError, InputError } from '../errors.js';

/** Exit codes of the command line. */
export const Exit = {
  /** Success; for `check`: every tile holds its bound and checksums. */
  Ok: 0,
  /** `check` (and `demo`) found a failure. */
  CheckFailed: 1,
  /** Unusable input: bad arguments, unreadable files, malformed archives. */
  Usage: 2,
} as const;

/** A refusal of the command line itself: bad option combinations, existing outputs, and so on. */
export class UsageError extends Error {
  constructor(message: string) {
    super(message);
    this.name = 'UsageError';
  }
}

/** A file system failure, already phrased with its path and what was being done. */
export class FileError extends Error {
  readonly code: string;
  constructor(message: string, code: string, options?: { cause?: unknown }) {
    super(message, options);
    this.name = 'FileError';
    this.code = code;
  }
}

const REASONS: Record<string, string> = {
  ENOENT: 'no such file or directory',
  EISDIR: 'is a directory',
  ENOTDIR: 'a part of the path is not a directory',
  EACCES: 'permission denied',
  EPERM: 'operation not permitted',
  EEXIST: 'already exists',
  ENOSPC: 'no space left on the device',
  EDQUOT: 'disk quota exceeded',
  EROFS: 'read-only file system',
  EMFILE: 'too many open files',
  ENFILE: 'too many open files in the system',
  EIO: 'input/output error',
  ENAMETOOLONG: 'file name too long',
  ELOOP: 'too many levels of symbolic links',
  EBUSY: 'resource busy',
  EXDEV: 'cannot rename across file systems',
  ERR_FS_FILE_TOO_LARGE: 'file too large to load into memory',
};

/** A Node system or file system error (a string `code` such as ENOENT or ERR_FS_FILE_TOO_LARGE), not one of rankfield's own. */
export function isSystemError(e: unknown): e is NodeJS.ErrnoException {
  if (!(e instanceof Error) || e instanceof FormatError || e instanceof InputError || e instanceof CommanderError) return false;
  const code = (e as NodeJS.ErrnoException).code;
  return typeof code === 'string' && (typeof (e as NodeJS.ErrnoException).errno === 'number' || code.startsWith('ERR_FS'));
}

/** Phrase a system error as `cannot <action> '<path>': <reason>`. */
export function fileError(e: unknown, action: string, path: string): unknown {
  if (e instanceof FileError || !isSystemError(e)) return e;
  const code = e.code as string;
  const reason = REASONS[code] ?? e.message.replace(/^[A-Z_]+: /, '');
  return new FileError(`cannot ${action} '${path}': ${reason}`, code, { cause: e });
}

/** The one-line message for any error. */
export function oneLine(e: unknown): string {
  let text: string;
  if (e instanceof CommanderError) text = e.message.replace(/^error: /, '');
  else if (e instanceof UsageError || e instanceof FileError || e instanceof InputError || e instanceof FormatError) text = e.message;
  else if (isSystemError(e)) {
    const reason = REASONS[e.code as string] ?? e.message;
    text = e.path ? `'${e.path}': ${reason}` : reason;
  } else if (e instanceof Error) text = `internal error: ${e.message} (rerun with --debug for the stack trace, and please report it)`;
  else text = `internal error: ${String(e)}`;
  return capLine(text.replace(/\s*\n\s*/g, ' ').trim());
}

/** Longest word of an error line kept whole (a long number, path or name typed by the user). */
export const MAX_WORD = 100;
/** Longest error line, in characters (after long words are shortened). */
export const MAX_LINE = 500;

/** `text` with its middle replaced by `...[N characters]...` so that about `keep` characters remain. */
export function elide(text: string, keep: number): string {
  const chars = [...text];
  if (chars.length <= keep) return text;
  const head = Math.ceil((keep * 2) / 3);
  const tail = keep - head;
  const cut = chars.length - head - tail;
  return `${chars.slice(0, head).join('')}...[${cut} characters]...${chars.slice(chars.length - tail).join('')}`;
}

/**
 * Cap an error line at a readable length: every word (a run without
 * spaces) longer than {@link MAX_WORD} keeps its start and end with the
 * middle elided, and a line still longer than {@link MAX_LINE} is elided in
 * its middle the same way. A 5000-digit shape thus shows as its first and
 * last digits and how many were left out.
 */
export function capLine(line: string): string {
  const short = line.replace(/\S+/g, (w) => ([...w].length > MAX_WORD ? elide(w, 72) : w));
  return [...short].length > MAX_LINE ? elide(short, MAX_LINE - 30) : short;
}

/** Write an error to stderr the way the command line shows errors. */
export function report(e: unknown, debug: boolean, writeErr: (s: string) => void): void {
  writeErr(`rankfield: error: ${oneLine(e)}\n`);
  if (debug && e instanceof Error && e.stack) writeErr(`${e.stack}\n`);
}

/** True when `--debug` appears among the arguments (before a `--`). */
export function wantsDebug(argv: readonly string[]): boolean {
  const end = argv.indexOf('--');
  return (end < 0 ? argv : argv.slice(0, end)).includes('--debug');
}
