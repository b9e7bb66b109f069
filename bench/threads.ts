/**
 * Speed on worker threads: encode and decode MB/s of rankfield at rel:1e-3
 * (or --bound)
 * with 1 and 2 threads, beside fflate DEFLATE level 6 and INFLATE of the
 * same raw float32 bytes in the same process (medians of several runs), on
 * the large 4096 x 4096 bench field and the vega-datasets volcano and
 * annual-precip grids; then the wall time of whole `node bin/rankfield
 * unpack` processes writing the large field to .npy with 1 and 2 threads.
 *
 *   npx tsc -p . && npx tsc -p tsconfig.bench.json && node bench/dist/bench/threads.js [--runs N] [--bound B] [--quick]
 *
 * Encoding with 1 thread is pack() (the calling thread); with 2, packAsync()
 * (worker start-up included); the two archives are compared byte for byte.
 * Decoding is readBands() over the whole field with 1 and 2 threads (with 2,
 * each worker opens the archive from shared bytes), values handed over band
 * by band, as unpack writes them. MB/s are raw float32 bytes per second.
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { availableParallelism, cpus, tmpdir } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Worker } from 'node:worker_threads';
import { deflateSync, inflateSync } from 'fflate';
import { open, pack, packAsync, readBands, WorkerPool } from '../src/index.js';
import { benchFields } from './fields.js';
import { timeTask } from './timing.js';

const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..', '..');
const arg = (name: string, fallback: string) => {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && i + 1 < process.argv.length ? process.argv[i + 1] : fallback;
};
/** The bound (default rel:1e-3, the issue's; --bound psnr:60 for an L2 bound, whose planning pass also runs on the threads). */
const BOUND = arg('bound', 'rel:1e-3');
const RUNS = Number(arg('runs', '3'));
/** --quick: the large field shrunk to 1024 x 1024 (a check that the script runs, not a measurement). */
const QUICK = process.argv.includes('--quick');

const mbps = (bytes: number, ms: number) => bytes / 1e6 / (ms / 1000);
const fmt = (x: number) => (x >= 100 ? x.toFixed(0) : x >= 10 ? x.toFixed(1) : x.toFixed(2));
const median = (xs: number[]) => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)];

async function timed(fn: () => unknown, runs: number): Promise<number> {
  return (await timeTask(fn, { iterations: runs, timeMs: 0, slowMs: 0, minRuns: runs })).medianMs;
}

interface Row {
  id: string;
  shape: string;
  deflate: number;
  inflate: number;
  enc1: number;
  enc2: number;
  enc2w: number;
  dec1: number;
  dec2: number;
  dec2w: number;
  same: boolean;
}

async function measure(id: string, values: Float32Array, rows: number, cols: number, runs: number): Promise<{ row: Row; archive: Uint8Array }> {
  const raw = new Uint8Array(values.buffer, values.byteOffset, values.byteLength);
  const deflated = deflateSync(raw, { level: 6 });
  const deflate = await timed(() => deflateSync(raw, { level: 6 }), runs);
  const inflate = await timed(() => inflateSync(deflated), runs);
  let one: Uint8Array = new Uint8Array(0);
  let two: Uint8Array = new Uint8Array(0);
  const enc1 = await timed(() => (one = pack(values, [rows, cols], { bound: BOUND })), runs);
  const enc2 = await timed(async () => (two = await packAsync(values, [rows, cols], { bound: BOUND, threads: 2 })), runs);
  const archive = await open(one);
  let cells = 0;
  const count = (v: ArrayLike<number>) => void (cells += v.length);
  const dec1 = await timed(() => readBands(archive, undefined, { threads: 1 }, count), runs);
  const dec2 = await timed(() => readBands(archive, undefined, { threads: 2, location: one }, count), runs);
  // With a pool kept across calls: its workers are started and their code warm, as in a long-running process.
  const pool = new WorkerPool(2);
  let warm: Uint8Array = new Uint8Array(0);
  let enc2w: number;
  let dec2w: number;
  try {
    await packAsync(values, [rows, cols], { bound: BOUND, pool });
    enc2w = await timed(async () => (warm = await packAsync(values, [rows, cols], { bound: BOUND, pool })), runs);
    await readBands(archive, undefined, { location: one, pool }, () => undefined);
    dec2w = await timed(() => readBands(archive, undefined, { location: one, pool }, count), runs);
  } finally {
    await pool.close();
  }
  if (cells !== 3 * runs * rows * cols) throw new Error(`${id}: the reads handed over ${cells} values`);
  const same = Buffer.from(one).equals(Buffer.from(two)) && Buffer.from(one).equals(Buffer.from(warm));
  const r = (ms: number) => mbps(raw.length, ms);
  const row = { id, shape: `${rows}x${cols}`, deflate: r(deflate), inflate: r(inflate), enc1: r(enc1), enc2: r(enc2), enc2w: r(enc2w), dec1: r(dec1), dec2: r(dec2), dec2w: r(dec2w), same };
  return { row, archive: one };
}

/** Wall time (ms) of one `node bin/rankfield ...` process. */
function cli(args: string[]): number {
  const t0 = performance.now();
  const r = spawnSync(process.execPath, [join(ROOT, 'bin', 'rankfield'), ...args], { encoding: 'utf8' });
  const ms = performance.now() - t0;
  if (r.status !== 0) throw new Error(`rankfield ${args.join(' ')}: exit ${r.status}: ${r.stderr}`);
  return ms;
}

/**
 * What two threads can gain here now: the same CPU-bound loop on one worker,
 * then on two at once (each doing the whole loop); the ratio of throughputs
 * is the ceiling of any 2-thread speed-up on this machine at this moment
 * (other tenants' load included).
 */
async function ceiling(): Promise<number> {
  const code = "const { parentPort } = require('node:worker_threads'); let x = 0; for (let i = 0; i < 2e8; i++) x += Math.sqrt(i); parentPort.postMessage(x);";
  const run = async (n: number) => {
    const t0 = performance.now();
    await Promise.all(Array.from({ length: n }, () => new Promise((r) => new Worker(code, { eval: true }).once('message', r))));
    return performance.now() - t0;
  };
  const one = median([await run(1), await run(1), await run(1)]);
  const two = median([await run(2), await run(2), await run(2)]);
  return (2 * one) / two;
}

async function main(): Promise<void> {
  console.log(`node ${process.version}, ${cpus().length} cores (${availableParallelism()} available) of ${cpus()[0]?.model ?? 'unknown'}; bound ${BOUND}; medians of ${RUNS} runs`);
  console.log(`ceiling: two threads running the same CPU-bound loop get ${(await ceiling()).toFixed(2)}x the throughput of one (the machine is shared, so this is the most any 2-thread ratio below can show)\n`);
  const fields = benchFields(QUICK).filter((f) => f.large || f.id === 'volcano' || f.id === 'annual-precip');
  const rows: Row[] = [];
  let large: { archive: Uint8Array; bytes: number } | null = null;
  for (const f of fields) {
    // The small grids run in milliseconds: more runs steady their medians.
    const { row, archive } = await measure(f.id, f.values, f.rows, f.cols, f.large ? RUNS : 5 * RUNS);
    rows.push(row);
    if (f.large) large = { archive, bytes: f.values.byteLength };
    console.error(`${f.id}: done`);
  }
  console.log('2t: this thread and one worker started per call (start-up and cold code included, as in one command); 2t warm: a pool of two workers kept across calls.\n');
  console.log('| field | shape | deflate-6 MB/s | inflate MB/s | encode 1t | encode 2t | encode 2t warm | 2t/1t | 2t warm/1t | 1t/deflate | decode 1t | decode 2t | decode 2t warm | 2t/1t | 2t warm/1t | 1t/inflate | same bytes |');
  console.log('|---|---|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|---|');
  const x = (a: number, b: number) => `${(a / b).toFixed(2)}x`;
  for (const r of rows) {
    console.log(`| ${r.id} | ${r.shape} | ${fmt(r.deflate)} | ${fmt(r.inflate)} | ${fmt(r.enc1)} | ${fmt(r.enc2)} | ${fmt(r.enc2w)} | ${x(r.enc2, r.enc1)} | ${x(r.enc2w, r.enc1)} | ${x(r.enc1, r.deflate)} | ${fmt(r.dec1)} | ${fmt(r.dec2)} | ${fmt(r.dec2w)} | ${x(r.dec2, r.dec1)} | ${x(r.dec2w, r.dec1)} | ${x(r.dec1, r.inflate)} | ${r.same ? 'yes' : 'NO'} |`);
  }
  if (large === null) return;
  const dir = mkdtempSync(join(tmpdir(), 'rankfield-threads-'));
  try {
    const file = join(dir, 'large.rfz');
    writeFileSync(file, large.archive);
    const times: Record<number, number> = {};
    for (const t of [1, 2]) {
      const ms: number[] = [];
      for (let k = 0; k < RUNS; k++) ms.push(cli(['unpack', file, '-o', join(dir, 'out.npy'), '--force', '--threads', String(t)]));
      times[t] = median(ms);
    }
    const size = statSync(join(dir, 'out.npy')).size;
    console.log(`\nwhole process: node bin/rankfield unpack large.rfz (${large.archive.length} bytes) -o out.npy (${size} bytes), median of ${RUNS}:`);
    for (const t of [1, 2]) console.log(`  --threads ${t}: ${times[t].toFixed(0)} ms, ${fmt(mbps(large.bytes, times[t]))} MB/s of raw values`);
    console.log(`  2t/1t: ${(times[1] / times[2]).toFixed(2)}x`);
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

await main();
