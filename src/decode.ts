/**
 * The decoding entry point, `rankfield/decode`: open archives and read
 * fields or windows of them from bytes in memory or any {@link ByteSource};
 * `open` takes no URL, so to read over http(s) give it an
 * {@link HttpSource}. Nothing in its import graph uses Node built-ins, so it
 * runs in browsers, workers and other JavaScript runtimes with `fetch`.
 */
export { open, Archive, type FieldValues, type ReadOptions, type OpenOptions, type CheckReport, type CheckFailure, type TileEntry } from './archive.js';
export { MemorySource, readRanges, coalesce, DEFAULT_MAX_GAP, type ByteSource, type ByteRange, type CoalesceOptions, type MergedRead } from './format/source.js';
export { HttpSource, DEFAULT_MAX_WHOLE_FILE, type HttpSourceOptions } from './format/http-source.js';
export { FormatError, InputError, FormatCode, InputCode } from './errors.js';
export { parseBound, formatBound, isPointwise } from './codec/bound.js';
export { DEFAULT_LIMITS, type Limits, type ArchiveHeader, type ArchiveIndex, type ArchiveDirectory, type FieldDirectory, type PageIndex, type FieldHeader, type FieldIndex, type Attrs } from './format/schema.js';
export type { Bound, BoundMode, Dtype, FloatArray } from './types.js';
export { VERSION_STRING } from './version.js';
