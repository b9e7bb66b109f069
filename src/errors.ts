/**
 * The two error types of rankfield. Every failure the library itself reports
 * is one of these: {@link FormatError} when bytes claiming to be an archive
 * are not a valid one, {@link InputError} when a caller's values, shape,
 * options or calls are unusable. Each carries a stable `code` from the tables
 * below, and a message that says what is wrong and where.
 *
 * Two other kinds pass through: errors of the file system as Node reports
 * them where the caller opens files itself (FileSource.open, a file sink:
 * ENOENT, EACCES, ...; `open(path)` turns them into an InputError of code
 * `file`), and whatever a caller's own ByteSource, Sink or band callback
 * throws (what a ByteSource answers is checked: a wrong answer is an
 * InputError). Any other error is
 * an internal assertion that no input should reach: a bug in rankfield.
 */

/** Codes of {@link FormatError}: what is wrong with an archive's bytes. */
export const FormatCode = {
  /** The file is too short to hold what it declares. */
  Truncated: 'truncated',
  /** The leading or trailing magic bytes are not rankfield's. */
  BadMagic: 'bad-magic',
  /** A format version or required flag this reader does not know. */
  Unsupported: 'unsupported',
  /** A stored CRC-32 does not match the bytes it covers. */
  Checksum: 'checksum',
  /** A structure decodes but its contents are not allowed (sizes, types, ranges). */
  Malformed: 'malformed',
  /** A declared size exceeds a reader limit. */
  Limit: 'limit',
} as const;
export type FormatCode = (typeof FormatCode)[keyof typeof FormatCode];

/** Codes of {@link InputError}: what is wrong with what a caller passed. */
export const InputCode = {
  /** The shape is empty, non-integer, or does not match the data. */
  Shape: 'shape',
  /** An unknown or unsupported data type. */
  Dtype: 'dtype',
  /** An error bound that cannot be used (unknown mode, value <= 0, NaN). */
  Bound: 'bound',
  /** Any other option out of its allowed range. */
  Option: 'option',
  /** An input file that is not in the format it claims. */
  File: 'file',
  /** A named field or variable that does not exist. */
  Missing: 'missing',
  /** A value that looks like an undeclared fill value would set the field's range (see the `fill` option of pack). */
  Fill: 'fill',
} as const;
export type InputCode = (typeof InputCode)[keyof typeof InputCode];

/** A malformed, truncated, corrupted or unsupported archive. */
export class FormatError extends Error {
  readonly code: FormatCode;
  constructor(code: FormatCode, message: string) {
    super(message);
    this.name = 'FormatError';
    this.code = code;
  }
}

/** Unusable input from the caller: values, shapes, options or input files. */
export class InputError extends Error {
  readonly code: InputCode;
  constructor(code: InputCode, message: string) {
    super(message);
    this.name = 'InputError';
    this.code = code;
  }
}
