/**
 * Interrupting a pack mid-run: SIGINT or SIGTERM while a large field is being
 * encoded leaves the destination untouched (no file, or the old file intact)
 * and removes the temporary file; the exit code is 128 + the signal number
 * (common practice, no source). SIGKILL cannot be handled: the temporary
 * file stays, and the next run writing to the same folder removes it. The field is the vega-datasets annual-precip
 * grid (data/annual-precip.json), mirror-tiled to 2048 x 2048 float32 so that
 * packing takes long enough to be interrupted.
 */
import { spawn, spawnSync } from 'node:child_process';
import { existsSync, mkdtempSync, readdirSync, readFileSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { mirrored, precip } from '../archive/datasets.js';
import { isTempName } from './helpers.js';

const ROOT = resolve(import.meta.dirname, '../..');
const BIN = join(ROOT, 'bin', 'rankfield');
const SIDE = 2048;
const dir = mkdtempSync(join(tmpdir(), 'rankfield-interrupt-'));
const input = join(dir, 'big.f32');
writeFileSync(input, new Uint8Array(mirrored(precip(), SIDE, 0, SIDE).buffer));

afterAll(() => rmSync(dir, { recursive: true, force: true }));

/**
 * Start a pack, wait until its temporary file holds bytes (the file sink
 * buffers 1 MiB, so payloads have reached the disk), or with `created` only
 * until it exists, send `signal`, and resolve with the exit code. The
 * signal follows that observed state of the file, not a delay; the pack
 * then has most of the field still to encode.
 */
function interrupt(out: string, signal: NodeJS.Signals, extra: string[] = [], created = false): Promise<{ code: number | null; signal: NodeJS.Signals | null; pid: number | undefined; stderr: string; sawPayloads: boolean }> {
  return new Promise((done, fail) => {
    // A fixed tile shape: payloads start at once, without the tile trial on a sample (which writes nothing).
    // A bound far below float32's resolution: every tile is a coded residual alone (no factors are tried),
    // the least work that brings the first MiB to the disk (a child interrupted there: 3.6 s of CPU with
    // --threads 1, 5.2 s on two threads; 4.9 s and 6.4 s at rel:1e-5, measured on this 2-core machine).
    const child = spawn(process.execPath, [BIN, 'pack', input, '-o', out, '--bound', 'abs:1e-30', '--tile', '64', '--shape', `${SIDE}x${SIDE}`, '--dtype', 'f32', ...extra]);
    let stderr = '';
    let sawPayloads = false;
    child.stderr.on('data', (d) => (stderr += String(d)));
    const written = (): boolean => {
      const tmp = readdirSync(dir).find(isTempName);
      try {
        return tmp !== undefined && (created || statSync(join(dir, tmp)).size > 0);
      } catch {
        return false; // removed between the listing and the stat
      }
    };
    const poll = setInterval(() => {
      if (!written()) return;
      sawPayloads = true;
      clearInterval(poll);
      child.kill(signal);
    }, 20);
    child.on('error', fail);
    child.on('exit', (code, killedBy) => {
      clearInterval(poll);
      done({ code, signal: killedBy, pid: child.pid, stderr, sawPayloads });
    });
  });
}

// Each test starts a child pack of a 16 MiB field and waits for its first MiB on disk
// (1-2 s when idle, several times that on a busy machine): hence the explicit 120 s limits.
describe('interrupting rankfield pack', () => {
  it('SIGINT mid-run: exit 130, no output file, no temporary file left', async () => {
    const out = join(dir, 'a.rfz');
    // One encoding thread; the SIGTERM case below keeps the default (a worker pool on a machine of 2 or more cores).
    const r = await interrupt(out, 'SIGINT', ['--threads', '1']);
    expect(r.sawPayloads).toBe(true);
    expect(r.code).toBe(130);
    expect(r.stderr).toMatch(/^rankfield: error: interrupted by SIGINT/m);
    expect(existsSync(out)).toBe(false);
    expect(readdirSync(dir).filter(isTempName)).toEqual([]);
  }, 120_000);

  it('SIGTERM mid-run with --force over an existing file: exit 143, the old file intact, no temporary file left', async () => {
    const out = join(dir, 'b.rfz');
    writeFileSync(out, 'the previous archive');
    const r = await interrupt(out, 'SIGTERM', ['--force']);
    expect(r.sawPayloads).toBe(true);
    expect(r.code).toBe(143);
    expect(readFileSync(out, 'utf8')).toBe('the previous archive');
    expect(readdirSync(dir).filter(isTempName)).toEqual([]);
  }, 120_000);

  it('SIGKILL mid-run leaves the temporary file; the next run in the folder removes it (its process is gone)', async () => {
    const out = join(dir, 'c.rfz');
    const r = await interrupt(out, 'SIGKILL', [], true);
    expect(r.sawPayloads).toBe(true);
    expect(r.signal).toBe('SIGKILL');
    expect(existsSync(out)).toBe(false);
    const stale = readdirSync(dir).filter(isTempName);
    expect(stale).toHaveLength(1);
    expect(stale[0]).toMatch(new RegExp(`^\\.c\\.rfz\\.rankfield-tmp-[0-9a-f]{8}-${r.pid}-[0-9a-f]{12}$`));
    // Any later run that writes to this folder clears it: a small pack of another output.
    writeFileSync(join(dir, 'small.f32'), new Uint8Array(mirrored(precip(), 32, 0, 32).buffer));
    const next = spawnSync(process.execPath, [BIN, 'pack', 'small.f32', '-o', 'small.rfz', '--bound', 'abs:1', '--shape', '32x32', '--dtype', 'f32'], { cwd: dir, encoding: 'utf8' });
    expect(next.status, next.stderr).toBe(0);
    expect(readdirSync(dir).filter(isTempName)).toEqual([]);
    expect(existsSync(join(dir, 'small.rfz'))).toBe(true);
  }, 120_000);
});
