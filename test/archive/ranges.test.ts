/**
 * Merging byte ranges (coalesce) and fetching them (readRanges): the bytes
 * returned for each range are the source's own bytes at that range (checked
 * against slicing the buffer directly), and merged reads respect the gap and
 * waste limits.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { FormatError, InputError, MemorySource, type ByteSource } from '../../src/index.js';
import { coalesce, readRanges } from '../../src/io/source.js';
import { expectSameBytes } from '../same-bytes.js';

const bytes = Uint8Array.from({ length: 1 << 16 }, (_, i) => (i * 131 + (i >> 9)) & 0xff);

describe('coalesce', () => {
  it('merges adjacent ranges, keeps far ones apart, and leaves out empty ones', () => {
    const plan = coalesce(
      [
        { offset: 100, length: 10 },
        { offset: 0, length: 50 },
        { offset: 50, length: 50 },
        { offset: 10_000, length: 5 },
        { offset: 500, length: 0 },
      ],
      { maxGap: 0 },
    );
    expect(plan).toEqual([
      { offset: 0, length: 110, members: [1, 2, 0] },
      { offset: 10_000, length: 5, members: [3] },
    ]);
  });

  it('bridges a gap only within maxGap and while the dropped bytes stay within maxWaste of the wanted ones', () => {
    const r = [
      { offset: 0, length: 100 },
      { offset: 120, length: 100 },
    ];
    // Gap 20 <= 0.25 x 200 wanted: merged.
    expect(coalesce(r, { maxGap: 64, maxWaste: 0.25 })).toHaveLength(1);
    // Gap 20 > maxGap 10: apart.
    expect(coalesce(r, { maxGap: 10, maxWaste: 0.25 })).toHaveLength(2);
    // Gap 20 > 0.05 x 200: apart.
    expect(coalesce(r, { maxGap: 64, maxWaste: 0.05 })).toHaveLength(2);
  });

  it('never fetches more than (1 + maxWaste) x the wanted bytes per merged read', () => {
    fc.assert(
      fc.property(
        fc.array(fc.tuple(fc.integer({ min: 0, max: 100_000 }), fc.integer({ min: 0, max: 5000 })), { maxLength: 60 }),
        fc.double({ min: 0, max: 2, noNaN: true }),
        (pairs, maxWaste) => {
          const ranges = pairs.map(([offset, length]) => ({ offset, length }));
          const plan = coalesce(ranges, { maxGap: 1 << 20, maxWaste });
          const covered = new Set<number>();
          for (const read of plan) {
            // Wanted bytes of this read: the union of its members.
            const wanted = new Set<number>();
            for (const i of read.members) {
              const m = ranges[i];
              expect(m.offset).toBeGreaterThanOrEqual(read.offset);
              expect(m.offset + m.length).toBeLessThanOrEqual(read.offset + read.length);
              for (let b = m.offset; b < m.offset + m.length; b++) wanted.add(b);
              covered.add(i);
            }
            expect(read.length).toBeLessThanOrEqual(wanted.size * (1 + maxWaste) + 1e-9);
          }
          ranges.forEach((r, i) => expect(covered.has(i) || r.length === 0).toBe(true));
        },
      ),
      { numRuns: 200, seed: 7 },
    );
  });

  it('refuses ranges that are not pairs of non-negative integers, and bad options', () => {
    expect(() => coalesce([{ offset: -1, length: 2 }])).toThrow(FormatError);
    expect(() => coalesce([{ offset: 0.5, length: 2 }])).toThrow(FormatError);
    expect(() => coalesce([], { maxGap: -1 })).toThrow(InputError);
    expect(() => coalesce([], { maxWaste: Number.NaN })).toThrow(InputError);
  });
});

/** A memory source that counts reads and the most in flight at once. */
class Counting implements ByteSource {
  readonly label = 'counting';
  reads = 0;
  inFlight = 0;
  maxInFlight = 0;
  private readonly inner = new MemorySource(bytes);
  async size() {
    return bytes.length;
  }
  async read(offset: number, length: number) {
    this.reads++;
    this.inFlight++;
    this.maxInFlight = Math.max(this.maxInFlight, this.inFlight);
    await new Promise((r) => setTimeout(r, 1));
    try {
      return await this.inner.read(offset, length);
    } finally {
      this.inFlight--;
    }
  }
}

describe('readRanges', () => {
  it('returns each range as the source holds it, in the caller order, whatever the merging', async () => {
    await fc.assert(
      fc.asyncProperty(
        fc.array(fc.tuple(fc.integer({ min: 0, max: bytes.length }), fc.integer({ min: 0, max: 3000 })), { maxLength: 40 }),
        fc.constantFrom(0, 100, 1 << 16),
        async (pairs, maxGap) => {
          const ranges = pairs.map(([o, l]) => ({ offset: o, length: Math.min(l, bytes.length - o) }));
          const got = await readRanges(new MemorySource(bytes), ranges, { maxGap, maxWaste: 1 });
          ranges.forEach((r, i) => expectSameBytes(got[i], bytes.subarray(r.offset, r.offset + r.length), `range ${i}`));
        },
      ),
      { numRuns: 100, seed: 11 },
    );
  });

  it('keeps at most `concurrency` reads in flight', async () => {
    const src = new Counting();
    const ranges = Array.from({ length: 30 }, (_, k) => ({ offset: k * 2000, length: 100 }));
    await readRanges(src, ranges, { maxGap: 0, concurrency: 3 });
    expect(src.reads).toBe(30);
    expect(src.maxInFlight).toBe(3);
  });

  it('refuses a short read with FormatError Truncated, one range or several; an empty range is read from nothing', async () => {
    // A source that gives one byte less than asked: the check readRanges makes of every read.
    const short: ByteSource = { label: 'short', size: async () => bytes.length, read: async (offset, length) => bytes.subarray(offset, offset + length - 1) };
    for (const ranges of [[{ offset: 100, length: 50 }], [{ offset: 100, length: 50 }, { offset: 40000, length: 10 }]]) {
      const e = await readRanges(short, ranges).then(
        () => null,
        (err: unknown) => err,
      );
      expect(e, `${ranges.length} range(s)`).toBeInstanceOf(FormatError);
      expect((e as FormatError).message).toBe('short: read of bytes 100..150 returned 49 bytes');
    }
    const none: ByteSource = { label: 'none', size: async () => 0, read: async () => Promise.reject(new Error('no read expected')) };
    const got = await readRanges(none, [{ offset: 5, length: 0 }]);
    expect(got.length).toBe(1);
    expect(got[0].length).toBe(0);
  });

  it('checks its options with one range as with several', async () => {
    for (const bad of [{ concurrency: 0 }, { rangesPerRequest: 1.5 }, { maxGap: -1 }]) {
      for (const ranges of [[{ offset: 0, length: 10 }], [{ offset: 0, length: 10 }, { offset: 500, length: 10 }]]) {
        await expect(readRanges(new MemorySource(bytes), ranges, bad), JSON.stringify(bad)).rejects.toBeInstanceOf(InputError);
      }
    }
  });

  it('passes on the failure of a read', async () => {
    const e = await readRanges(new MemorySource(bytes), [{ offset: bytes.length - 10, length: 20 }]).then(
      () => null,
      (err: unknown) => err,
    );
    expect(e).toBeInstanceOf(FormatError);
    expect((e as FormatError).message).toMatch(/lie beyond/);
  });
});
