/** `rankfield demo`: pack, read back and check an invented sea-surface temperature field at four bounds. */
import { mkdir, mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { Command } from 'commander';
import { BASIN_DEFAULTS, corvaneBasin } from '../demo/basin.js';
import { isPointwise, pack, parseBound, type Bound } from '../index.js';
import { formatNpy } from '../io/npy.js';
import { Exit, fileError } from './errors.js';
import { checkOutput, openArchive, trackTempDir, writeOutput } from './files.js';
import { num, ratio, seconds, table } from './format.js';
import type { Context } from './context.js';
import { shapeOption } from './options.js';
import { Output, type OutputFlags } from './output.js';

/** The bounds the demo packs at. */
export const DEMO_BOUNDS = ['rel:1e-2', 'rel:1e-3', 'rel:1e-4', 'psnr:60'] as const;

interface DemoFlags extends OutputFlags {
  dir?: string;
  shape?: [number, number];
  force?: boolean;
}

interface Row {
  text: string;
  bound: Bound;
  bytes: number;
  rawBytes: number;
  fraction: number;
  rmse: number;
  psnr: number;
  packMs: number;
  unpackMs: number;
  ok: boolean;
  failures: string[];
}

/** The archive a bound is written to. */
function archivePath(dir: string, text: string): string {
  return join(dir, `corvane-sst.${text.replace(':', '-')}.rfz`);
}

/** Pack, write, read back and check one bound, with progress bars on a terminal. */
async function runBound(out: Output, text: string, values: Float32Array, shape: [number, number], fill: number | null, attrs: Record<string, string>, dir: string, force: boolean): Promise<Row> {
  const bound = parseBound(text);
  const file = archivePath(dir, text);
  const t0 = performance.now();
  const packing = out.tileProgress(`packing at ${text}`, values.byteLength, 'planning the tiles');
  let bytes: Uint8Array;
  try {
    bytes = pack(values, shape, { bound, fill, name: 'sst', attrs, onProgress: packing.onProgress });
  } finally {
    packing.stop();
  }
  await writeOutput(file, bytes, { force, inputs: [] });
  const t1 = performance.now();
  const archive = await openArchive(file);
  try {
    const reading = out.phase(`reading back ${text}`);
    try {
      await archive.read('sst');
    } finally {
      reading.stop();
    }
    const t2 = performance.now();
    const checking = out.tileProgress(`checking ${text}`, values.byteLength, 'reading the index');
    let report: Awaited<ReturnType<typeof archive.check>>;
    try {
      report = await archive.check(values, checking.onProgress);
    } finally {
      checking.stop();
    }
    const f = report.fields[0];
    const m = f.measured ?? { maxErr: NaN, rmse: NaN };
    const h = archive.field('sst').header;
    const span = h.bound.range ? h.bound.range[1] - h.bound.range[0] : NaN;
    return {
      text,
      bound,
      bytes: bytes.length,
      rawBytes: values.byteLength,
      fraction: (isPointwise(bound.mode) ? m.maxErr : m.rmse) / f.tolerance,
      rmse: m.rmse,
      psnr: 20 * Math.log10(span / m.rmse),
      packMs: t1 - t0,
      unpackMs: t2 - t1,
      ok: report.ok,
      failures: report.failures.map((x) => `${text}: field '${x.field}' tile ${x.tile}: ${x.what}`),
    };
  } finally {
    await archive.close();
  }
}

/** Register `demo` on the program. */
export function registerDemo(program: Command, ctx: Context): void {
  program
    .command('demo')
    .summary('pack an invented sea-surface temperature field at four bounds and check each')
    .description(
      'Generate a simulated sea-surface temperature field over the Corvane Basin, an invented sea (float32, ' +
        'land as fill value -999, smooth gradients, warm eddies, a little noise; deterministic), pack it at ' +
        `${DEMO_BOUNDS.join(', ')}, read each archive back, check it against the original and print a table.\n\n` +
        'Exit code 0 only if every check passes.',
    )
    .option('--dir <D>', 'keep the original (.npy) and the archives in D (default: a temporary folder, removed at the end)')
    .option('--shape <RxC>', `grid size (default ${BASIN_DEFAULTS.rows}x${BASIN_DEFAULTS.cols})`, shapeOption)
    .option('--force', 'overwrite files in D from an earlier run')
    .action(async (flags: DemoFlags) => {
      const out = new Output(ctx, flags);
      const [rows, cols] = flags.shape ?? [BASIN_DEFAULTS.rows, BASIN_DEFAULTS.cols];
      const basin = corvaneBasin({ rows, cols });
      const force = flags.force === true;
      let dir: string;
      try {
        if (flags.dir !== undefined) await mkdir(flags.dir, { recursive: true });
        dir = flags.dir ?? (await mkdtemp(join(tmpdir(), 'rankfield-demo-')));
        if (flags.dir === undefined) trackTempDir(dir, true);
      } catch (e) {
        throw fileError(e, 'create folder', flags.dir ?? tmpdir());
      }
      try {
        const original = join(dir, 'corvane-sst.npy');
        // Refuse files of an earlier run before anything is printed or written.
        for (const out of [original, ...DEMO_BOUNDS.map((b) => archivePath(dir, b))]) await checkOutput(out, { force, inputs: [] });
        const land = ((100 * basin.landCells) / basin.values.length).toFixed(1);
        out.text(
          `Corvane Basin (an invented scenario): simulated sea-surface temperature, ${rows} x ${cols} float32,\n` +
            `${land}% land stored as fill value ${basin.fill}, water ${num(basin.range[0])} .. ${num(basin.range[1])} degC\n` +
            `files in ${flags.dir !== undefined ? `'${dir}'` : 'a temporary folder, removed at the end (keep them with --dir)'}\n\n`,
        );
        const shape: [number, number] = [rows, cols];
        await writeOutput(original, formatNpy({ data: basin.values, shape, dtype: 'f32' }), { force, inputs: [] });
        const results: Row[] = [];
        for (const text of DEMO_BOUNDS) results.push(await runBound(out, text, basin.values, shape, basin.fill, basin.attrs, dir, force));
        const body = results.map((r) => [
          r.text,
          String(r.bytes),
          ratio(r.rawBytes, r.bytes),
          `${r.fraction.toFixed(3)} (${isPointwise(r.bound.mode) ? 'max' : 'RMSE'})`,
          num(r.rmse),
          r.psnr.toFixed(1),
          seconds(r.packMs),
          seconds(r.unpackMs),
          r.ok ? 'ok' : 'FAILED',
        ]);
        out.text(table(['bound', 'bytes', 'ratio', 'error / E', 'RMSE degC', 'PSNR dB', 'pack', 'unpack', 'check'], body) + '\n\n');
        for (const r of results) for (const f of r.failures) out.text(`FAIL ${f}\n`);
        const failed = results.filter((r) => !r.ok).length;
        out.result({
          command: 'demo',
          dir: flags.dir ?? null,
          shape,
          fill: basin.fill,
          bounds: results.map((r) => ({ bound: r.text, bytes: r.bytes, rawBytes: r.rawBytes, ratio: r.rawBytes / r.bytes, errorOverE: r.fraction, rmse: r.rmse, psnr: r.psnr, ok: r.ok, packSeconds: r.packMs / 1000, unpackSeconds: r.unpackMs / 1000 })),
          ok: failed === 0,
          failures: results.flatMap((r) => r.failures),
        });
        out.text(
          failed === 0
            ? `all ${results.length} checks passed (error / E: max error over the pointwise limit, or RMSE over the RMSE limit)\n`
            : `${failed} of ${results.length} checks FAILED\n`,
        );
        ctx.exitCode = failed === 0 ? Exit.Ok : Exit.CheckFailed;
      } finally {
        if (flags.dir === undefined) {
          await rm(dir, { recursive: true, force: true });
          trackTempDir(dir, false);
        }
      }
    });
}
