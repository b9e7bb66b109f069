/**
 * Wall time of a run packed in parts through GNU parallel against one
 * process, on the invented field of bench/large-field.ts (default 8192 x
 * 8192 float32, 256 MiB): one `rankfield pack` (on every core), then the
 * whole flow in parts, each step timed: the plan made in parts (range pass,
 * merge, spectra pass, merge), the parts packed, the join; and the joined
 * archive compared byte for byte with the single pack. The pieces and parts
 * run through `parallel -j JOBS` (default: the number of cores). The load
 * average (as `uptime` gives it) is printed before and after, since other
 * work on the machine changes every figure.
 *
 *   npx tsc -p . && npx tsc -p tsconfig.bench.json && \
 *     node bench/dist/bench/parts-wall.js [--side 8192] [--bound psnr:60] [--tile 64] [--parts 8] [--jobs N] [--dir DIR]
 *
 * Not a test: at 8192 x 8192 it takes several minutes on two cores. Needs
 * GNU parallel (Debian's `parallel` package) at /usr/bin/parallel.
 */
import { spawnSync } from 'node:child_process';
import { existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync } from 'node:fs';
import { availableParallelism, loadavg, tmpdir } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { writeField } from './large-field.js';

const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..', '..');
const BIN = join(ROOT, 'bin', 'rankfield');
const PARALLEL = '/usr/bin/parallel';

function arg(name: string, fallback: string): string {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && i + 1 < process.argv.length ? process.argv[i + 1] : fallback;
}

const load = () =>
  loadavg()
    .map((x) => x.toFixed(2))
    .join(', ');

/** Run a command in `dir`, failing on a non-zero exit; its wall time in seconds. */
function timed(cmd: string, args: string[], dir: string): number {
  const t0 = performance.now();
  const r = spawnSync(cmd, args, { cwd: dir, encoding: 'utf8' });
  if (r.status !== 0) throw new Error(`${cmd} ${args.join(' ')}: exit ${r.status}\n${r.stderr}`);
  return (performance.now() - t0) / 1000;
}

function main(): void {
  if (!existsSync(PARALLEL)) throw new Error(`GNU parallel is not at ${PARALLEL} (Debian's parallel package)`);
  const side = Number(arg('side', '8192'));
  const bound = arg('bound', 'psnr:60');
  const tile = arg('tile', '64');
  const n = Number(arg('parts', '8'));
  const jobs = arg('jobs', String(availableParallelism()));
  const dir = arg('dir', '') === '' ? mkdtempSync(join(tmpdir(), 'rankfield-parts-wall-')) : resolve(arg('dir', ''));
  mkdirSync(dir, { recursive: true });
  const input = join(dir, `field-${side}.npy`);
  if (!existsSync(input)) writeField(input, side);
  const node = process.execPath;
  const ks = Array.from({ length: n }, (_, i) => String(i + 1));
  const par = (args: string[]) => timed(PARALLEL, ['--will-cite', '--halt', 'now,fail=1', '-j', jobs, node, BIN, ...args, '-q', ':::', ...ks], dir);
  const pieces = (prefix: string) => readdirSync(dir).filter((f) => f.startsWith(prefix) && f.endsWith('.json'));
  console.log(`field ${side} x ${side} f32 (${input}), bound ${bound}, tile ${tile}, ${n} parts through parallel -j ${jobs}, ${availableParallelism()} cores`);
  console.log(`load average before: ${load()}`);
  const single = timed(node, [BIN, 'pack', input, '-o', 'single.rfz', '--bound', bound, '--tile', tile, '--force', '-q'], dir);
  const steps: [string, number][] = [];
  steps.push(['plan: range pass', par(['plan', input, '-o', 'range-{}.json', '--bound', bound, '--tile', tile, '--part', '{}/' + n, '--force'])]);
  steps.push(['plan: merge of the range pass', timed(node, [BIN, 'plan', input, '-o', 'run.base.json', '--merge', ...pieces('range-'), '--force', '-q'], dir)]);
  const l2 = !bound.startsWith('abs') && !bound.startsWith('rel');
  if (l2) {
    steps.push(['plan: spectra pass', par(['plan', input, '-o', 'spectra-{}.json', '--base', 'run.base.json', '--part', '{}/' + n, '--force'])]);
    steps.push(['plan: merge of the spectra pass', timed(node, [BIN, 'plan', input, '-o', 'run.plan.json', '--merge', ...pieces('spectra-'), '--force', '-q'], dir)]);
  }
  const plan = l2 ? 'run.plan.json' : 'run.base.json';
  steps.push(['pack --part', par(['pack', input, '-o', 'part-{}.rfz', '--plan', plan, '--part', '{}/' + n, '--force'])]);
  steps.push(['join', timed(node, [BIN, 'join', ...ks.map((k) => `part-${k}.rfz`), '-o', 'joined.rfz', '--force', '-q'], dir)]);
  const same = readFileSync(join(dir, 'joined.rfz')).equals(readFileSync(join(dir, 'single.rfz')));
  const total = steps.reduce((a, [, s]) => a + s, 0);
  console.log(`load average after: ${load()}`);
  console.log('| step | seconds |\n|---|---|');
  console.log(`| one process: pack | ${single.toFixed(1)} |`);
  for (const [what, s] of steps) console.log(`| ${what} | ${s.toFixed(1)} |`);
  console.log(`| in parts, all steps | ${total.toFixed(1)} (${(total / single).toFixed(2)}x one process) |`);
  const sizes = (prefix: string) => pieces(prefix).reduce((a, f) => a + readFileSync(join(dir, f)).length, 0);
  console.log(`pieces: range ${sizes('range-')} bytes, spectra ${sizes('spectra-')} bytes, plan ${readFileSync(join(dir, plan)).length} bytes`);
  console.log(`joined archive ${same ? 'is' : 'is NOT'} byte-identical to the single pack (${readFileSync(join(dir, 'single.rfz')).length} bytes); files in ${dir}`);
  if (!same) process.exitCode = 1;
}

main();
