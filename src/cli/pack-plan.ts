/** `rankfield pack --plan PLAN [--part K/N]`: a field, or one part of it, packed with the field-wide choices of a plan. */
import type { FloatArray } from '../index.js';
import { printable } from '../format/schema.js';
import { encodeTasks } from '../parallel/encode.js';
import { checkThreads, WorkerPool } from '../parallel/pool.js';
import { packPlanned } from '../parts/part.js';
import { parsePlan, partRange, type PartRange } from '../parts/plan.js';
import { fileError, UsageError } from './errors.js';
import { checkOutput, openArchive, readInput, statInput, writeOutputWith } from './files.js';
import { num, seconds } from './format.js';
import { checkLayout, openFieldBands, type InputKind } from './input.js';
import type { Output, OutputFlags } from './output.js';
import { defaultThreads } from './options.js';
import type { Bound, Dtype } from '../types.js';

/** The flags `pack` and `plan` share: the output, the bound, the input's description and the field-wide options. */
export interface FieldFlags extends OutputFlags {
  output: string;
  bound?: Bound;
  tile?: [number, number] | 'auto';
  /** --fill V, or false for --no-fill. */
  fill?: number | false;
  name?: string;
  shape?: number[];
  dtype?: Dtype;
  endian?: 'little' | 'big';
  force?: boolean;
  matrix?: string[];
  threads?: number;
  progressive?: boolean;
  part?: [number, number];
  /** --layer: a field layer (pack), refused by runs made in parts. */
  layer?: 'auto' | 'off' | number;
}

/**
 * Runs made in parts take no field layer (its factors are computed from the
 * whole field, and parts are packed apart): a rank is refused; 'auto' is
 * taken as 'off', with one line saying so.
 */
export function partsLayer(layer: FieldFlags['layer'], out: Output): void {
  if (typeof layer === 'number') throw new UsageError(`--layer ${layer}: runs packed in parts (plan, --plan, --part) take no field layer; pack in one process for a layer, or drop --layer`);
  if (layer === 'auto') out.note('--layer auto: runs packed in parts take no field layer; packing without one');
}

/** The flags of `pack` (cli/pack.ts), with and without --plan. */
export interface PackFlags extends FieldFlags {
  var?: string[];
  layout?: 'auto' | 'slices';
  plan?: string;
}

/** `--part K/N`: 1 <= K <= N. */
export function partOption(text: string): [number, number] {
  const m = /^([0-9]{1,9})\/([0-9]{1,9})$/.exec(text);
  const k = m ? Number(m[1]) : NaN;
  const n = m ? Number(m[2]) : NaN;
  if (!m || k < 1 || n < 1 || k > n) throw new UsageError(`--part must be K/N with 1 <= K <= N (part K of N), e.g. 3/16; got '${printable(text)}'`);
  return [k, n];
}

/** `pack --plan PLAN [--part K/N]`: the field (or its part K of N) packed with the plan's choices. */
export async function packPlannedCli(input: string, kind: InputKind, flags: PackFlags, out: Output, start: number): Promise<void> {
  if (flags.plan === undefined) {
    throw new UsageError(`--part needs --plan: the parts of a run share field-wide choices (the value range, the tile shape, the tolerance and for rmse and psnr bounds the L2 plan) made from the whole field; run 'rankfield plan ${input} -o PLAN --bound ...' first`);
  }
  if (kind === 'netcdf' || kind === 'hdf5') throw new UsageError(`--plan and --part cover .npy and raw input; '${input}' is NetCDF, whose variables a plan does not describe: pack it in one process, without --plan and --part`);
  partsLayer(flags.layer, out);
  const fixed = (['bound', 'tile', 'fill', 'name', 'matrix', 'layout', 'progressive', 'var'] as const).filter((k) => flags[k] !== undefined).map((k) => `--${k === 'fill' && flags.fill === false ? 'no-fill' : k}`);
  if (fixed.length > 0) throw new UsageError(`${fixed.join(', ')}: the plan '${flags.plan}' fixes ${fixed.length === 1 ? 'it' : 'them'}; drop ${fixed.length === 1 ? 'it' : 'them'} (or make another plan)`);
  const layout = { shape: flags.shape, dtype: flags.dtype, endian: flags.endian };
  checkLayout(input, layout, undefined, kind);
  await statInput(flags.plan);
  const plan = parsePlan(new TextDecoder().decode(await readInput(flags.plan)), flags.plan);
  const io = { force: flags.force === true, inputs: [input, flags.plan] };
  await checkOutput(flags.output, io);
  // The encoder uses each band before it asks for the next (BandSource), so one buffer serves them all.
  const field = await openFieldBands(input, layout, kind, undefined, { reuse: true });
  const f = plan.field;
  let range: PartRange;
  try {
    const have = `${field.ndShape.join('x')} ${field.dtype}`;
    const want = `${(f.nd_shape ?? f.shape).join('x')} ${f.dtype}`;
    if (have !== want) throw new UsageError(`'${input}' holds a ${have} array; plan '${flags.plan}' (run '${printable(plan.run)}') was made for ${want}`);
    const factor = f.shape[1] / field.shape[1];
    const band = (r0: number, count: number): FloatArray => {
      try {
        return field.band(r0 * factor, count * factor);
      } catch (e) {
        throw fileError(e, 'read', input);
      }
    };
    const total = flags.part ? partRange(plan, flags.part[0], flags.part[1]) : null;
    const cells = total ? (total.rows[1] - total.rows[0]) * f.shape[1] : f.shape[0] * f.shape[1];
    const bar = out.tileProgress(`packing ${flags.part ? `part ${flags.part.join('/')}` : 'the field'} of '${printable(f.name)}'`, cells * (f.dtype === 'f32' ? 4 : 8));
    // A part runs on one thread unless told otherwise (parts are usually run many at once); a whole field as pack does.
    const threads = flags.threads ?? (flags.part ? 1 : (defaultThreads(undefined, cells) ?? checkThreads(undefined)));
    const pool = threads > 1 ? new WorkerPool(threads, { local: (k, body) => encodeTasks[k as keyof typeof encodeTasks](body as never).result, preload: 'encode', steal: true }) : undefined;
    try {
      range = await writeOutputWith(flags.output, io, (sink) => packPlanned(sink, { band }, plan, { part: flags.part, onProgress: bar.onProgress, input, pool }).then(() => undefined)).then(() => total ?? partRange(plan, 1, 1));
    } finally {
      bar.stop();
      await pool?.close();
    }
  } finally {
    field.close();
  }
  const archive = await openArchive(flags.output);
  const size = archive.size;
  const { summary } = archive.field();
  await archive.close();
  const elapsed = performance.now() - start;
  const what = flags.part ? `part ${flags.part.join('/')} (rows ${range.rows[0]}..${range.rows[1] - 1}) of run '${printable(plan.run)}'` : `run '${printable(plan.run)}' (whole field)`;
  out.text(`packed ${what} from '${input}' -> '${flags.output}': ${size} bytes, ${range.tiles[1] - range.tiles[0]} tiles of ${f.tile.join('x')}; max error ${num(summary.max_err)}, RMSE ${num(summary.rmse)} over these rows; ${seconds(elapsed)}\n`);
  out.result({ command: 'pack', input, output: flags.output, run: plan.run, plan: plan.hash, part: flags.part ?? null, rows: range.rows, tiles: range.tiles, bytes: size, summary, seconds: elapsed / 1000 });
}
