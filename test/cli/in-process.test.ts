/**
 * The in-process runner of the command-line tests (rfIn in helpers.ts) is
 * the command line: for a handful of commands, successes and failures of
 * each kind, running main() in this process gives the same stdout, stderr
 * and exit code as `node bin/rankfield` in a child process, and the same
 * output files byte for byte. The other command-line tests rely on this
 * when they run commands in-process.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { formatNpy } from '../../src/io/npy.js';
import { ensureBuilt, rf, rfIn, tempDir, volcano } from './helpers.js';

const { dir, remove } = tempDir();
const path = (name: string) => join(dir, name);

beforeAll(() => {
  ensureBuilt();
  const vol = volcano();
  writeFileSync(path('volcano.npy'), formatNpy({ data: vol.values, shape: vol.shape, dtype: 'f64' }));
  // A copy of it that differs by more than the bound, for a failing check (exit 1).
  const off = Float64Array.from(vol.values, (v, i) => (i === 100 ? v + 50 : v));
  writeFileSync(path('off.npy'), formatNpy({ data: off, shape: vol.shape, dtype: 'f64' }));
  writeFileSync(path('junk.rfz'), 'not an archive');
});
afterAll(remove);

/** Run `args` both ways, writing to `out` (a name inside `dir`) in each run's own copy, and compare. */
async function same(args: (out: string) => string[], out?: string): Promise<{ code: number | null; stdout: string; stderr: string }> {
  const child = rf(args(out === undefined ? '' : `child-${out}`), dir);
  const here = await rfIn(args(out === undefined ? '' : `here-${out}`), dir);
  // Output names appear in some messages: compare with the run's own name; pack's report ends with its wall time.
  const strip = (s: string, tag: string) => (out === undefined ? s : s.replaceAll(`${tag}-${out}`, out)).replace(/; \d+(\.\d\d)? m?s$/m, '; (time)');
  expect({ code: here.code, stdout: strip(here.stdout, 'here'), stderr: strip(here.stderr, 'here') }).toEqual({
    code: child.code,
    stdout: strip(child.stdout, 'child'),
    stderr: strip(child.stderr, 'child'),
  });
  if (out !== undefined && child.code === 0) expect(readFileSync(path(`here-${out}`))).toEqual(readFileSync(path(`child-${out}`)));
  return here;
}

/**
 * Each test starts eleven `node bin/rankfield` processes one after another: 5-12 s with a load
 * average of 7, 31-33 s (past CLI_TIMEOUT) with one of 13-15 on this 2-core machine (three test
 * suites and two busy loops at once), so a limit well above that.
 */
const SAME_TIMEOUT = 90_000;

describe('in this process and as a child process: the same output and exit code', () => {
  it('pack, show, check (passing and failing), unpack', async () => {
    expect((await same((o) => ['pack', 'volcano.npy', '-o', o, '--bound', 'rel:1e-3', '--tile', '32'], 'v.rfz')).code).toBe(0);
    // Both runs read one archive from here on, so that what they print can be compared whole.
    expect((await same(() => ['pack', 'volcano.npy', '-o', 'v.rfz', '--bound', 'rel:1e-3', '--tile', '32', '--force'])).code).toBe(0);
    expect((await same(() => ['show', 'v.rfz'])).stdout).toMatch(/field 'volcano'/);
    expect((await same(() => ['show', 'v.rfz', '--json'])).code).toBe(0);
    expect((await same(() => ['check', 'v.rfz', '--against', 'volcano.npy'])).code).toBe(0);
    expect((await same(() => ['check', 'v.rfz', '--against', 'off.npy'])).code).toBe(1);
    expect((await same((o) => ['unpack', 'v.rfz', '-o', o], 'v.npy')).code).toBe(0);
  }, SAME_TIMEOUT);

  it('help, version, and errors of arguments, input and archives (exit 2, one line)', async () => {
    expect((await same(() => ['--help'])).stdout).toMatch(/Packing is lossy/);
    expect((await same(() => ['pack', '--help'])).code).toBe(0);
    expect((await same(() => ['--version'])).code).toBe(0);
    for (const args of [
      [],
      ['squash'],
      ['pack', 'volcano.npy', '-o', 'x.rfz', '--bound', 'abs:0'],
      ['pack', 'absent.npy', '-o', 'x.rfz', '--bound', 'abs:1'],
      ['pack', 'volcano.npy', '-o', 'no/such/x.rfz', '--bound', 'abs:1'],
      ['show', 'junk.rfz'],
      ['unpack', 'junk.rfz', '-o', 'x.npy'],
      ['check', 'absent.rfz'],
    ]) {
      const r = await same(() => args);
      expect(r.code, args.join(' ')).toBe(2);
      expect(r.stderr).toMatch(/^rankfield: error: [^\n]+\n$/);
    }
  }, SAME_TIMEOUT);
});
