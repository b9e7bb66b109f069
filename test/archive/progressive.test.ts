/**
 * Progressive reads: asking for a looser bound than the archive holds reads
 * only a prefix of each tile's payload (its factor groups, no residual) when
 * the prefix errors recorded at encode time meet that bound. Checked against
 * the original values of the vega-datasets annual-precip grid (open data:
 * data/annual-precip.json, 360 x 168), not against the recorded figures alone.
 */
import { describe, expect, it } from 'vitest';
import { FormatError, MemorySource, open, pack, type ByteSource } from '../../src/index.js';
import { precip } from './datasets.js';
import { up32 } from '../../src/format/schema.js';

/** A memory source that counts the bytes it hands out. */
class CountingSource implements ByteSource {
  readonly label = 'counted';
  fetched = 0;
  private readonly inner: MemorySource;
  constructor(bytes: Uint8Array) {
    this.inner = new MemorySource(bytes);
  }
  size(): Promise<number> {
    return this.inner.size();
  }
  async read(offset: number, length: number): Promise<Uint8Array> {
    this.fetched += length;
    return this.inner.read(offset, length);
  }
}

/** Largest |x - y| and RMSE over all cells. */
function errors(x: ArrayLike<number>, y: ArrayLike<number>): { max: number; rmse: number } {
  let max = 0;
  let sq = 0;
  for (let i = 0; i < x.length; i++) {
    const d = Math.abs(x[i] - y[i]);
    if (!(d <= max)) max = d;
    sq += d * d;
  }
  return { max, rmse: Math.sqrt(sq / x.length) };
}

describe('progressive reads of annual-precip', () => {
  const g = precip();
  const values = Float32Array.from(g.values);
  // At rel:1e-2 with 32x32 tiles a few tiles are low-rank with a residual after their factors
  // (most are rank 0: the integer grid makes rank 0 with a lattice step the cheapest).
  // Prefixes are recorded for progressive layouts only.
  const bytes = pack(values, g.shape, { bound: 'rel:1e-2', tile: 32, name: 'precip', progressive: true });

  it('records prefixes for low-rank tiles', async () => {
    const a = await open(bytes);
    const ix = (await a.loadIndex()).fields[0];
    expect(ix.prefix).toBeDefined();
    expect(ix.prefix!.filter((p) => p.length > 0).length).toBeGreaterThanOrEqual(2);
    ix.prefix!.forEach((p, t) => {
      expect(p.length % 4).toBe(0);
      for (let k = 0; k < p.length; k += 4) expect(p[k]).toBeLessThan(ix.length[t]);
    });
  });

  for (const bound of ['abs:2000', 'abs:800', 'rmse:600', 'psnr:25']) {
    it(`${bound}: the values satisfy the bound the result states, measured against the original`, async () => {
      const src = new CountingSource(bytes);
      // No merging of nearby reads, so the count is exactly what the reader asked for.
      const a = await open(src, { coalesce: { maxGap: 0 } });
      const before = src.fetched;
      const got = await a.read('precip', { bound });
      const used = src.fetched - before;
      const e = errors(values, got.values);
      // The stated figures are what the returned values satisfy (to rounding of the RMSE sum).
      expect(e.max).toBeLessThanOrEqual(got.achieved.maxErr);
      expect(e.rmse).toBeLessThanOrEqual(got.achieved.rmse * (1 + 1e-9));
      const tol = a.header.fields[0].bound.tolerance;
      const range = a.header.fields[0].bound.range!;
      const span = range[1] - range[0];
      // Every tile meets the requested bound or the archive's own (PSNR = 20 log10(range / RMSE), by definition).
      const requested = bound.startsWith('abs:') ? Number(bound.slice(4)) : bound.startsWith('rmse:') ? Number(bound.slice(5)) : span / 10 ** (Number(bound.slice(5)) / 20);
      if (bound.startsWith('abs:')) expect(got.achieved.maxErr).toBeLessThanOrEqual(Math.max(requested, tol));
      else expect(got.achieved.rmse).toBeLessThanOrEqual(Math.max(requested, tol));
      if (got.prefixTiles > 0) {
        // The read also fetched every index page of the field (since version 2 a read takes them with the first read).
        const pages = a.directory.fields[0].page_length.reduce((s, x) => s + x, 0);
        const payloads = (await a.loadIndex()).fields[0].length.reduce((s, x) => s + x, 0);
        expect(used - pages).toBeLessThan(payloads);
      }
    });
  }

  it('loose enough bounds are served from prefixes, and fetch fewer bytes than a whole read', async () => {
    const whole = new CountingSource(bytes);
    await (await open(whole)).read('precip');
    const loose = new CountingSource(bytes);
    const got = await (await open(loose, { coalesce: { maxGap: 0 } })).read('precip', { bound: 'abs:3000' });
    expect(got.prefixTiles).toBeGreaterThan(0);
    expect(loose.fetched).toBeLessThan(whole.fetched);
  });

  it('a bound tighter than the archive holds reads whole payloads and states the archive figures', async () => {
    const a = await open(bytes);
    const got = await a.read('precip', { bound: 'abs:1e-9' });
    expect(got.prefixTiles).toBe(0);
    // The summary's max_err is the largest recorded tile figure rounded up to binary32 (spec/FORMAT.md 7.4).
    expect(up32(got.achieved.maxErr)).toBe((await a.loadIndex()).fields[0].summary.max_err);
  });

  it('a window with a bound equals the same window of the progressive whole read', async () => {
    const a = await open(bytes);
    const whole = await a.read('precip', { bound: 'abs:2000' });
    const win = await a.read('precip', { bound: 'abs:2000', rows: [30, 97], cols: [50, 201] });
    for (let i = 30; i < 97; i++) {
      for (let j = 50; j < 201; j++) expect(win.values[(i - 30) * 151 + (j - 50)]).toBe(whole.values[i * 360 + j]);
    }
  });

  it('a damaged prefix is refused with a checksum error naming the tile', async () => {
    const a = await open(bytes);
    const ix = (await a.loadIndex()).fields[0];
    const t = ix.prefix!.findIndex((p) => p.length > 0);
    const bad = bytes.slice();
    bad[ix.offset[t] + 5] ^= 0x01; // inside the fixed part: covered by every prefix
    const b = await open(bad);
    await expect(b.read('precip', { bound: 'abs:3000' })).rejects.toSatisfy((e: unknown) => e instanceof FormatError && e.code === 'checksum' && e.message.includes(`tile ${t}`));
  });
});

describe('progressive layout (factors in groups of ranks 1, 1, 2, 4, ...)', () => {
  const g = precip();
  const values = Float32Array.from(g.values);
  // psnr:35 on annual-precip keeps several ranks per 64x64 tile; no residual, so the prefixes are rank prefixes.
  // (At psnr:40 a rank-0 residual with rate-distortion optimised codes is now smaller.)
  const plain = pack(values, g.shape, { bound: 'psnr:35', name: 'precip', tile: 64 });
  const progressive = pack(values, g.shape, { bound: 'psnr:35', name: 'precip', tile: 64, progressive: true });

  it('decodes to the same values as the one-group layout would allow, within the same bound', async () => {
    const a = await open(progressive);
    const got = await a.read('precip');
    const tol = a.header.fields[0].bound.tolerance;
    expect(errors(values, got.values).rmse).toBeLessThanOrEqual(tol);
    expect((await a.check(values)).ok).toBe(true);
    // The grouping costs bytes: report it by asserting only that both archives are valid and the plain one is no larger.
    expect(plain.length).toBeLessThanOrEqual(progressive.length);
  });

  it('records several rank prefixes per tile, and a looser RMSE reads fewer bytes, within what it states', async () => {
    const src = new CountingSource(progressive);
    const a = await open(src, { coalesce: { maxGap: 0 } });
    const ix = (await a.loadIndex()).fields[0];
    expect(ix.prefix!.some((p) => p.length >= 8)).toBe(true); // at least two prefixes in some tile
    const before = src.fetched;
    const got = await a.read('precip', { bound: 'rmse:1000' });
    const used = src.fetched - before;
    expect(got.prefixTiles).toBeGreaterThan(0);
    expect(used).toBeLessThan(ix.length.reduce((s, x) => s + x, 0));
    const e = errors(values, got.values);
    expect(e.max).toBeLessThanOrEqual(got.achieved.maxErr);
    expect(e.rmse).toBeLessThanOrEqual(got.achieved.rmse * (1 + 1e-9));
    expect(got.achieved.rmse).toBeLessThanOrEqual(1000);
  });
});
