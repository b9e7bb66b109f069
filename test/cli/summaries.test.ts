/**
 * Summaries for people: `show` says in words how the tiles and bytes are
 * used, hides the archive's own rankfield: attributes (kept in --json), and
 * gives each field of a many-field archive its size and ratio. Figures are
 * checked against the index and the file sizes. (What `pack` of a NetCDF file
 * with several variables prints is checked in netcdf.test.ts, on the archive
 * the tests there pack once.)
 */
import { readFileSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ArchiveBuilder, MemorySink, open } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { CLI_TIMEOUT, ensureBuilt, rfIn, tempDir, volcano } from './helpers.js';

const { dir, remove } = tempDir();
const vol = volcano();
const [ROWS, COLS] = vol.shape;

beforeAll(async () => {
  ensureBuilt();
  writeFileSync(join(dir, 'volcano.npy'), formatNpy({ data: vol.values, shape: vol.shape, dtype: 'f64' }));
});
afterAll(remove);

describe('show in words', { timeout: CLI_TIMEOUT }, () => {
  it('states the share of tiles with a low-rank part, their mean rank and the bytes by role, as the index says', async () => {
    expect((await rfIn(['pack', 'volcano.npy', '-o', 'p.rfz', '--bound', 'psnr:40', '--tile', '16'], dir)).code).toBe(0);
    const r = await rfIn(['show', 'p.rfz'], dir);
    expect(r.code, r.stderr).toBe(0);
    const ix = (await (await open(readFileSync(join(dir, 'p.rfz')))).loadIndex()).fields[0];
    const low = ix.rank.filter((k, t) => ix.method[t] === 1 && k > 0);
    const tiles = ix.rank.length;
    expect(tiles).toBe(Math.ceil(ROWS / 16) * Math.ceil(COLS / 16));
    const mean = low.reduce((a, b) => a + b, 0) / low.length;
    expect(r.stdout).toContain(`holds        ${low.length} of ${tiles} tiles (${Math.round((100 * low.length) / tiles)}%) use a low-rank part, of mean rank ${mean.toFixed(1)}`);
    const m = /bytes +(\d+)% low-rank factors, (\d+)% residual, (\d+)% exactly stored values, (\d+)% tile headers and masks/.exec(r.stdout);
    expect(m).not.toBeNull();
    const sum = m!.slice(1).map(Number).reduce((a, b) => a + b, 0);
    expect(Math.abs(sum - 100)).toBeLessThanOrEqual(2); // four rounded percentages
    const j = JSON.parse((await rfIn(['show', 'p.rfz', '--json'], dir)).stdout);
    const f = j.fields[0];
    expect(f.use).toEqual({ tiles, lowRank: low.length, meanRank: mean, residualOnly: tiles - low.length - f.exactTiles, exact: f.exactTiles });
    expect(f.bytes.factors + f.bytes.residual + f.bytes.exact + f.bytes.tileHeaders).toBe(f.payloadBytes);
    expect(j.containerBytes).toBe(statSync(join(dir, 'p.rfz')).size - f.payloadBytes);
  });

  it('hides rankfield: attributes from the text, keeps them in --json, and gives each field its size and ratio', async () => {
    const sink = new MemorySink();
    const b = new ArchiveBuilder(sink, { title: 'two fields', 'rankfield:nc_format': 'classic' });
    b.add(vol.values, [ROWS, COLS], { bound: 'abs:0.5', name: 'height', tile: 32, attrs: { units: 'm', 'rankfield:nc_type': 'double' } });
    b.add(Float64Array.from({ length: 120 }, (_, c) => Math.sin(c / 9)), [10, 12], { bound: 'abs:1e-3', name: 'wave', tile: 8 });
    b.finish();
    writeFileSync(join(dir, 'two.rfz'), sink.bytes());
    const r = await rfIn(['show', 'two.rfz'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).not.toContain('rankfield:');
    expect(r.stdout).toMatch(/attrs +title="two fields"/);
    expect(r.stdout).toMatch(/attrs +units="m"/);
    const j = JSON.parse((await rfIn(['show', 'two.rfz', '--json'], dir)).stdout);
    expect(j.attrs['rankfield:nc_format']).toBe('classic');
    expect(j.fields[0].attrs['rankfield:nc_type']).toBe('double');
    for (const f of j.fields) {
      const size = f.payloadBytes < 1000 ? `${f.payloadBytes} bytes` : `${Number((f.payloadBytes / 1000).toPrecision(3))} kB`;
      expect(r.stdout).toContain(`  ${f.name}: ${size}, ratio ${(f.rawBytes / f.payloadBytes).toFixed(2)}`);
    }
  });
});
