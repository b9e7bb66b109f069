/**
 * Where outputs may go: only regular files and new paths. A destination
 * that exists and is a device, FIFO, socket, directory or symbolic link is
 * refused with one line and exit 2, with or without --force, and is left
 * as it was. Of several writers of one output without --force exactly one
 * wins (the finished file is published by a hard link, which fails if the
 * name exists); with --force the last rename wins and the file is always
 * complete. Every node here is made in a fresh temporary folder; the
 * system's own device files are never touched. The refusals run in this
 * process (rfIn); the concurrent writers are separate processes.
 */
import { spawnSync } from 'node:child_process';
import { existsSync, lstatSync, mkdirSync, readdirSync, readFileSync, readlinkSync, statSync, symlinkSync, writeFileSync } from 'node:fs';
import { createServer, type Server } from 'node:net';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { writeOutputWith } from '../../src/cli/files.js';
import { UsageError } from '../../src/cli/errors.js';
import { pack } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { volcano } from '../archive/datasets.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, leftovers, rfAsync, rfIn, tempDir } from './helpers.js';

const { dir, remove } = tempDir('rankfield-outputs-');
let socket: Server | null = null;
const g = volcano();

beforeAll(async () => {
  ensureBuilt();
  // Two inputs of the same shape with other values, so two packs write different archives; and
  // what each packs to, by the library (the command line's archive is byte-identical: region.test.ts).
  for (const [name, data] of [['v', Float32Array.from(g.values)], ['w', Float32Array.from(g.values, (x) => 200 - x)]] as const) {
    writeFileSync(join(dir, `${name}.npy`), formatNpy({ data, shape: g.shape, dtype: 'f32' }));
    writeFileSync(join(dir, `${name}-alone.rfz`), pack(data, g.shape, { bound: 'abs:1', name }));
  }
  const fifo = spawnSync('mkfifo', [join(dir, 'fifo.rfz')]);
  if (fifo.status !== 0) throw new Error(`mkfifo failed: ${fifo.stderr}`);
  socket = createServer();
  await new Promise<void>((resolve) => socket!.listen(join(dir, 'socket.rfz'), resolve));
  mkdirSync(join(dir, 'folder.rfz'));
  writeFileSync(join(dir, 'target.rfz'), 'a file a link points to');
  symlinkSync('target.rfz', join(dir, 'link.rfz'));
  symlinkSync('missing.rfz', join(dir, 'dangling.rfz'));
});
afterAll(async () => {
  await new Promise<void>((resolve) => (socket ? socket.close(() => resolve()) : resolve()));
  remove();
});

/** What a path is now, for checking that a refused destination was left alone. */
function kind(path: string): string {
  const st = lstatSync(path);
  if (st.isSymbolicLink()) return `link to ${readlinkSync(path)}`;
  if (st.isFIFO()) return 'fifo';
  if (st.isSocket()) return 'socket';
  if (st.isCharacterDevice()) return `char ${st.rdev}`;
  if (st.isDirectory()) return 'dir';
  return `file ${st.size}`;
}

const packTo = (out: string, ...extra: string[]) => ['pack', 'v.npy', '-o', out, '--bound', 'abs:1', ...extra];

describe('a destination that is not a regular file is refused, with or without --force', () => {
  const cases: [string, string, RegExp][] = [
    ['a FIFO', 'fifo.rfz', /cannot write 'fifo\.rfz': it is a FIFO \(named pipe\); rankfield writes only regular files and new paths, with or without --force/],
    ['a socket', 'socket.rfz', /cannot write 'socket\.rfz': it is a socket;/],
    ['a directory', 'folder.rfz', /cannot write 'folder\.rfz': is a directory/],
    ['a symbolic link to a file', 'link.rfz', /cannot write 'link\.rfz': it is a symbolic link to 'target\.rfz'; rankfield does not write through links/],
    ['a dangling symbolic link', 'dangling.rfz', /cannot write 'dangling\.rfz': it is a symbolic link to 'missing\.rfz'/],
  ];
  for (const [what, name, message] of cases) {
    it(what, async () => {
      const before = kind(join(dir, name));
      for (const force of [[], ['--force']]) {
        expectCliError(await rfIn(packTo(name, ...force), dir), message);
        expect(kind(join(dir, name))).toBe(before);
      }
      // unpack writes the same way.
      expectCliError(await rfIn(['unpack', 'v-alone.rfz', '-o', name, '--force'], dir), message);
      expect(kind(join(dir, name))).toBe(before);
      expect(readFileSync(join(dir, 'target.rfz'), 'utf8')).toBe('a file a link points to');
      expect(existsSync(join(dir, 'missing.rfz'))).toBe(false);
      expect(leftovers(dir)).toEqual([]);
    }, CLI_TIMEOUT);
  }

  it('a character device made here (mknod needs root)', async (ctx) => {
    const node = join(dir, 'null.rfz');
    // Major 1, minor 3: the memory device that discards writes, as a new node in this test's folder.
    const made = spawnSync('mknod', [node, 'c', '1', '3'], { encoding: 'utf8' });
    if (made.status !== 0) ctx.skip(`mknod is not permitted here (${(made.stderr || String(made.error)).trim()})`);
    const before = kind(node);
    expect(before).toMatch(/^char /);
    for (const force of [[], ['--force']]) {
      expectCliError(await rfIn(packTo('null.rfz', ...force), dir), /cannot write 'null\.rfz': it is a character device; rankfield writes only regular files and new paths, with or without --force/);
      expect(kind(node)).toBe(before);
    }
    expect(leftovers(dir)).toEqual([]);
  }, CLI_TIMEOUT);
});

const start = (args: string[]) => rfAsync(args, dir);

describe('concurrent writers of one output', () => {
  it('two packs without --force: exactly one exits 0, the other exits 2 with one line; the output is the winner\'s, whole', async () => {
    const [a, b] = await Promise.all([start(['pack', 'v.npy', '-o', 'race.rfz', '--bound', 'abs:1']), start(['pack', 'w.npy', '-o', 'race.rfz', '--bound', 'abs:1'])]);
    expect([a.code, b.code].sort()).toEqual([0, 2]);
    const [winner, loser] = a.code === 0 ? [a, b] : [b, a];
    expect(winner.stderr).toBe('');
    expectCliError(loser, /output 'race\.rfz' already exists; use --force to overwrite it/);
    const expected = readFileSync(join(dir, a.code === 0 ? 'v-alone.rfz' : 'w-alone.rfz'));
    expect(readFileSync(join(dir, 'race.rfz')).equals(expected)).toBe(true);
    expect(leftovers(dir)).toEqual([]);
  }, CLI_TIMEOUT);

  it('two packs with --force: both exit 0 and the output is one of the two archives, whole', async () => {
    const [a, b] = await Promise.all([start(['pack', 'v.npy', '-o', 'forced.rfz', '--bound', 'abs:1', '--force']), start(['pack', 'w.npy', '-o', 'forced.rfz', '--bound', 'abs:1', '--force'])]);
    expect([a.code, b.code], a.stderr + b.stderr).toEqual([0, 0]);
    const got = readFileSync(join(dir, 'forced.rfz'));
    const candidates = ['v-alone.rfz', 'w-alone.rfz'].map((f) => readFileSync(join(dir, f)));
    expect(candidates.some((c) => c.equals(got))).toBe(true);
    expect(leftovers(dir)).toEqual([]);
  }, CLI_TIMEOUT);

  it('two writers that finish at the same moment (in one process): the second to publish is refused', async () => {
    // Both produce their bytes, then wait for each other, so both reach the publishing step together:
    // a check for an existing file followed by a rename would let both succeed.
    let arrived = 0;
    let release!: () => void;
    const together = new Promise<void>((resolve) => (release = resolve));
    const writer = (text: string) =>
      writeOutputWith(join(dir, 'same.out'), { force: false, inputs: [] }, async (sink) => {
        sink.write(new TextEncoder().encode(text));
        if (++arrived === 2) release();
        await together;
      });
    const results = await Promise.allSettled([writer('first writer'), writer('second writer')]);
    const ok = results.filter((r) => r.status === 'fulfilled');
    const refused = results.filter((r): r is PromiseRejectedResult => r.status === 'rejected');
    expect(ok).toHaveLength(1);
    expect(refused).toHaveLength(1);
    expect(refused[0].reason).toBeInstanceOf(UsageError);
    expect(String(refused[0].reason.message)).toMatch(/output '.*same\.out' already exists; use --force to overwrite it/);
    const winner = results[0].status === 'fulfilled' ? 'first writer' : 'second writer';
    expect(readFileSync(join(dir, 'same.out'), 'utf8')).toBe(winner);
    expect(statSync(join(dir, 'same.out')).nlink).toBe(1); // the temporary name is gone
    expect(leftovers(dir)).toEqual([]);
  });

  it('leaves no temporary names in the folder', () => {
    expect(readdirSync(dir).filter((n) => n.includes('rankfield-tmp'))).toEqual([]);
  });
});
