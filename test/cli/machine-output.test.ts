/**
 * Output modes of every command: --json prints exactly one JSON object on
 * stdout holding the keys documented in README ("Machine-readable output"),
 * the same on a second run but for the timing keys; --quiet prints nothing on
 * success; a progress bar is drawn on stderr only when stderr is a terminal.
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { main } from '../../src/cli/main.js';
import { formatNpy } from '../../src/io/npy.js';
import { CLI_TIMEOUT, ensureBuilt, rfIn, tempDir, volcano } from './helpers.js';

const { dir, remove } = tempDir();
const vol = volcano();
/** Paths in the test folder: absolute, so that runs in this process and in a child name the same files. */
const at = (name: string) => join(dir, name);

beforeAll(async () => {
  ensureBuilt();
  writeFileSync(join(dir, 'volcano.npy'), formatNpy({ data: vol.values, shape: vol.shape, dtype: 'f64' }));
  const r = await rfIn(['pack', 'volcano.npy', '-o', 'v.rfz', '--bound', 'abs:0.5', '--tile', '16'], dir);
  expect(r.code, r.stderr).toBe(0);
  // A plan, and the one part it splits the small grid into (61 rows, bands of 8 tile rows of 16).
  expect((await rfIn(['plan', 'volcano.npy', '-o', 'v.plan.json', '--bound', 'abs:0.5', '--tile', '16'], dir)).code).toBe(0);
  expect((await rfIn(['pack', 'volcano.npy', '-o', 'part-1.rfz', '--plan', 'v.plan.json', '--part', '1/1'], dir)).code).toBe(0);
  // Three processes (and a build when dist/ is stale): more than the default 10 s of a hook on a busy machine.
}, 3 * CLI_TIMEOUT);
afterAll(remove);

/** Keys whose values are timings: the only ones that may differ between two runs (README, "Machine-readable output"). */
const TIMINGS = new Set(['seconds', 'packSeconds', 'unpackSeconds']);

/** The documented top-level keys of each command's object (README, "Machine-readable output"). */
const FACTS = ['file', 'fileBytes', 'version', 'writer', 'attrs', 'carried', 'rawBytes', 'ratio', 'containerBytes', 'fields'];
const CASES: [string, string[], string[]][] = [
  ['pack', ['pack', at('volcano.npy'), '-o', at('p.rfz'), '--bound', 'rel:1e-3', '--tile', '32', '--force'], ['command', 'input', 'output', 'choices', 'seconds', 'archive']],
  ['plan', ['plan', at('volcano.npy'), '-o', at('p.plan.json'), '--bound', 'psnr:50', '--tile', '16', '--force'], ['command', 'input', 'output', 'run', 'hash', 'tile', 'tolerance', 'range', 'bands', 'bandRows', 'l2', 'seconds']],
  ['pack', ['pack', at('volcano.npy'), '-o', at('pp.rfz'), '--plan', at('v.plan.json'), '--part', '1/1', '--force'], ['command', 'input', 'output', 'run', 'plan', 'part', 'rows', 'tiles', 'bytes', 'summary', 'seconds']],
  ['join', ['join', at('part-1.rfz'), '-o', at('j.rfz'), '--force'], ['command', 'inputs', 'output', 'run', 'plan', 'parts', 'bytes', 'summary', 'seconds']],
  ['unpack', ['unpack', at('v.rfz'), '-o', at('u.npy'), '--region', '10:30,5:50', '--threads', '1', '--force'], ['command', 'input', 'output', 'format', 'files', 'field', 'shape', 'window', 'seconds']],
  ['show', ['show', at('v.rfz')], ['command', ...FACTS]],
  ['check', ['check', at('v.rfz'), '--against', at('volcano.npy')], ['command', 'file', 'against', 'field', 'compared', 'ok', 'fields', 'failures']],
  ['preview', ['preview', at('v.rfz'), '-o', at('v.png'), '--map', 'rank', '--force'], ['command', 'input', 'output', 'field', 'map', 'colourMap', 'window', 'block', 'scale', 'width', 'height', 'scaleRange', 'unit', 'missingCells', 'bytes', 'seconds']],
  ['trial', ['trial', at('volcano.npy'), '--sample', '24', '--bounds', 'abs:1,psnr:50', '--tile', '12'], ['command', 'input', 'variable', 'shape', 'dtype', 'range', 'sample', 'bounds', 'seconds']],
  ['demo', ['demo', '--shape', '24x32', '--dir', at('demo'), '--force'], ['command', 'dir', 'shape', 'fill', 'bounds', 'ok', 'failures']],
];

/** Run the command line in this process, with stderr said to be (or not to be) a terminal. */
async function run(args: string[], tty = false): Promise<{ code: number; out: string; err: string }> {
  let out = '';
  let err = '';
  const code = await main(args, { out: (s) => void (out += s), err: (s) => void (err += s), errTTY: tty, errColumns: 100 });
  return { code, out, err };
}

/** A copy of a JSON value without its timing keys, at any depth. */
function withoutTimings(v: unknown): unknown {
  if (Array.isArray(v)) return v.map(withoutTimings);
  if (v !== null && typeof v === 'object') return Object.fromEntries(Object.entries(v).filter(([k]) => !TIMINGS.has(k)).map(([k, x]) => [k, withoutTimings(x)]));
  return v;
}

describe('--json', () => {
  it.each(CASES)('%s: one JSON object with the documented keys, nothing else on stdout or stderr, stable but for timings', async (name, args, keys) => {
    // First as a user runs it (a child process), then again in this process.
    const a = await rfIn([...args, '--json'], dir);
    expect(a.code, a.stderr).toBe(0);
    expect(a.stderr).toBe('');
    // JSON.parse takes exactly one value: any text before or after it would make it throw.
    const first = JSON.parse(a.stdout) as Record<string, unknown>;
    expect(first.command).toBe(name);
    expect(Object.keys(first).sort()).toEqual([...keys].sort());
    const b = await run([...args, '--json']);
    expect(b.code, b.err).toBe(0);
    expect(b.err).toBe('');
    expect(withoutTimings(JSON.parse(b.out))).toEqual(withoutTimings(first));
  }, CLI_TIMEOUT);

  it('pack reports its automatic choices and per field the tile use and byte shares', async () => {
    const r = JSON.parse((await run(['pack', at('volcano.npy'), '-o', at('q.rfz'), '--bound', 'abs:1', '--json', '--threads', '1'])).out);
    expect(r.choices).toEqual({ tile: 'auto', layout: null, threads: 1, threadsAuto: false });
    const f = r.archive.fields[0];
    expect(f.use.tiles).toBe(f.tiles);
    expect(f.use.lowRank + f.use.residualOnly + f.use.exact).toBe(f.tiles);
    // The shares split the payload bytes exactly.
    expect(f.bytes.factors + f.bytes.residual + f.bytes.exact + f.bytes.tileHeaders).toBe(f.payloadBytes);
    expect(r.archive.containerBytes).toBe(r.archive.fileBytes - f.payloadBytes);
  }, CLI_TIMEOUT);
});

describe('--quiet', () => {
  it.each(CASES)('%s prints nothing on success', async (_name, args) => {
    const r = await run([...args, '--quiet'], true);
    expect([r.code, r.out, r.err]).toEqual([0, '', '']);
  }, CLI_TIMEOUT);

  it('still prints the one error line on failure', async () => {
    const r = await rfIn(['show', 'absent.rfz', '--quiet'], dir);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/^rankfield: error: cannot read 'absent\.rfz'/);
  });
});

describe('progress bars', () => {
  const BAR = /\[[-=]+\] \d+\/\d+ tiles \| [-0-9.]+ MB\/s \| \S+ left/;

  it('pack, unpack, check and trial draw a bar on stderr when it is a terminal, and none with --quiet or without a terminal', async () => {
    const commands = [
      ['pack', join(dir, 'volcano.npy'), '-o', join(dir, 'bar.rfz'), '--bound', 'abs:1', '--tile', '16', '--force'],
      ['unpack', join(dir, 'v.rfz'), '-o', join(dir, 'bar.npy'), '--force', '--threads', '1'],
      ['check', join(dir, 'v.rfz')],
      ['trial', join(dir, 'volcano.npy'), '--sample', '24', '--bounds', 'abs:1', '--tile', '12'],
    ];
    for (const args of commands) {
      const tty = await run(args, true);
      expect(tty.code, tty.err).toBe(0);
      expect(tty.err, args[0]).toMatch(BAR);
      expect(tty.out, args[0]).not.toMatch(BAR);
      const quiet = await run([...args, '--quiet'], true);
      expect([quiet.code, quiet.out, quiet.err]).toEqual([0, '', '']);
      const piped = await run(args, false);
      expect(piped.code).toBe(0);
      expect(piped.err).toBe('');
    }
  }, CLI_TIMEOUT);

  it('a child process whose stderr is a pipe writes no bar (pack in its worker thread, check in the main one)', async () => {
    for (const args of [['pack', 'volcano.npy', '-o', 'pipe.rfz', '--bound', 'abs:1', '--tile', '16', '--force'], ['check', 'v.rfz']]) {
      const r = await rfIn(args, dir);
      expect(r.code, r.stderr).toBe(0);
      expect(r.stderr).toBe('');
      expect(r.stdout).not.toMatch(/tiles \|/);
    }
  }, CLI_TIMEOUT);
});
