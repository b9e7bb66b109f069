/**
 * `rankfield plan`: the first pass of a run packed in parts. It reads the
 * whole field once (twice for rmse and psnr bounds) and writes the
 * field-wide choices as JSON, which every `pack --plan PLAN --part K/N`
 * then takes instead of reading the whole field itself.
 */
import { basename } from 'node:path';
import type { Command } from 'commander';
import type { Dtype } from '../index.js';
import type { Bound } from '../types.js';
import { fieldSpecOf } from '../pack.js';
import { makePlan, partRange, planText, type RunPlan } from '../parts/plan.js';
import { planL2Parallel } from '../parallel/encode.js';
import { checkThreads, WorkerPool } from '../parallel/pool.js';
import { encodeTasks } from '../parallel/encode.js';
import { printable } from '../format/schema.js';
import { UsageError } from './errors.js';
import { checkOutput, statInput, writeOutput } from './files.js';
import { RangeWatch } from './fill-guard.js';
import { checkLayout, inputKind, openFieldBands } from './input.js';
import type { Context } from './main.js';
import { Output, type OutputFlags } from './output.js';
import { arrayGrid, checkFill, defaultName, defaultThreads, watchedBand } from './pack.js';
import { boundOption, dtypeOption, endianOption, fillOption, nameOption, ndShapeOption, threadsOption, tileOption } from './options.js';
import { parseMatrix } from './netcdf.js';
import { seconds } from './format.js';

interface PlanFlags extends OutputFlags {
  output: string;
  bound: Bound;
  tile?: [number, number] | 'auto';
  fill?: number | false;
  name?: string;
  shape?: number[];
  dtype?: Dtype;
  endian?: 'little' | 'big';
  matrix?: string[];
  progressive?: boolean;
  run?: string;
  threads?: number;
  force?: boolean;
}

const PLAN_HELP = `
A run packed in parts (on several processes or machines) needs its
field-wide choices made once, from the whole field: the value range (stored
in the archive, and what rel and psnr bounds resolve against), the tile
shape when it is chosen by trial, and for rmse and psnr bounds how the
squared-error budget is shared between the tiles. plan makes them, as a
single pack would, and writes them as JSON; each part then packs its rows
with them, and join puts the parts together into the archive a single pack
would have written, byte for byte:

  rankfield plan sst.npy -o sst.plan.json --bound psnr:60
  rankfield pack sst.npy -o part-3.rfz --plan sst.plan.json --part 3/16   # any order, anywhere
  rankfield join part-*.rfz -o sst.rfz
  rankfield check sst.rfz --against sst.npy

Part K of N packs a contiguous band of rows: with B bands of rows of index
pages (8 tile rows each), part K takes bands floor((K-1)B/N) to
floor(KB/N) - 1, so N is at most B (plan prints B). The plan records a
CRC-32 of every band of the input, and each part checks the bands it reads
against them. Packing is lossy: see pack --help, and keep the originals
until check passes on the joined archive.

Input: .npy or raw binary, as for pack (NetCDF variables are packed in one
process). An array of 3 or more axes needs --matrix (its slices are not
split into parts).`;

function runOption(text: string): string {
  if (!/^[A-Za-z0-9][A-Za-z0-9._-]{0,127}$/.test(text)) throw new UsageError(`--run must be 1 to 128 letters, digits, '.', '_' or '-', starting with a letter or digit; got '${printable(text)}'`);
  return text;
}

/** Register `plan` on the program. */
export function registerPlan(program: Command, ctx: Context): void {
  program
    .command('plan')
    .summary('make the field-wide choices of a run packed in parts (pack --plan --part, then join)')
    .description('Make the field-wide choices of a run packed in parts, from the whole field, and write them as JSON for pack --plan PLAN --part K/N.')
    .argument('<IN>', 'input: .npy (float32/float64) or raw binary with --shape and --dtype')
    .requiredOption('-o, --output <PLAN>', 'plan to write (JSON, e.g. run.plan.json)')
    .requiredOption('--bound <MODE:VALUE>', 'error bound: abs:E, rel:R, rmse:E or psnr:D', boundOption)
    .option('--tile <RxC>', 'tile size: RxC, one number for square tiles, or auto (default: chosen by trial, as pack does)', tileOption)
    .option('--fill <V>', 'fill value marking missing cells', fillOption)
    .option('--no-fill', 'pack extreme values as data (see pack --help)')
    .option('--name <NAME>', 'field name stored in the archive (default: IN without its extension)', nameOption)
    .option('--shape <RxC>', 'raw input: rows x columns, or AxBxC... in C order', ndShapeOption)
    .option('--dtype <TYPE>', 'raw input: f32 or f64', dtypeOption)
    .option('--endian <ORDER>', 'raw input: byte order, little (default) or big', endianOption)
    .option('--matrix <AXES:NAME>', 'arrays of 3+ axes: flatten the leading axes into rows (as pack --matrix)', parseMatrix)
    .option('--progressive', 'lay tile factors out in rank groups (as pack --progressive)')
    .option('--run <ID>', 'name of the run, carried by every part (default: the field name and the first 12 hex digits of the plan hash)', runOption)
    .option('--threads <N>', 'threads for the first pass of rmse and psnr bounds (default: the number of cores)', threadsOption)
    .option('--force', 'overwrite PLAN if it exists')
    .addHelpText('after', PLAN_HELP)
    .action(async (input: string, flags: PlanFlags) => {
      const start = performance.now();
      const out = new Output(ctx, flags);
      await statInput(input);
      const kind = await inputKind(input);
      if (kind === 'netcdf' || kind === 'hdf5') throw new UsageError(`plan and pack --part cover .npy and raw input; '${input}' is NetCDF, whose variables a plan does not describe: pack it in one process`);
      const layout = { shape: flags.shape, dtype: flags.dtype, endian: flags.endian };
      checkLayout(input, layout, undefined, kind);
      const io = { force: flags.force === true, inputs: [input] };
      await checkOutput(flags.output, io);
      const field = await openFieldBands(input, layout, kind);
      let plan: RunPlan;
      try {
        const grid = arrayGrid(field.ndShape, flags.matrix, undefined, input);
        if (grid.slices > 1) throw new UsageError(`'${input}' holds ${field.ndShape.length} axes, packed as ${grid.slices} slices, which plans and parts do not split: give --matrix (e.g. --matrix axis0:space), or pack it in one process`);
        const fill = flags.fill === false ? undefined : flags.fill;
        checkFill(fill, field.dtype);
        const watch = flags.fill === false ? null : new RangeWatch(fill ?? null);
        const band = watchedBand(field, grid, input, fill, watch, () => undefined);
        const name = flags.name ?? defaultName(input);
        const { spec, page } = fieldSpecOf([grid.rows, grid.cols], field.dtype, { bound: flags.bound, tile: flags.tile, fill: fill ?? null, name, progressive: flags.progressive === true });
        const nd = grid.layout === undefined ? undefined : { nd_shape: field.ndShape, layout: grid.layout };
        const threads = defaultThreads(flags.threads, grid.rows * grid.cols) ?? checkThreads(undefined);
        const pool = threads > 1 ? new WorkerPool(threads, { local: (k, body) => encodeTasks[k as keyof typeof encodeTasks](body as never).result }) : null;
        try {
          plan = await makePlan({ band }, { spec, page, nd, file: basename(input), run: flags.run, planL2: pool ? async (src, s, c) => (await planL2Parallel(src, s, c, pool)).data : undefined });
        } finally {
          await pool?.close();
        }
      } finally {
        field.close();
      }
      await writeOutput(flags.output, new TextEncoder().encode(planText(plan)), io);
      const f = plan.field;
      const bands = partRange(plan, 1, 1).bands[1];
      const elapsed = performance.now() - start;
      const l2 = plan.l2 ? `; L2 plan '${plan.l2.name}'` : '';
      out.text(
        `planned run '${printable(plan.run)}' for '${input}' (${f.shape.join('x')} ${f.dtype}, field '${printable(f.name)}') -> '${flags.output}': ` +
          `tile ${f.tile.join('x')}, bound ${f.bound.mode}:${f.bound.value} (E = ${f.tolerance})${l2}; ${bands} band${bands === 1 ? '' : 's'} of ${plan.source.band_rows} rows, so at most ${bands} parts; ${seconds(elapsed)}\n`,
      );
      out.result({ command: 'plan', input, output: flags.output, run: plan.run, hash: plan.hash, tile: f.tile, tolerance: f.tolerance, range: f.range, bands, bandRows: plan.source.band_rows, l2: plan.l2?.name ?? null, seconds: elapsed / 1000 });
    });
}
