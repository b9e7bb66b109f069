/**
 * Temporary output files: named `.NAME.rankfield-tmp-HOST-PID-RANDOM`,
 * removed by pack on every failure, including a worker thread that dies,
 * and, when a run could not remove its own (SIGKILL: see interrupt.test.ts),
 * by the next run writing to the same folder, but only where the name says
 * this machine and a process that no longer exists, and only regular files
 * of this user.
 */
import { spawnSync } from 'node:child_process';
import { mkdirSync, readdirSync, writeFileSync } from 'node:fs';
import { basename, join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { tempPath } from '../../src/cli/files.js';
import { formatNpy } from '../../src/io/npy.js';
import { mirrored, precip, volcano } from '../archive/datasets.js';
import { pack } from '../../src/index.js';
import { haveSystemTools } from '../system-tools.js';
import { BIN, CLI_TIMEOUT, ensureBuilt, expectCliError, leftovers, rf, tempDir } from './helpers.js';

const { dir, remove } = tempDir('rankfield-temps-');
const g = volcano();

beforeAll(() => {
  ensureBuilt();
  writeFileSync(join(dir, 'v.npy'), formatNpy({ data: Float32Array.from(g.values), shape: g.shape, dtype: 'f32' }));
});
afterAll(remove);

/** A process id that existed a moment ago and has ended: that of a finished child. */
function endedPid(): number {
  const r = spawnSync(process.execPath, ['-e', ''], { encoding: 'utf8' });
  expect(r.status).toBe(0);
  return r.pid!;
}

describe('temporary file names', () => {
  it('are .NAME.rankfield-tmp-HOST-PID-RANDOM beside the output, distinct per call', () => {
    const a = tempPath(join(dir, 'out.rfz'));
    expect(basename(a)).toMatch(new RegExp(`^\\.out\\.rfz\\.rankfield-tmp-[0-9a-f]{8}-${process.pid}-[0-9a-f]{12}$`));
    expect(tempPath(join(dir, 'out.rfz'))).not.toBe(a);
    // A long name is shortened so the temporary name stays within the 255 bytes a file name may have.
    expect(Buffer.byteLength(basename(tempPath(join(dir, `${'é'.repeat(120)}.rfz`))))).toBeLessThanOrEqual(255);
  });
});

describe('stale temporary files', () => {
  it('the next run removes those of ended processes of this machine, and keeps the rest', () => {
    const folder = join(dir, 'stale');
    mkdirSync(folder);
    const ours = basename(tempPath(join(folder, 'x.rfz')));
    const host = ours.split('-').at(-3)!;
    const other = host === '00000000' ? 'ffffffff' : '00000000';
    const dead = endedPid();
    const names = {
      ended: `.a.rfz.rankfield-tmp-${host}-${dead}-0123456789ab`,
      running: `.b.rfz.rankfield-tmp-${host}-${process.pid}-0123456789ab`,
      otherMachine: `.c.rfz.rankfield-tmp-${other}-${dead}-0123456789ab`,
      notOurs: `.d.rfz.rankfield-tmp-${host}-${dead}-not-hex`,
      user: 'notes.txt',
    };
    for (const n of Object.values(names)) writeFileSync(join(folder, n), 'bytes');
    // A folder of that name is not a temporary file, whatever its name says.
    mkdirSync(join(folder, `.e.rfz.rankfield-tmp-${host}-${dead}-0123456789ab`));
    const r = rf(['pack', join(dir, 'v.npy'), '-o', join(folder, 'v.rfz'), '--bound', 'abs:1'], dir);
    expect(r.code, r.stderr).toBe(0);
    const left = readdirSync(folder).sort();
    expect(left).not.toContain(names.ended);
    expect(left).toEqual([names.running, names.otherMachine, names.notOurs, `.e.rfz.rankfield-tmp-${host}-${dead}-0123456789ab`, names.user, 'v.rfz'].sort());
  }, CLI_TIMEOUT);
});

describe('a worker that dies', () => {
  it('pack whose worker runs out of heap: one line, exit 2, no output, no temporary file', (ctx) => {
    // One-cell tiles give a 262144-tile index, far beyond a 12 MB heap; the worker has
    // created its temporary file by then (it holds the tiles written so far).
    const side = 512;
    writeFileSync(join(dir, 'big.npy'), formatNpy({ data: mirrored(precip(), side, 0, side), shape: [side, side], dtype: 'f32' }));
    const r = rf(['pack', 'big.npy', '-o', 'big.rfz', '--bound', 'abs:0.1', '--tile', '1'], dir, { NODE_OPTIONS: '--max-old-space-size=12' });
    if (r.code === 0) ctx.skip('the pack fitted in a 12 MB heap: the worker did not die');
    expectCliError(r, /Worker terminated due to reaching memory limit/);
    expect(readdirSync(dir)).not.toContain('big.rfz');
    expect(leftovers(dir)).toEqual([]);
  }, CLI_TIMEOUT);
});

// bash's `ulimit -f` caps the size of files a process writes (RLIMIT_FSIZE, in 1024-byte blocks), and with
// SIGXFSZ ignored (an ignored signal stays ignored across exec, POSIX; from memory) a write past it fails
// with EFBIG instead of killing the process: a real write failure, part-way through the output.
describe.runIf(haveSystemTools('a write that fails part-way', 'bash', ['/bin/bash']))('a write that fails part-way through unpack', () => {
  it('is one error line, exit 2, and leaves neither the output nor a temporary file, with 1 and 2 threads', () => {
    const values = mirrored(precip(), 360, 0, 300);
    writeFileSync(join(dir, 'wide.rfz'), pack(values, [300, 360], { bound: 'rel:1e-2', tile: 60 }));
    for (const threads of ['1', '2']) {
      const r = spawnSync('/bin/bash', ['-c', 'trap "" XFSZ; ulimit -f 100; exec "$0" "$@"', process.execPath, BIN, 'unpack', 'wide.rfz', '-o', 'wide.npy', '-q', '--threads', threads], { cwd: dir, encoding: 'utf8', timeout: 60_000 });
      expectCliError({ code: r.status, stdout: r.stdout, stderr: r.stderr }, /cannot write 'wide\.npy': file too large/);
      expect(readdirSync(dir)).not.toContain('wide.npy');
      expect(leftovers(dir)).toEqual([]);
    }
  }, CLI_TIMEOUT);
});
