/**
 * `rankfield demo` on a small grid (the default 512 x 768 is for people,
 * `npm run demo`), and the scenario generator it uses.
 */
import { mkdirSync, readdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { corvaneBasin } from '../../src/demo/basin.js';
import { parseNpy } from '../../src/io/npy.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, rf, rfIn, tempDir } from './helpers.js';

const { dir, remove } = tempDir();
beforeAll(ensureBuilt);
afterAll(remove);

// A demo packs, unpacks and checks its field at four bounds (with the tile trial): 31 s, past
// CLI_TIMEOUT, in a run with a load average of 13-15 on this 2-core machine (three test suites and
// two busy loops at once), so three times that limit.
describe('rankfield demo', { timeout: 3 * CLI_TIMEOUT }, () => {
  it('packs at the four bounds, checks each, prints the table and keeps the files with --dir', async () => {
    const r = await rfIn(['demo', '--shape', '64x96', '--dir', 'keep'], dir);
    expect(r.code, r.stdout + r.stderr).toBe(0);
    expect(r.stdout).toMatch(/Corvane Basin/);
    expect(r.stdout).toMatch(/bound +bytes +ratio +error \/ E +RMSE degC +PSNR dB +pack +unpack +check/);
    const rows = r.stdout.split('\n').filter((l) => /^(rel|psnr):/.test(l));
    expect(rows.map((l) => l.split(/\s+/)[0])).toEqual(['rel:1e-2', 'rel:1e-3', 'rel:1e-4', 'psnr:60']);
    for (const row of rows) {
      expect(row).toMatch(/ ok$/);
      const fraction = Number(/ (\d+\.\d+) \((max|RMSE)\)/.exec(row)?.[1]);
      expect(fraction).toBeLessThanOrEqual(1); // achieved error over the resolved tolerance E
    }
    expect(r.stdout).toMatch(/all 4 checks passed/);
    const files = readdirSync(join(dir, 'keep')).sort();
    expect(files).toEqual(['corvane-sst.npy', 'corvane-sst.psnr-60.rfz', 'corvane-sst.rel-1e-2.rfz', 'corvane-sst.rel-1e-3.rfz', 'corvane-sst.rel-1e-4.rfz']);
    const orig = parseNpy(readFileSync(join(dir, 'keep', 'corvane-sst.npy')));
    expect([orig.shape, orig.dtype]).toEqual([[64, 96], 'f32']);
    // The kept files work with the other commands.
    const c = await rfIn(['check', 'keep/corvane-sst.rel-1e-3.rfz', '--against', 'keep/corvane-sst.npy'], dir);
    expect(c.code, c.stdout).toBe(0);
  });

  it('refuses to overwrite an earlier run in --dir without --force', async () => {
    expectCliError(await rfIn(['demo', '--shape', '64x96', '--dir', 'keep'], dir), /output 'keep\/corvane-sst\.npy' already exists; use --force/);
    expect((await rfIn(['demo', '--shape', '32x48', '--dir', 'keep', '--force'], dir)).code).toBe(0);
  });

  it('without --dir, works in a temporary folder and removes it', async () => {
    const tmp = join(dir, 'tmp');
    mkdirSync(tmp);
    const r = rf(['demo', '--shape', '48x80'], dir, { TMPDIR: tmp });
    expect(r.code, r.stdout + r.stderr).toBe(0);
    expect(r.stdout).toMatch(/temporary folder, removed at the end/);
    expect(readdirSync(tmp)).toEqual([]);
  });
});

describe('corvaneBasin', () => {
  it('is deterministic, marks land with the fill value or NaN, and depends on the seed', async () => {
    const a = corvaneBasin({ rows: 40, cols: 60 });
    const b = corvaneBasin({ rows: 40, cols: 60 });
    expect(Buffer.from(a.values.buffer).equals(Buffer.from(b.values.buffer))).toBe(true);
    expect(a.fill).toBe(-999);
    const land = a.values.filter((v) => v === -999).length;
    expect(land).toBe(a.landCells);
    expect(land).toBeGreaterThan(0);
    expect(land).toBeLessThan(a.values.length / 2);
    const n = corvaneBasin({ rows: 40, cols: 60, land: 'nan' });
    expect([n.fill, n.values.filter(Number.isNaN).length]).toEqual([null, land]);
    const other = corvaneBasin({ rows: 40, cols: 60, seed: 1 });
    expect(Buffer.from(other.values.buffer).equals(Buffer.from(a.values.buffer))).toBe(false);
  });
});
