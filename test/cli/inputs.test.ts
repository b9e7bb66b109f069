/**
 * Inputs that are not regular files. A FIFO (named pipe) opened for reading
 * waits in open() for a writer, and a thread stuck there cannot be stopped,
 * not even by a signal handler's exit; a character device cannot be sized.
 * Every command refuses both with one line and exit 2, without opening
 * them (a FIFO gets no reader), and the readers beneath the command line
 * (FileSource, the band reader) refuse them too, at once, if handed one.
 * A signal ends a command promptly whatever it is waiting on. Every FIFO
 * and device node here is made in a fresh temporary folder.
 */
import { type ChildProcess, spawn, spawnSync } from 'node:child_process';
import { closeSync, constants, openSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import { afterAll, afterEach, beforeAll, describe, expect, it } from 'vitest';
import { readInput } from '../../src/cli/files.js';
import { InputError, pack } from '../../src/index.js';
import { FileSource } from '../../src/io/file-source.js';
import { formatNpy } from '../../src/io/npy.js';
import { volcano } from '../archive/datasets.js';
import { startRangeServer, type RangeServer } from '../io/range-server.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, leftovers, rf, rfStart, ROOT, tempDir } from './helpers.js';

const { dir, remove } = tempDir('rankfield-inputs-');
const g = volcano();
let server: RangeServer;
const children: ChildProcess[] = [];

function mkfifo(name: string): string {
  const path = join(dir, name);
  const r = spawnSync('mkfifo', [path], { encoding: 'utf8' });
  if (r.status !== 0) throw new Error(`mkfifo failed: ${r.stderr}`);
  return path;
}

beforeAll(async () => {
  ensureBuilt();
  writeFileSync(join(dir, 'v.npy'), formatNpy({ data: Float32Array.from(g.values), shape: g.shape, dtype: 'f32' }));
  writeFileSync(join(dir, 'v.rfz'), pack(Float32Array.from(g.values), g.shape, { bound: 'abs:1' }));
  for (const name of ['in.npy', 'in.raw', 'in.rfz', 'in.nc', 'lib.npy']) mkfifo(name);
  server = await startRangeServer();
});
afterEach(() => {
  // A child still running after its test (a failed one) is not left behind,
  for (const c of children.splice(0)) if (c.exitCode === null && c.signalCode === null) c.kill('SIGKILL');
  // nor a reader of this process stuck in open() on a FIFO: a writer that comes and goes releases it.
  for (const name of ['lib.npy']) {
    try {
      closeSync(openSync(join(dir, name), constants.O_WRONLY | constants.O_NONBLOCK));
    } catch {
      // ENXIO: nobody is reading it.
    }
  }
});
afterAll(async () => {
  await server.close();
  remove();
});

const FIFO = /cannot read 'in\.(npy|raw|rfz|nc)': it is a FIFO \(named pipe\), not a regular file \(inputs must be files that can be sized and read again\)/;

/** Every command that reads a file, given one of the FIFOs. */
const COMMANDS: [string, string[]][] = [
  ['pack .npy', ['pack', 'in.npy', '-o', 'o.rfz', '--bound', 'abs:1']],
  ['pack raw', ['pack', 'in.raw', '-o', 'o.rfz', '--bound', 'abs:1', '--shape', '61x87', '--dtype', 'f32']],
  ['pack NetCDF', ['pack', 'in.nc', '-o', 'o.rfz', '--bound', 'abs:1']],
  ['show', ['show', 'in.rfz']],
  ['unpack', ['unpack', 'in.rfz', '-o', 'o.npy']],
  ['check', ['check', 'in.rfz']],
  ['check --against', ['check', 'v.rfz', '--against', 'in.npy']],
];

/** Start the CLI in the folder; the child is killed after its test if still running. */
function start(args: string[]): ReturnType<typeof rfStart> {
  const run = rfStart(args, dir);
  children.push(run.child);
  return run;
}

/**
 * True when a thread of process `pid` waits in the kernel for the other end
 * of a FIFO to be opened (Linux names that wait `wait_for_partner` in
 * /proc/PID/task/TID/wchan); false when not, or where this cannot be seen.
 */
function waitsOnFifo(pid: number): boolean {
  try {
    return readdirSync(`/proc/${pid}/task`).some((tid) => readFileSync(`/proc/${pid}/task/${tid}/wchan`, 'utf8').trim() === 'wait_for_partner');
  } catch {
    return false;
  }
}

describe('SIGTERM to a command given a FIFO input', () => {
  // The test ends when the child has exited, or fails by its time limit: a command stuck in
  // open() on the FIFO does not exit at all, not even on SIGTERM (its exit waits for the stuck
  // thread), so the limit can be generous; no time is measured. Nothing ever opens the FIFO's
  // other end, which would release the command.
  // Children are started without waiting for them, so that one stuck on its FIFO fails its
  // test by the time limit (and is then killed) instead of holding this process up.
  for (const [what, args] of COMMANDS) {
    it(`${what}: the command ends, refusing the FIFO with one line and exit 2 (or ended by the signal)`, async () => {
      const { child, done } = start(args);
      let signalled = false;
      let exited = false;
      void done.then(() => (exited = true));
      // Where it can be seen (Linux), the signal goes once the command is stuck on the FIFO.
      const poll = setInterval(() => {
        if (exited || signalled) return clearInterval(poll);
        if (!waitsOnFifo(child.pid!)) return;
        signalled = true;
        child.kill('SIGTERM');
      }, 10);
      const r = await done;
      clearInterval(poll);
      if (signalled) {
        expect(r.code).toBe(143);
        expect(r.stderr).toMatch(/^rankfield: error: interrupted by SIGTERM/);
      } else expectCliError(r, FIFO);
      expect(leftovers(dir)).toEqual([]);
    }, 60_000);
  }
});

describe('SIGTERM to a command waiting on a server that never answers', () => {
  it('show URL: exit 143 with one line', async () => {
    let asked!: () => void;
    const reached = new Promise<void>((resolve) => (asked = resolve));
    server.misbehave = () => {
      asked();
      return true; // never answers
    };
    server.put('/never.rfz', new Uint8Array(64));
    const { child, done } = start(['show', `${server.url}/never.rfz`]);
    // The signal goes once the request has reached the server (or the test ends with what the command said).
    await Promise.race([reached, done]);
    child.kill('SIGTERM');
    const r = await done;
    server.misbehave = null;
    expect(r.code).toBe(143);
    expect(r.stderr).toMatch(/^rankfield: error: interrupted by SIGTERM; unfinished output files were removed\n$/);
  }, 60_000);
});

describe('a character device as input (made here; mknod needs root)', () => {
  it('is refused by pack and show with one line, exit 2', (ctx) => {
    const node = join(dir, 'zero.npy');
    // Major 1, minor 5: the device that reads as endless zero bytes (it could never be sized).
    const made = spawnSync('mknod', [node, 'c', '1', '5'], { encoding: 'utf8' });
    if (made.status !== 0) ctx.skip(`mknod is not permitted here (${(made.stderr || String(made.error)).trim()})`);
    expectCliError(rf(['pack', 'zero.npy', '-o', 'z.rfz', '--bound', 'abs:1'], dir), /cannot read 'zero\.npy': it is a character device, not a regular file/);
    expectCliError(rf(['show', 'zero.npy'], dir), /cannot read 'zero\.npy': it is a character device, not a regular file/);
    expect(leftovers(dir)).toEqual([]);
  }, CLI_TIMEOUT);
});

describe('the readers beneath the command line refuse a FIFO at once (no writer ever appears)', () => {
  const fifo = () => join(dir, 'lib.npy');
  const refused = (e: unknown) => {
    expect(e).toBeInstanceOf(InputError);
    expect((e as Error).message).toMatch(/lib\.npy': it is a FIFO \(named pipe\), not a regular file/);
  };

  it('FileSource.open', async () => {
    refused(await FileSource.open(fifo()).then(() => null, (e: unknown) => e));
  });

  it('the .npy and raw band readers', async () => {
    // They read synchronously, so they are run in a child process (from dist/): one stuck in open() fails by the time limit.
    const script = `
      const { openNpyBands, openRawBands } = await import(${JSON.stringify(pathToFileURL(join(ROOT, 'dist', 'io', 'bands.js')).href)});
      for (const f of [() => openNpyBands(process.argv[1]), () => openRawBands(process.argv[1], [2, 2], 'f32', 'little')]) {
        try { f(); console.log('opened'); } catch (e) { console.log(e.name + ': ' + e.message); }
      }`;
    const child = spawn(process.execPath, ['--input-type=module', '-e', script, fifo()]);
    children.push(child);
    let out = '';
    child.stdout.on('data', (d: Buffer) => (out += d.toString()));
    await new Promise((resolve) => child.on('close', resolve));
    const lines = out.trim().split('\n');
    expect(lines).toHaveLength(2);
    for (const line of lines) expect(line).toMatch(/^InputError: cannot read '.*lib\.npy': it is a FIFO \(named pipe\), not a regular file/);
  }, CLI_TIMEOUT);

  it('readInput', async () => {
    refused(await readInput(fifo()).then(() => null, (e: unknown) => e));
  });
});
