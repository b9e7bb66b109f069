/**
 * `pack --progressive` and `unpack --bound` on the command line: a looser
 * bound reads prefixes of the tiles of a progressive archive (and none of
 * an archive packed without the option), a stricter one is refused. Data:
 * vega-datasets data/annual-precip.json (360 x 168, open data), as float32;
 * the values read back are measured against it.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { formatNpy, parseNpy } from '../../src/io/npy.js';
import { precip } from '../archive/datasets.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, maxAbsError, rfIn, tempDir } from './helpers.js';

let t: ReturnType<typeof tempDir>;
const g = precip();
const values = Float32Array.from(g.values);

beforeAll(async () => {
  ensureBuilt();
  t = tempDir('rankfield-prog-');
  writeFileSync(join(t.dir, 'precip.npy'), formatNpy({ data: values, shape: g.shape, dtype: 'f32' }));
  for (const [out, extra] of [['p.rfz', ['--progressive']], ['w.rfz', []]] as const) {
    const r = await rfIn(['pack', 'precip.npy', '-o', out, '--bound', 'rel:1e-2', '--tile', '32', ...extra], t.dir);
    expect(r.code, r.stderr).toBe(0);
  }
}, CLI_TIMEOUT);
afterAll(() => t?.remove());

describe('pack --progressive, unpack --bound', { timeout: CLI_TIMEOUT }, () => {
  it('a looser bound reads factor prefixes of a progressive archive, and the values hold it', async () => {
    const r = await rfIn(['unpack', 'p.rfz', '-o', 'coarse.npy', '--bound', 'abs:2000'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    const m = /requested abs:2000: (\d+) of the tiles read as factors only/.exec(r.stdout);
    expect(m, r.stdout).not.toBeNull();
    expect(Number(m![1])).toBeGreaterThan(0);
    const got = parseNpy(new Uint8Array(readFileSync(join(t.dir, 'coarse.npy'))), 'coarse.npy');
    // abs:E means |x - x'| <= E for every valid value (the bound's definition in pack --help).
    expect(maxAbsError(values, got.data)).toBeLessThanOrEqual(2000);
  });

  it('an archive packed without --progressive records no prefixes: every tile is read whole', async () => {
    const r = await rfIn(['unpack', 'w.rfz', '-o', 'whole.npy', '--bound', 'abs:2000'], t.dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/requested abs:2000: 0 of the tiles read as factors only/);
  });

  it('a bound stricter than the archive holds is refused with what it holds', async () => {
    const r = await rfIn(['unpack', 'p.rfz', '-o', 'strict.npy', '--bound', 'abs:0.001'], t.dir);
    expectCliError(r, /--bound abs:0\.001 .*stricter than field 'precip' of 'p\.rfz' holds: it was packed under rel:0\.01, recorded max error/);
    expect(() => readFileSync(join(t.dir, 'strict.npy'))).toThrow();
  });

  it('an RMSE request looser than the pointwise limit E (about 200 here) is met: RMSE <= max error, by definition', async () => {
    const r = await rfIn(['unpack', 'p.rfz', '-o', 'rmse.npy', '--bound', 'rmse:300'], t.dir);
    expect(r.code, r.stderr).toBe(0);
  });
});
