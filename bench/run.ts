/**
 * `npm run bench [-- --quick] [-- --fields a,b] [-- --out DIR]`: every method
 * on every field and bound, in one process, each output decoded and checked;
 * writes RESULTS.md and one rate-distortion plot per field.
 */
import { spawnSync } from 'node:child_process';
import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { layerBlock, withBlock } from './layer-block.js';
import os from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { isPointwise, parseBound, resolveBound } from '../src/index.js';
import { FLOOR_ID, finish, floorRow, runCodec } from './cells.js';
import type { Codec } from './baselines/codec.js';
import { columnSubset } from './baselines/column-subset.js';
import { deflateRaw } from './baselines/deflate.js';
import { globalSvd } from './baselines/global-svd.js';
import { lorenzo } from './baselines/lorenzo.js';
import { lorenzo3d } from './baselines/lorenzo-3d.js';
import { prepare } from './baselines/missing.js';
import { tileSpectra, type TileSpectrum } from './baselines/oracle.js';
import { quantize } from './baselines/quantize.js';
import { benchFields, type BenchField } from './fields.js';
import { validRange, type Target } from './metrics.js';
import { renderPlot, type Marker, type Rgb, type Series } from './plot.js';
import { breakdown, coarserTilings, rankfield, rankfield64, TILE } from './rankfield.js';
import { renderReadmeBlock, renderResults, type FieldInfo, type Row, type RunInfo } from './report.js';
import type { SpeedRun } from './speed.js';
import { timeTask, type TimingOptions } from './timing.js';

export const BOUNDS = ['rel:1e-2', 'rel:1e-3', 'rel:1e-4', 'psnr:40', 'psnr:60', 'psnr:80'];
/** The bound of the speed targets. */
const SPEED_BOUND = 'rel:1e-3';
/** The bound of the metadata target, and its share of the archive. */
const METADATA_BOUND = 'rel:1e-3';
const METADATA_SHARE = 0.02;
const CODECS: Codec[] = [rankfield, rankfield64, deflateRaw, quantize, lorenzo, lorenzo3d, globalSvd, columnSubset];

interface Args {
  quick: boolean;
  fields: string[] | null;
  out: string;
}

const USAGE = 'usage: npm run bench -- [--quick] [--fields id,id,...] [--out DIR]   (default DIR: bench/, or bench/out/quick/ with --quick)';

function parseArgs(argv: string[]): Args {
  const args: Args = { quick: false, fields: null, out: '' };
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i];
    if (a === '--quick') args.quick = true;
    else if (a === '--fields' && i + 1 < argv.length) args.fields = argv[++i].split(',');
    else if (a === '--out' && i + 1 < argv.length) args.out = argv[++i];
    else if (a === '--help' || a === '-h') {
      console.log(USAGE);
      process.exit(0);
    } else {
      console.error(`bench: error: unknown argument '${a}'\n${USAGE}`);
      process.exit(2);
    }
  }
  // The full run writes the committed bench/RESULTS.md; a quick run goes to scratch (git-ignored) so it never replaces it.
  args.out ||= join(process.cwd(), 'bench', ...(args.quick ? ['out', 'quick'] : []));
  return args;
}

const t0 = performance.now();
function log(text: string): void {
  console.error(`[${((performance.now() - t0) / 1000).toFixed(1).padStart(6)} s] ${text}`);
}

const STYLE: Record<string, { color: Rgb; marker: Marker; dashed?: boolean }> = {
  rankfield: { color: [210, 30, 30], marker: 'square' },
  'rankfield-64': { color: [120, 20, 20], marker: 'square', dashed: true },
  quantize: { color: [40, 90, 210], marker: 'circle' },
  lorenzo: { color: [20, 150, 60], marker: 'triangle' },
  'lorenzo-3d': { color: [20, 150, 60], marker: 'triangle', dashed: true },
  'global-svd': { color: [150, 50, 180], marker: 'diamond' },
  'column-subset': { color: [235, 140, 10], marker: 'cross' },
  [FLOOR_ID]: { color: [120, 120, 120], marker: 'plus', dashed: true },
};

function plotField(field: BenchField, rows: Row[], dir: string): string {
  const series: Series[] = [];
  for (const [id, style] of Object.entries(STYLE)) {
    const pts = rows.filter((r) => r.method === id && (r.status === 'ok' || r.status === 'floor') && r.bpv && r.errors && Number.isFinite(r.errors.psnr));
    if (pts.length) {
      series.push({
        name: id,
        points: pts.map((r) => [r.bpv as number, (r.errors as { psnr: number }).psnr]),
        groups: pts.map((r) => (isPointwise(parseBound(r.bound).mode) ? 0 : 1)),
        connect: 'y',
        ...style,
      });
    }
  }
  const lossless = rows.find((r) => r.method === 'deflate' && r.status === 'ok');
  const png = renderPlot({
    title: `${field.id} (${field.rows}x${field.cols}): rate against distortion`,
    x: { label: 'bits per value', log: true },
    y: { label: 'PSNR (dB)' },
    series,
    vlines: lossless?.bpv ? [{ x: lossless.bpv, name: 'deflate (lossless)', color: [40, 40, 40] }] : [],
    note: 'one point per bound met; lines join a method\'s rel bounds (1e-2, 1e-3, 1e-4) and its psnr bounds (40, 60, 80) separately; failed or skipped rows are not drawn',
  });
  const file = join(dir, `rd-${field.id}.png`);
  writeFileSync(file, png);
  return file;
}

function loadavg(): string {
  return os.loadavg().map((v) => v.toFixed(2)).join(' ');
}

function machine(): string[] {
  const cpus = os.cpus();
  return [
    `${cpus.length} x ${cpus[0]?.model ?? 'unknown CPU'}`,
    `${(os.totalmem() / 2 ** 30).toFixed(1)} GiB memory`,
    `${os.type()} ${os.release()} ${os.arch()}`,
    `Node ${process.version}`,
    `load average at start ${loadavg()} (1, 5, 15 min; the machine is shared, so timings vary with other work)`,
  ];
}

/**
 * The Speed section (bench/speed.ts), run by bench/threads.ts in a fresh
 * process, as a user's `rankfield pack` runs: by the time this process
 * reaches it, it has run every codec on every field (its heap and its
 * compiled code are those of that whole run). On 2026-12-03 the large
 * field at rel:1e-3 on 1 thread packed at 7.38 MB/s at the end of this
 * process and at 9.06 MB/s in a process of its own minutes later, on the
 * same machine with more load. The baselines are measured in that same
 * process, so each ratio still compares a same-process pair.
 */
function speedInFreshProcess(runs: number): SpeedRun {
  const script = join(dirname(fileURLToPath(import.meta.url)), 'threads.js');
  const r = spawnSync(process.execPath, [script, '--json', '--runs', String(runs), '--bound', SPEED_BOUND], { encoding: 'utf8', stdio: ['ignore', 'pipe', 'inherit'], maxBuffer: 1 << 24 });
  if (r.status !== 0) throw new Error(`bench/threads.js exited with ${r.status ?? r.signal}`);
  return JSON.parse(r.stdout) as SpeedRun;
}

async function main(): Promise<void> {
  const args = parseArgs(process.argv.slice(2));
  const started = new Date();
  const machineFacts = machine();
  const timing: TimingOptions = args.quick ? { iterations: 2, timeMs: 30, slowMs: 150, minRuns: 1 } : { iterations: 5, timeMs: 200, slowMs: 1500, minRuns: 1 };
  const speedRuns = 3;
  log(`building fields (${args.quick ? 'quick' : 'full'} run)`);
  let fields = benchFields(args.quick);
  if (args.fields) {
    const unknown = args.fields.filter((id) => !fields.some((f) => f.id === id));
    if (unknown.length) {
      console.error(`bench: error: unknown field(s) ${unknown.join(', ')} (known: ${fields.map((f) => f.id).join(', ')})`);
      process.exit(2);
    }
    fields = fields.filter((f) => args.fields?.includes(f.id));
  }
  mkdirSync(args.out, { recursive: true });
  const rows: Row[] = [];
  const infos: FieldInfo[] = [];
  const notes: string[] = [
    `Tiles are ${TILE}x${TILE} for rankfield and for the Eckart-Young floor.`,
    'Missing cells: the lossy baselines store a deflated bitmap and the exact float32 words of missing cells and model the rest with those cells set to the mean; the floor and the SVD-based baselines see the same mean-filled field.',
    'The quantizing baselines pack integers as zigzag byte planes (the smallest of 1, 2 or 4 bytes) with DEFLATE level 9, the strongest level, as a careful user would; rankfield codes its integers with its own context-adaptive range coder (spec/FORMAT.md, format 3).',
    "The demo generator (src/demo/basin.ts) has no time axis; the basin-stack's time series is built in bench/fields.ts from it (six seeds blended over time).",
    'lorenzo-3d runs on the two stacks only (time x space, one snapshot per row), where a careful user would predict across snapshots as well as within them.',
    'deflate is bound-independent: it is encoded and timed once per field and checked against each bound.',
  ];
  if (args.quick) notes.push('Quick run: generated fields at 256x256 (512x512 in the full run), the basin stack 48 x (32x48) (128 x (64x96) in the full run), the turbulence stack 16 x (64x64) (32 x (128x128)), the large field shrunk from 4096x4096 to 1024x1024 and run at rel:1e-3 only; fewer timing runs. Use `npm run bench` for the full table.');
  for (const field of fields) {
    const [lo, hi] = validRange(field.values, field.fill);
    const prep = prepare(field.values, field.fill);
    infos.push({ id: field.id, rows: field.rows, cols: field.cols, source: field.source, smooth: field.smooth, large: field.large, range: [lo, hi], missing: prep.missing.length });
    const bounds = field.large && args.quick ? [SPEED_BOUND] : BOUNDS;
    let lossless: { bytes: Uint8Array; decoded: Float32Array; enc: number; dec: number; encRuns: number; decRuns: number } | null = null;
    let spectra: TileSpectrum[] | null = null;
    const fieldRows: Row[] = [];
    for (const text of bounds) {
      const bound = parseBound(text);
      const target: Target = { text, mode: bound.mode, value: bound.value, tol: resolveBound(bound, hi - lo), pointwise: isPointwise(bound.mode), range: hi - lo };
      for (const codec of CODECS) {
        if (codec.appliesTo && !codec.appliesTo(field)) continue;
        // The fixed-tile row on the large field: at the speed bound only, to keep the run short.
        if (field.large && codec.id === rankfield64.id && text !== SPEED_BOUND) continue;
        // deflate is timed once per field, at its first bound (below), and its figures serve the speed bound too.
        const speedCell = field.large && ((text === SPEED_BOUND && codec.id === 'rankfield') || codec.id === 'deflate');
        const t = speedCell ? { ...timing, minRuns: speedRuns } : timing;
        let row: Row;
        if (codec.id === deflateRaw.id) {
          if (!lossless) {
            const mb = field.values.byteLength / 1e6;
            let bytes: Uint8Array = new Uint8Array(0);
            let decoded: Float32Array = new Float32Array(0);
            const enc = await timeTask(() => {
              bytes = deflateRaw.encode(field, target);
            }, t);
            const dec = await timeTask(() => {
              decoded = deflateRaw.decode(bytes) as Float32Array;
            }, t);
            lossless = { bytes, decoded, enc: mb / (enc.medianMs / 1000), dec: mb / (dec.medianMs / 1000), encRuns: enc.runs, decRuns: dec.runs };
          }
          const l = lossless;
          row = finish({ field: field.id, bound: text, method: codec.id, status: 'ok' }, field, target, l.bytes, l.decoded, l.enc, l.dec, l.encRuns, l.decRuns);
        } else {
          const outcome = await runCodec(codec, field, target, t);
          row = outcome.row;
          if (codec.id.startsWith('rankfield') && outcome.bytes) row.breakdown = await breakdown(outcome.bytes);
          // The metadata target's cells (rel:1e-3): where the share passes 2%, what coarser tilings would cost.
          if (codec.id === rankfield.id && text === METADATA_BOUND && outcome.bytes) row.coarser = await coarserTilings(field, text, outcome.bytes, METADATA_SHARE);
        }
        fieldRows.push(row);
        log(`${field.id} ${text} ${codec.id}: ${row.status}${row.ratio ? ` ratio ${row.ratio.toFixed(2)}` : ''}${row.encMBs ? ` enc ${row.encMBs.toFixed(2)} MB/s` : ''}${row.decMBs ? ` dec ${row.decMBs.toFixed(1)} MB/s` : ''}${row.reason ? ` (${row.reason})` : ''}`);
      }
      if (!target.pointwise) {
        spectra ??= tileSpectra(prep.filled, field.rows, field.cols, TILE);
        fieldRows.push(floorRow(field, target, spectra, prep.valid));
      }
    }
    rows.push(...fieldRows);
    log(`plot ${plotField(field, fieldRows, args.out)}`);
  }
  // The speed issue's thread and whole-process figures, on the full run's large field and real grids.
  let speed: SpeedRun | undefined;
  if (!args.quick && fields.some((f) => f.large)) {
    log('speed: 1 and 2 threads, whole unpack process (in a fresh process)');
    speed = speedInFreshProcess(speedRuns);
  }
  machineFacts.push(`load average at end ${loadavg()}`);
  const command = `npm run bench${process.argv.length > 2 ? ' -- ' + process.argv.slice(2).join(' ') : ''}`;
  const runInfo: RunInfo = {
    command,
    date: started.toISOString().replace('T', ' ').replace(/\.\d+Z$/, ' UTC'),
    quick: args.quick,
    machine: machineFacts,
    elapsedS: (performance.now() - t0) / 1000,
    methods: [...CODECS.map((c) => ({ id: c.id, describe: c.describe })), { id: FLOOR_ID, describe: 'for psnr bounds: the fewest factor values any rank-truncated 64x64 tiling needs for that RMSE, from per-tile singular values (Eckart-Young), counted r (m + n) per tile and shown as bytes at 32 bits per value. A floor for the factor part, not a codec: nothing is decoded.' }],
    fields: infos,
    bounds: BOUNDS,
    rows,
    notes,
    speed,
  };
  const file = join(args.out, 'RESULTS.md');
  // The field layer block (bench/layer.ts, run on its own) is carried over from the file this run replaces.
  const kept = existsSync(file) ? layerBlock(readFileSync(file, 'utf8')) : null;
  const md = kept ? withBlock(renderResults(runInfo), kept) : renderResults(runInfo);
  writeFileSync(file, md);
  log(`wrote ${file}`);
  // A full run also rewrites the README's performance block, so README figures always come from a run.
  if (!args.quick && !args.fields) {
    const readme = join(process.cwd(), 'README.md');
    const text = readFileSync(readme, 'utf8');
    const begin = '<!-- performance:begin (written by npm run bench) -->';
    const end = '<!-- performance:end -->';
    const a = text.indexOf(begin);
    const b = text.indexOf(end);
    if (a >= 0 && b > a) {
      writeFileSync(readme, text.slice(0, a + begin.length) + '\n' + renderReadmeBlock(runInfo) + '\n' + text.slice(b));
      log(`updated the performance block of ${readme}`);
    }
  }
}

main().catch((e: unknown) => {
  console.error(e);
  process.exit(1);
});
