/**
 * Shared helpers of the command-line tests: build dist/ when it is missing or
 * older than src/, run `node bin/rankfield ...` in a folder (as a child
 * process, or in this process through the same main()), load the
 * vega-datasets volcano grid, and assert the one-line error contract.
 */
import { type ChildProcess, execFileSync, spawn, spawnSync } from 'node:child_process';
import { existsSync, mkdtempSync, readdirSync, readFileSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { expect } from 'vitest';
import type { main as cliMain } from '../../src/cli/main.js';

export const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '../..');
export const BIN = join(ROOT, 'bin', 'rankfield');

function newestMtime(dir: string): number {
  let newest = 0;
  for (const entry of readdirSync(dir, { withFileTypes: true })) {
    const p = join(dir, entry.name);
    newest = Math.max(newest, entry.isDirectory() ? newestMtime(p) : statSync(p).mtimeMs);
  }
  return newest;
}

/** Compile with tsc when dist/cli/main.js is missing or older than a source file (`npm test` has already built it). */
export function ensureBuilt(): void {
  const main = join(ROOT, 'dist', 'cli', 'main.js');
  if (existsSync(main) && statSync(main).mtimeMs >= newestMtime(join(ROOT, 'src'))) return;
  execFileSync(process.execPath, [join(ROOT, 'node_modules', 'typescript', 'bin', 'tsc'), '-p', '.'], { cwd: ROOT, stdio: 'inherit' });
}

/** Build the browser bundle dist/rankfield-decode.mjs (scripts/bundle.mjs) when it is missing or older than a source file. */
export function ensureBundled(): void {
  const bundle = join(ROOT, 'dist', 'rankfield-decode.mjs');
  if (existsSync(bundle) && statSync(bundle).mtimeMs >= newestMtime(join(ROOT, 'src'))) return;
  execFileSync(process.execPath, [join(ROOT, 'scripts', 'bundle.mjs')], { cwd: ROOT, stdio: 'inherit' });
}

export interface RunResult {
  code: number | null;
  stdout: string;
  stderr: string;
}

/**
 * The time limit of command-line tests that start several `node bin/rankfield`
 * processes. Each costs 0.3-1 s on this 2-core machine when idle (start-up,
 * a worker thread and a cold JIT), several times that when the machine is
 * busy, so a test that starts three or four passes vitest's 5 s default
 * there; the limit is set explicitly for that reason.
 */
export const CLI_TIMEOUT = 30_000;

/** Run `node bin/rankfield ...args` in `cwd`. */
export function rf(args: string[], cwd: string, env: NodeJS.ProcessEnv = {}): RunResult {
  const r = spawnSync(process.execPath, [BIN, ...args], { cwd, encoding: 'utf8', env: { ...process.env, ...env }, timeout: 60_000 });
  if (r.error) throw r.error;
  return { code: r.status, stdout: r.stdout, stderr: r.stderr };
}

/**
 * Run the command line in this process: main() of the compiled program
 * (dist/cli/main.js, the code bin/rankfield runs) on `args`, in `cwd`, with
 * its output collected; the same stdout, stderr and exit code as {@link rf}
 * (test/cli/in-process.test.ts compares the two), without the 0.3-1 s start
 * of a node process (several seconds on a busy machine).
 *
 * What only a process has stays with {@link rf} / {@link rfStart}: signals,
 * stdin and stdout pipes, environment variables, several runs at once, the
 * bin script itself, and the once-per-process sweep of stale temporary files
 * (src/cli/files.ts). Runs are one at a time: the working folder is changed
 * for the run and restored after (vitest runs the test files in forked
 * processes here, where process.chdir is allowed, one file at a time per
 * process; tests within a file run one after another).
 */
export async function rfIn(args: string[], cwd: string): Promise<RunResult> {
  ensureBuilt();
  const { main } = (await import(pathToFileURL(join(ROOT, 'dist', 'cli', 'main.js')).href)) as { main: typeof cliMain };
  let stdout = '';
  let stderr = '';
  const home = process.cwd();
  process.chdir(cwd);
  try {
    const code = await main(args, { out: (s) => void (stdout += s), err: (s) => void (stderr += s), errTTY: false });
    return { code, stdout, stderr };
  } finally {
    process.chdir(home);
  }
}

/** What a child run ended with: its result, and the signal that ended it (null when it exited by itself). */
export type ChildResult = RunResult & { signal: NodeJS.Signals | null };

/**
 * Start `node bin/rankfield ...args` in `cwd` without waiting for it (so
 * that this process's event loop, and a test server on it, keeps running,
 * and several can run at once): the child, and its result once it has
 * exited. A child still running when its test ends is the test's to kill.
 */
export function rfStart(args: string[], cwd: string, env: NodeJS.ProcessEnv = {}): { child: ChildProcess; done: Promise<ChildResult> } {
  const child = spawn(process.execPath, [BIN, ...args], { cwd, env: { ...process.env, ...env } });
  let stdout = '';
  let stderr = '';
  child.stdout!.on('data', (d: Buffer) => (stdout += d.toString()));
  child.stderr!.on('data', (d: Buffer) => (stderr += d.toString()));
  const done = new Promise<ChildResult>((resolve, reject) => {
    child.on('error', reject);
    child.on('close', (code, signal) => resolve({ code, signal, stdout, stderr }));
  });
  return { child, done };
}

/** Run `node bin/rankfield ...args` in `cwd` without blocking this process's event loop. */
export function rfAsync(args: string[], cwd: string, env: NodeJS.ProcessEnv = {}): Promise<ChildResult> {
  return rfStart(args, cwd, env).done;
}

/** A fresh temporary folder, and a function that removes it. */
export function tempDir(prefix = 'rankfield-cli-'): { dir: string; remove: () => void } {
  const dir = mkdtempSync(join(tmpdir(), prefix));
  return { dir, remove: () => rmSync(dir, { recursive: true, force: true }) };
}

/**
 * The Maunga Whau volcano grid shipped by vega-datasets (data/volcano.json:
 * 87 wide x 61 high, row-major `values`, heights in metres). Returned as 61 rows x 87 columns.
 */
export function volcano(): { values: Float64Array; shape: [number, number] } {
  const raw = JSON.parse(readFileSync(join(ROOT, 'node_modules', 'vega-datasets', 'data', 'volcano.json'), 'utf8')) as {
    width: number;
    height: number;
    values: number[];
  };
  // Source: vega-datasets data/volcano.json (width 87, height 61).
  expect([raw.width, raw.height, raw.values.length]).toEqual([87, 61, 87 * 61]);
  return { values: Float64Array.from(raw.values), shape: [raw.height, raw.width] };
}

/** Assert the error contract: exit 2, exactly one stderr line `rankfield: error: ...` matching `pattern`, no stack trace, nothing on stdout. */
export function expectCliError(r: RunResult, pattern: RegExp): void {
  expect(r.code, `stderr: ${r.stderr}`).toBe(2);
  const lines = r.stderr.trimEnd().split('\n');
  expect(lines, r.stderr).toHaveLength(1);
  expect(lines[0]).toMatch(/^rankfield: error: \S/);
  expect(lines[0]).toMatch(pattern);
  expect(r.stderr).not.toMatch(/\n\s+at /);
  expect(r.stdout).toBe('');
}

/** True for the name of a temporary output file (`.NAME.rankfield-tmp-HOST-PID-RANDOM`; earlier versions: `.NAME.PID.RANDOM.tmp`). */
export function isTempName(name: string): boolean {
  return name.includes('.rankfield-tmp-') || name.endsWith('.tmp');
}

/** Names in `dir` that look like leftover temporary output files. */
export function leftovers(dir: string): string[] {
  return readdirSync(dir).filter(isTempName);
}

/** Largest |a - b| over cells where the original `a` is a finite valid value (not equal to `fill`). */
export function maxAbsError(a: ArrayLike<number>, b: ArrayLike<number>, fill: number | null = null): number {
  let m = 0;
  for (let i = 0; i < a.length; i++) {
    if (!Number.isFinite(a[i]) || a[i] === fill) continue;
    m = Math.max(m, Math.abs(a[i] - b[i]));
  }
  return m;
}

/** Root-mean-square of a - b over the same cells as {@link maxAbsError}. */
export function rmsError(a: ArrayLike<number>, b: ArrayLike<number>, fill: number | null = null): number {
  let s = 0;
  let n = 0;
  for (let i = 0; i < a.length; i++) {
    if (!Number.isFinite(a[i]) || a[i] === fill) continue;
    s += (a[i] - b[i]) ** 2;
    n++;
  }
  return n > 0 ? Math.sqrt(s / n) : 0;
}

/** Min and max over the same cells as {@link maxAbsError}. */
export function validRange(a: ArrayLike<number>, fill: number | null = null): [number, number] {
  let lo = Infinity;
  let hi = -Infinity;
  for (let i = 0; i < a.length; i++) {
    if (!Number.isFinite(a[i]) || a[i] === fill) continue;
    lo = Math.min(lo, a[i]);
    hi = Math.max(hi, a[i]);
  }
  return [lo, hi];
}
