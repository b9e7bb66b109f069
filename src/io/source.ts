/**
 * Where archive bytes come from: anything that can read a byte range and
 * knows its size, and {@link readRanges}, which fetches many ranges from
 * one with as few reads as is worth it.
 */
import { FormatCode, FormatError, InputCode, InputError } from '../errors.js';

/** A random-access byte source (memory, file, HTTP). */
export interface ByteSource {
  /** Total size in bytes. */
  size(): Promise<number>;
  /** Exactly `length` bytes from `offset`; throws if the source is shorter. */
  read(offset: number, length: number): Promise<Uint8Array>;
  /**
   * Optional: the bytes of several ranges fetched together, in as few round
   * trips as the source can (over HTTP, one request carrying many ranges).
   * Returns exactly the bytes of each range, in the given order.
   */
  readMany?(ranges: readonly ByteRange[]): Promise<Uint8Array[]>;
  /** Release resources (file handles); optional. */
  close?(): Promise<void>;
  /** For messages: a path or URL. */
  readonly label: string;
}

/** A byte source over bytes already in memory. */
export class MemorySource implements ByteSource {
  readonly label: string;
  constructor(
    private readonly bytes: Uint8Array,
    label = 'archive',
  ) {
    this.label = label;
  }
  async size(): Promise<number> {
    return this.bytes.length;
  }
  async read(offset: number, length: number): Promise<Uint8Array> {
    if (!Number.isSafeInteger(offset) || !Number.isSafeInteger(length) || offset < 0 || length < 0) {
      throw new FormatError(FormatCode.Malformed, `${this.label}: byte range ${offset}+${length} is not a pair of non-negative integers`);
    }
    if (offset + length > this.bytes.length) {
      throw new FormatError(FormatCode.Truncated, `${this.label}: bytes ${offset}..${offset + length} lie beyond its ${this.bytes.length} bytes`);
    }
    return this.bytes.subarray(offset, offset + length);
  }
}

/** A byte range: `length` bytes from `offset`. */
export interface ByteRange {
  offset: number;
  length: number;
}

/** How {@link readRanges} merges ranges. */
export interface CoalesceOptions {
  /**
   * Largest gap in bytes between two ranges that are still fetched by one
   * read (the gap's bytes are fetched and dropped). Default 64 KiB.
   */
  maxGap?: number;
  /**
   * Largest share of dropped gap bytes in one merged read, relative to the
   * wanted bytes it carries; so no merged read fetches more than
   * (1 + maxWaste) times what it is for. Default 0.25.
   */
  maxWaste?: number;
  /** Merged reads in flight at once. Default 6 (what browsers allow per HTTP/1.1 host). */
  concurrency?: number;
  /**
   * Largest number of merged reads handed to one {@link ByteSource.readMany}
   * call (one HTTP request) for sources that have it. Default 64; 1 turns
   * the grouping off.
   */
  rangesPerRequest?: number;
}

/** Default {@link CoalesceOptions.rangesPerRequest}. */
export const DEFAULT_RANGES_PER_REQUEST = 64;

/** Default {@link CoalesceOptions.maxGap}: 64 KiB. */
export const DEFAULT_MAX_GAP = 64 * 1024;
/** Default {@link CoalesceOptions.maxWaste}. */
export const DEFAULT_MAX_WASTE = 0.25;
/** Default {@link CoalesceOptions.concurrency}. */
export const DEFAULT_CONCURRENCY = 6;

/** One read that serves several wanted ranges. */
export interface MergedRead extends ByteRange {
  /** Positions (in the caller's list) of the ranges this read serves. */
  members: number[];
}

function nonNegative(v: unknown, what: string): number {
  if (typeof v !== 'number' || !(v >= 0)) throw new InputError(InputCode.Option, `${what} must be a number >= 0, got ${String(v)}`);
  return v;
}

/**
 * Plan the reads for a list of ranges: sort them by offset and merge
 * neighbours whose gap is at most `maxGap` while the merged read's dropped
 * bytes stay within `maxWaste` of its wanted bytes. Overlapping and repeated
 * ranges share one read. Empty ranges need no read and are left out.
 */
export function coalesce(ranges: readonly ByteRange[], options: CoalesceOptions = {}): MergedRead[] {
  const maxGap = nonNegative(options.maxGap ?? DEFAULT_MAX_GAP, 'maxGap');
  const maxWaste = nonNegative(options.maxWaste ?? DEFAULT_MAX_WASTE, 'maxWaste');
  const order = ranges
    .map((r, i) => {
      if (!Number.isSafeInteger(r.offset) || !Number.isSafeInteger(r.length) || r.offset < 0 || r.length < 0) {
        throw new FormatError(FormatCode.Malformed, `byte range ${r.offset}+${r.length} is not a pair of non-negative integers`);
      }
      return i;
    })
    .filter((i) => ranges[i].length > 0)
    .sort((a, b) => ranges[a].offset - ranges[b].offset || a - b);
  const out: MergedRead[] = [];
  let run: (MergedRead & { wanted: number; dropped: number }) | null = null;
  for (const i of order) {
    const { offset, length } = ranges[i];
    if (run !== null) {
      const end = run.offset + run.length;
      const gap = offset - end;
      const newBytes = Math.max(0, offset + length - Math.max(end, offset));
      if (gap <= 0 || (gap <= maxGap && run.dropped + gap <= maxWaste * (run.wanted + newBytes))) {
        run.length = Math.max(end, offset + length) - run.offset;
        run.wanted += newBytes;
        run.dropped += Math.max(0, gap);
        run.members.push(i);
        continue;
      }
      out.push({ offset: run.offset, length: run.length, members: run.members });
    }
    run = { offset, length, members: [i], wanted: length, dropped: 0 };
  }
  if (run !== null) out.push({ offset: run.offset, length: run.length, members: run.members });
  return out;
}

/**
 * Fetch every range from `src`, merging adjacent and near ranges into one
 * read each (see {@link coalesce}); up to `concurrency` reads are in flight.
 * Returns the bytes of each range, in the caller's order (views into the
 * merged reads' buffers). The first failing read rejects the whole call.
 */
export async function readRanges(src: ByteSource, ranges: readonly ByteRange[], options: CoalesceOptions = {}): Promise<Uint8Array[]> {
  const plan = coalesce(ranges, options);
  const concurrency = options.concurrency ?? DEFAULT_CONCURRENCY;
  if (!Number.isInteger(concurrency) || concurrency < 1) throw new InputError(InputCode.Option, `concurrency must be an integer >= 1, got ${String(concurrency)}`);
  const perRequest = options.rangesPerRequest ?? DEFAULT_RANGES_PER_REQUEST;
  if (!Number.isInteger(perRequest) || perRequest < 1) throw new InputError(InputCode.Option, `rangesPerRequest must be an integer >= 1, got ${String(perRequest)}`);
  // One range (a read of a field in one tile): the read itself, without the jobs and workers below.
  if (ranges.length === 1 && plan.length === 1) {
    const bytes = await src.read(plan[0].offset, plan[0].length);
    if (bytes.length !== plan[0].length) {
      throw new FormatError(FormatCode.Truncated, `${src.label}: read of bytes ${plan[0].offset}..${plan[0].offset + plan[0].length} returned ${bytes.length} bytes`);
    }
    return [bytes];
  }
  // Jobs: groups of merged reads, one readMany call each when the source has it, else one read each.
  const many = src.readMany?.bind(src);
  const jobs: MergedRead[][] = [];
  const step = many && plan.length > 1 ? perRequest : 1;
  for (let k = 0; k < plan.length; k += step) jobs.push(plan.slice(k, k + step));
  const out: Uint8Array[] = ranges.map(() => new Uint8Array(0));
  let next = 0;
  let failed = false;
  const place = (read: MergedRead, bytes: Uint8Array) => {
    if (bytes.length !== read.length) {
      throw new FormatError(FormatCode.Truncated, `${src.label}: read of bytes ${read.offset}..${read.offset + read.length} returned ${bytes.length} bytes`);
    }
    for (const i of read.members) {
      const at = ranges[i].offset - read.offset;
      out[i] = bytes.subarray(at, at + ranges[i].length);
    }
  };
  const worker = async (): Promise<void> => {
    while (!failed && next < jobs.length) {
      const job = jobs[next++];
      try {
        if (job.length === 1 || !many) {
          for (const read of job) place(read, await src.read(read.offset, read.length));
        } else {
          const got = await many(job.map((r) => ({ offset: r.offset, length: r.length })));
          if (got.length !== job.length) throw new FormatError(FormatCode.Truncated, `${src.label}: a read of ${job.length} ranges returned ${got.length}`);
          job.forEach((read, i) => place(read, got[i]));
        }
      } catch (e) {
        failed = true;
        throw e;
      }
    }
  };
  const workers: Promise<void>[] = [];
  for (let k = 0; k < Math.min(concurrency, jobs.length); k++) workers.push(worker());
  await Promise.all(workers);
  return out;
}
