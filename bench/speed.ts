/**
 * The speed issue's measurements, shared by `npm run bench` (its "Speed"
 * section of RESULTS.md) and bench/threads.ts (the same table on its own):
 * encode and decode MB/s of rankfield with 1 and 2 worker threads beside
 * fflate DEFLATE level 6 and INFLATE of the same raw float32 bytes in the
 * same process (medians), and the wall time of whole `node bin/rankfield
 * unpack` processes writing .npy and of whole `pack` processes reading it.
 *
 * Encoding with 1 thread is pack() (the calling thread); with 2, packAsync()
 * (worker start-up included, as in one command), and again with a pool of two
 * workers kept across calls (as in a long-running process); the archives are
 * compared byte for byte. Decoding is readBands() over the whole field, values
 * handed over band by band as unpack writes them. MB/s are raw float32 bytes
 * per second.
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Worker } from 'node:worker_threads';
import { deflateSync, inflateSync } from 'fflate';
import { open, pack, packAsync, readBands, WorkerPool } from '../src/index.js';
import { formatNpy } from '../src/io/npy.js';
import { median, timedRounds } from './timing.js';
import { boundSpeeds, boundSpeedTable, type BoundSpeedRow } from './bound-speed.js';
import type { BenchField } from './fields.js';

/** The repository's root (this file runs from bench/dist/bench/). */
const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..', '..');

/** The L2 bound the large field is also measured at (see {@link SpeedRun.l2}). */
const L2_BOUND = 'psnr:60';

const mbps = (bytes: number, ms: number) => bytes / 1e6 / (ms / 1000);

/** The untimed warm-up of each codec on the small grids (see {@link timedRounds}); none on the large field, whose median of 3 leaves out its cold first run. */
const SMALL_WARM_MS = 1000;

/** One field's speeds, MB/s of raw float32 bytes. */
export interface ThreadRow {
  id: string;
  shape: string;
  runs: number;
  deflate: number;
  inflate: number;
  enc1: number;
  enc2: number;
  enc2w: number;
  dec1: number;
  dec2: number;
  dec2w: number;
  /** The archives of 1 thread, 2 threads and the warm pool are byte-identical. */
  same: boolean;
}


/** Encode and decode speeds of one field at `bound` with 1 and 2 threads, and its 1-thread archive. */
export async function measureThreads(id: string, values: Float32Array, rows: number, cols: number, bound: string, runs: number, warmMs = 0): Promise<{ row: ThreadRow; archive: Uint8Array }> {
  const raw = new Uint8Array(values.buffer, values.byteOffset, values.byteLength);
  const deflated = deflateSync(raw, { level: 6 });
  // The archive the reads decode, made first (untimed); every timed pack below must give the same bytes.
  let one = pack(values, [rows, cols], { bound });
  let two: Uint8Array = new Uint8Array(0);
  let kept: Uint8Array = new Uint8Array(0);
  const archive = await open(one);
  let cells = 0;
  const count = (v: ArrayLike<number>) => void (cells += v.length);
  // With a pool kept across calls: its workers are started and their code warm, as in a long-running process.
  const pool = new WorkerPool(2);
  let times: number[];
  try {
    await packAsync(values, [rows, cols], { bound, pool });
    await readBands(archive, undefined, { location: one, pool }, () => undefined);
    times = await timedRounds(
      [
        () => deflateSync(raw, { level: 6 }),
        () => inflateSync(deflated),
        () => (one = pack(values, [rows, cols], { bound })),
        async () => (two = await packAsync(values, [rows, cols], { bound, threads: 2 })),
        async () => (kept = await packAsync(values, [rows, cols], { bound, pool })),
        () => readBands(archive, undefined, { threads: 1 }, count),
        () => readBands(archive, undefined, { threads: 2, location: one }, count),
        () => readBands(archive, undefined, { location: one, pool }, count),
      ],
      runs,
      warmMs,
    );
  } finally {
    await pool.close();
  }
  const [deflate, inflate, enc1, enc2, enc2w, dec1, dec2, dec2w] = times;
  if (cells % (rows * cols) !== 0 || cells < 3 * runs * rows * cols) throw new Error(`${id}: the reads handed over ${cells} values`);
  const same = Buffer.from(one).equals(Buffer.from(two)) && Buffer.from(one).equals(Buffer.from(kept));
  const r = (ms: number) => mbps(raw.length, ms);
  const row = { id, shape: `${rows}x${cols}`, runs, deflate: r(deflate), inflate: r(inflate), enc1: r(enc1), enc2: r(enc2), enc2w: r(enc2w), dec1: r(dec1), dec2: r(dec2), dec2w: r(dec2w), same };
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

/** Whole `unpack` processes (start-up included) writing a field to .npy. */
export interface WholeUnpack {
  archiveBytes: number;
  npyBytes: number;
  runs: number;
  /** Median wall ms with --threads 1 and --threads 2. */
  ms1: number;
  ms2: number;
  /** MB/s of raw float32 values with 1 and 2 threads. */
  mbs1: number;
  mbs2: number;
}

/** Median wall time of `node bin/rankfield unpack ARCHIVE -o out.npy --threads T` for T = 1 and 2. */
export function wholeUnpack(archive: Uint8Array, rawBytes: number, runs: number): WholeUnpack {
  const dir = mkdtempSync(join(tmpdir(), 'rankfield-speed-'));
  try {
    const file = join(dir, 'field.rfz');
    writeFileSync(file, archive);
    const ms = (t: number) => median(Array.from({ length: runs }, () => cli(['unpack', file, '-o', join(dir, 'out.npy'), '--force', '--threads', String(t)])));
    const ms1 = ms(1);
    const ms2 = ms(2);
    return { archiveBytes: archive.length, npyBytes: statSync(join(dir, 'out.npy')).size, runs, ms1, ms2, mbs1: mbps(rawBytes, ms1), mbs2: mbps(rawBytes, ms2) };
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

/** Whole `pack` processes (start-up, reading the .npy band by band and writing the archive included). */
export interface WholePack {
  npyBytes: number;
  archiveBytes: number;
  runs: number;
  /** Median wall ms with --threads 1 and --threads 2. */
  ms1: number;
  ms2: number;
  /** MB/s of raw float32 values with 1 and 2 threads. */
  mbs1: number;
  mbs2: number;
  /** The two thread counts wrote the same archive. */
  same: boolean;
}

/**
 * Median wall time of `node bin/rankfield pack FIELD.npy -o OUT --bound B --threads T`
 * for T = 1 and 2, alternated run by run (so that the host's drift moves both alike).
 */
export function wholePack(values: Float32Array, rows: number, cols: number, bound: string, runs: number): WholePack {
  const dir = mkdtempSync(join(tmpdir(), 'rankfield-speed-'));
  try {
    const npy = join(dir, 'field.npy');
    writeFileSync(npy, formatNpy({ data: values, shape: [rows, cols], dtype: 'f32' }));
    const out = (t: number) => join(dir, `out-${t}.rfz`);
    const t1: number[] = [];
    const t2: number[] = [];
    for (let i = 0; i < runs; i++) {
      for (const [t, times] of [[1, t1], [2, t2]] as const) times.push(cli(['pack', npy, '-o', out(t), '--bound', bound, '--threads', String(t), '--force']));
    }
    const a = readFileSync(out(1));
    const same = a.equals(readFileSync(out(2)));
    const ms1 = median(t1);
    const ms2 = median(t2);
    return { npyBytes: statSync(npy).size, archiveBytes: a.length, runs, ms1, ms2, mbs1: mbps(values.byteLength, ms1), mbs2: mbps(values.byteLength, ms2), same };
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

/**
 * What two threads can gain here now: the same CPU-bound loop on one worker,
 * then on two at once (each doing the whole loop); the ratio of throughputs
 * is the ceiling of any 2-thread speed-up on this machine at this moment
 * (other tenants' load included).
 */
export async function ceiling(): Promise<number> {
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

/** Everything the Speed section reports. */
export interface SpeedRun {
  bound: string;
  ceiling: number;
  rows: ThreadRow[];
  /**
   * The large field at {@link L2_BOUND} as well (informative: the targets count
   * only {@link SpeedRun.rows}): under an L2 bound the tile trial's small
   * fields and the plan's costing run on the threads too.
   */
  l2?: ThreadRow[];
  /** On the large field; null when the run has none. */
  unpack: { field: string; whole: WholeUnpack; inflate: number } | null;
  /** On the large field, against fflate deflate in the same run; absent in runs made before it. */
  pack?: { field: string; whole: WholePack; deflate: number } | null;
  /** Every field's one-thread packs at the pointwise and the L2 bounds (bench/bound-speed.ts); absent in runs made before it. */
  bounds?: BoundSpeedRow[];
}

const fmt = (x: number) => (x >= 100 ? x.toFixed(0) : x >= 10 ? x.toFixed(1) : x.toFixed(2));
const x = (a: number, b: number) => `${(a / b).toFixed(2)}x`;

/** The table of {@link SpeedRun.rows} and the whole-process lines, as Markdown lines. */
export function speedTable(s: SpeedRun): string[] {
  const out = [
    `Bound ${s.bound}. Measured by bench/threads.ts in a process of its own (\`npm run bench\` starts it after the compression tables), as one \`rankfield\` command runs; on the small grids every codec (fflate's too) runs untimed for a second first, so that none is timed with cold code. Ceiling: two threads running the same CPU-bound loop got ${s.ceiling.toFixed(2)}x the throughput of one in this run (the most any 2-thread ratio below can show on a shared machine). "2t": this thread and one worker started per call (start-up and cold code included, as in one command); "2t warm": a pool of two workers kept across calls. MB/s of raw float32 bytes; medians over rounds that time every codec of a row in turn (fflate's too), so that the host's drift from minute to minute moves all of them alike; on the small grids a codec runs about 25 ms of calls in a row untimed within a round, then as many timed (their mean is its time for the round), so that each is timed in its own steady state and pays for its own garbage collections, not the codec's before it.`,
    '',
    '| field | shape | runs | deflate-6 MB/s | inflate MB/s | encode 1t | encode 2t | encode 2t warm | 1t/deflate | 2t/1t | 2t warm/1t | decode 1t | decode 2t | decode 2t warm | 1t/inflate | 2t/1t | 2t warm/1t | same bytes |',
    '|---|---|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|--:|---|',
  ];
  for (const r of [...s.rows, ...(s.l2 ?? [])]) {
    out.push(`| ${r.id} | ${r.shape} | ${r.runs} | ${fmt(r.deflate)} | ${fmt(r.inflate)} | ${fmt(r.enc1)} | ${fmt(r.enc2)} | ${fmt(r.enc2w)} | ${x(r.enc1, r.deflate)} | ${x(r.enc2, r.enc1)} | ${x(r.enc2w, r.enc1)} | ${fmt(r.dec1)} | ${fmt(r.dec2)} | ${fmt(r.dec2w)} | ${x(r.dec1, r.inflate)} | ${x(r.dec2, r.dec1)} | ${x(r.dec2w, r.dec1)} | ${r.same ? 'yes' : 'NO'} |`);
  }
  if (s.l2?.length) out.push('', `The rows "at ${L2_BOUND}" are the large field under that bound, for what the threads do under L2 bounds (the L2 plan's per-tile work on them too); the targets above count only the rows at ${s.bound}.`);
  if (s.bounds?.length) out.push('', ...boundSpeedTable(s.bounds));
  if (s.unpack) {
    const w = s.unpack.whole;
    out.push('');
    out.push(`Whole process: \`node bin/rankfield unpack\` of the ${s.unpack.field} field's archive (${w.archiveBytes} bytes) to .npy (${w.npyBytes} bytes), start-up included, median of ${w.runs}: --threads 1 ${w.ms1.toFixed(0)} ms = ${fmt(w.mbs1)} MB/s = ${x(w.mbs1, s.unpack.inflate)} fflate inflate in the same run; --threads 2 ${w.ms2.toFixed(0)} ms = ${fmt(w.mbs2)} MB/s = ${x(w.mbs2, s.unpack.inflate)} inflate, ${x(w.ms1, w.ms2)} one thread.`);
  }
  if (s.pack) {
    const w = s.pack.whole;
    out.push('');
    out.push(`Whole process: \`node bin/rankfield pack\` of the ${s.pack.field} field as .npy (${w.npyBytes} bytes) at ${s.bound}, start-up, reading and writing the archive (${w.archiveBytes} bytes) included, 1 and 2 threads alternated, median of ${w.runs}: --threads 1 ${w.ms1.toFixed(0)} ms = ${fmt(w.mbs1)} MB/s = ${x(w.mbs1, s.pack.deflate)} fflate deflate-6 in this thread in the same run; --threads 2 ${w.ms2.toFixed(0)} ms = ${fmt(w.mbs2)} MB/s, ${x(w.ms1, w.ms2)} one thread; the same archive with both: ${w.same ? 'yes' : 'NO'}.`);
  }
  return out;
}

/**
 * The speed measurements on the large field and the real grids (volcano,
 * annual-precip) among `fields`: the small grids take more runs, as they run
 * in milliseconds; the whole-process unpack and pack on the large field.
 */
export async function runSpeed(fields: readonly BenchField[], bound: string, runs: number, progress: (id: string) => void): Promise<SpeedRun> {
  const run: SpeedRun = { bound, ceiling: await ceiling(), rows: [], l2: [], unpack: null, pack: null };
  for (const f of fields.filter((g) => g.large || g.id === 'volcano' || g.id === 'annual-precip')) {
    // The small grids run in milliseconds: 5 times the runs, after a warm-up.
    const { row, archive } = await measureThreads(f.id, f.values, f.rows, f.cols, bound, f.large ? runs : 5 * runs, f.large ? 0 : SMALL_WARM_MS);
    run.rows.push(row);
    if (f.large) {
      run.unpack = { field: f.id, whole: wholeUnpack(archive, f.values.byteLength, runs), inflate: row.inflate };
      run.pack = { field: f.id, whole: wholePack(f.values, f.rows, f.cols, bound, runs), deflate: row.deflate };
      if (bound !== L2_BOUND) run.l2!.push((await measureThreads(`${f.id} at ${L2_BOUND}`, f.values, f.rows, f.cols, L2_BOUND, runs)).row);
    }
    progress(f.id);
  }
  run.bounds = await boundSpeeds(fields, 5 * runs, progress);
  return run;
}
