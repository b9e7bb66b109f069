/**
 * The decoding entry point, `rankfield/decode`: open archives and read
 * fields or windows of them from bytes in memory (Uint8Array, ArrayBuffer),
 * any {@link ByteSource}, or an http(s) URL (an {@link HttpSource} of
 * default options; make one to set its options); file paths need the Node
 * entry. Nothing in its import graph uses Node built-ins, so it
 * runs in browsers, workers and other JavaScript runtimes with `fetch`.
 */
export { open, Archive, type ArchiveInput, type FieldValues, type ReadOptions, type OpenOptions, type CheckReport, type CheckFailure, type TileEntry } from './archive.js';
export { MemorySource, readRanges, coalesce, DEFAULT_MAX_GAP, type ByteSource, type ByteRange, type CoalesceOptions, type MergedRead } from './io/source.js';
export { HttpSource, DEFAULT_MAX_WHOLE_FILE, type HttpSourceOptions } from './io/http-source.js';
export { FormatError, InputError, FormatCode, InputCode } from './errors.js';
export { parseBound, formatBound, isPointwise } from './codec/bound.js';
export { DEFAULT_LIMITS, type Limits, type ArchiveHeader, type ArchiveIndex, type ArchiveDirectory, type FieldDirectory, type PageIndex, type FieldHeader, type FieldLayerRef, type FieldIndex, type Attrs } from './format/schema.js';
export type { Bound, BoundMode, Dtype, FloatArray } from './types.js';
export { VERSION_STRING } from './version.js';
export { MISSING_VALUES_KEY, missingValues, restoreMissing } from './missing.js';
