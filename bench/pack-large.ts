/**
 * Packing a field larger than comfortable memory, through the command line:
 * writes a SIDE x SIDE float32 .npy band by band (default 16384 x 16384,
 * 1 GiB), then runs `rankfield pack` on it in a child process and reports
 * the child's peak resident set size (target: under 300 MB), the time and
 * the sizes. The field is the vega-datasets annual-precip grid
 * (data/annual-precip.json, 360 x 168) mirror-tiled to SIDE x SIDE.
 *
 *   npx tsc -p . && npx tsc -p tsconfig.bench.json && \
 *     nice node bench/dist/bench/pack-large.js [--side 16384] [--bound rel:1e-3] [--tile 64] [--dir DIR]
 *
 * Not a test: it takes minutes (the encoder runs over 2^28 values).
 */
import { spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { NpyBandWriter } from '../src/io/bands.js';

/** Repository root: this file runs from bench/dist/bench/. */
const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..', '..');

function arg(name: string, fallback: string): string {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && i + 1 < process.argv.length ? process.argv[i + 1] : fallback;
}

interface Grid {
  values: Float64Array;
  width: number;
  height: number;
}

function precip(): Grid {
  const raw = JSON.parse(readFileSync(join(ROOT, 'node_modules', 'vega-datasets', 'data', 'annual-precip.json'), 'utf8')) as { width: number; height: number; values: (number | null)[] };
  return { values: Float64Array.from(raw.values, (v) => (v === null ? NaN : v)), width: raw.width, height: raw.height };
}

/** Rows [r0, r0 + count) of the grid mirror-tiled to `cols` columns. */
function band(g: Grid, cols: number, r0: number, count: number): Float32Array {
  const reflect = (i: number, n: number) => {
    const p = i % (2 * n);
    return p < n ? p : 2 * n - 1 - p;
  };
  const out = new Float32Array(count * cols);
  for (let i = 0; i < count; i++) {
    const src = reflect(r0 + i, g.height) * g.width;
    for (let j = 0; j < cols; j++) out[i * cols + j] = g.values[src + reflect(j, g.width)];
  }
  return out;
}

/** Run the CLI's main() in a fresh Node process; resolve with its exit code, output and peak RSS (bytes). */
function packInChild(args: string[]): Promise<{ code: number | null; stdout: string; stderr: string; maxRss: number; seconds: number }> {
  const main = pathToFileURL(join(ROOT, 'dist', 'cli', 'main.js')).href;
  const script = `
    const { main } = await import(${JSON.stringify(main)});
    const code = await main(${JSON.stringify(args)});
    // resourceUsage().maxRSS is in kilobytes (getrusage ru_maxrss on Linux).
    process.stderr.write('@@maxrss ' + process.resourceUsage().maxRSS * 1024 + '\\n');
    process.exitCode = code;`;
  const start = performance.now();
  return new Promise((resolvePromise, reject) => {
    const child = spawn(process.execPath, ['--input-type=module', '-e', script], { cwd: ROOT });
    let stdout = '';
    let stderr = '';
    child.stdout.on('data', (d: Buffer) => (stdout += d.toString()));
    child.stderr.on('data', (d: Buffer) => (stderr += d.toString()));
    child.on('error', reject);
    child.on('close', (code) => {
      const m = /@@maxrss (\d+)/.exec(stderr);
      resolvePromise({ code, stdout, stderr: stderr.replace(/@@maxrss \d+\n/, ''), maxRss: m ? Number(m[1]) : NaN, seconds: (performance.now() - start) / 1000 });
    });
  });
}

async function run(): Promise<void> {
  const side = Number(arg('side', '16384'));
  const bound = arg('bound', 'rel:1e-3');
  const tile = arg('tile', '64');
  const own = arg('dir', '') === '';
  const dir = own ? mkdtempSync(join(tmpdir(), 'rankfield-pack-large-')) : resolve(arg('dir', ''));
  const input = join(dir, `field-${side}.npy`);
  const output = join(dir, `field-${side}.rfz`);
  try {
    const g = precip();
    const t0 = performance.now();
    const w = new NpyBandWriter(input, [side, side], 'f32');
    for (let r0 = 0; r0 < side; r0 += 256) w.write(band(g, side, r0, Math.min(256, side - r0)));
    w.close();
    const inBytes = statSync(input).size;
    console.log(`wrote ${input}: ${side} x ${side} float32, ${inBytes} bytes in ${((performance.now() - t0) / 1000).toFixed(1)} s (generator peak RSS ${(process.resourceUsage().maxRSS / 1024).toFixed(0)} MB)`);
    const r = await packInChild(['pack', input, '-o', output, '--bound', bound, '--tile', tile, '--force']);
    if (r.code !== 0) throw new Error(`pack failed (exit ${r.code}): ${r.stderr.trim()}`);
    const outBytes = statSync(output).size;
    const mb = r.maxRss / 2 ** 20;
    console.log(r.stdout.trim());
    console.log(
      [
        `field          ${side} x ${side} float32 (${(inBytes / 2 ** 30).toFixed(3)} GiB .npy), bound ${bound}, tiles ${tile}`,
        `archive        ${outBytes} bytes (ratio ${(inBytes / outBytes).toFixed(2)})`,
        `pack time      ${r.seconds.toFixed(1)} s (${(inBytes / 2 ** 20 / r.seconds).toFixed(2)} MiB/s), child process`,
        `peak RSS       ${mb.toFixed(1)} MiB (target < 300 MB: ${r.maxRss < 300e6 ? 'met' : 'NOT met'})`,
      ].join('\n'),
    );
  } finally {
    if (own) rmSync(dir, { recursive: true, force: true });
  }
}

await run();
