/**
 * rankfield: lossy archiving of 2-D float fields under a stated error bound,
 * by tiled truncated SVD with a residual that makes pointwise bounds strict.
 */
export { pack, packAsync, ArchiveBuilder, type PackOptions, type ParallelPackOptions, MAX_TILE_SIDE } from './pack.js';
export { readBands, type ArchiveLocation, type BandReadOptions, type BandsRead } from './parallel/read.js';
export { MAX_THREADS, WorkerPool, type PoolOptions } from './parallel/pool.js';
export { chooseLayout } from './layout.js';
export { open } from './open-file.js';
export { Archive, type ArchiveInput, type FieldValues, type ReadOptions, type CheckReport, type CheckFailure, type BandOriginal, type OpenOptions, type TileEntry } from './archive.js';
export { parseBound, formatBound, resolveBound, isPointwise } from './codec/bound.js';
export { FormatError, InputError, FormatCode, InputCode } from './errors.js';
export { MemorySource, readRanges, coalesce, type ByteSource, type ByteRange, type CoalesceOptions } from './io/source.js';
export { HttpSource, type HttpSourceOptions } from './io/http-source.js';
export { FileSource } from './io/file-source.js';
export { MemorySink, type Sink } from './format/container.js';
export { DEFAULT_LIMITS, type Limits, type ArchiveHeader, type ArchiveIndex, type ArchiveDirectory, type FieldDirectory, type PageIndex, type FieldHeader, type FieldLayerRef, type FieldIndex, type Attrs } from './format/schema.js';
export type { Bound, BoundMode, Dtype, FloatArray } from './types.js';
export { VERSION_STRING } from './version.js';
export { MISSING_VALUES_KEY, missingValues, restoreMissing } from './missing.js';
export { Method, METHOD_NAMES } from './codec/payload.js';
export { MAX_TILE_CELLS } from './pack.js';
