/**
 * `rankfield plan`: the first pass of a run packed in parts. It reads the
 * whole field once (twice for rmse and psnr bounds) and writes the
 * field-wide choices as JSON, which every `pack --plan PLAN --part K/N`
 * then takes instead of reading the whole field itself.
 */
import { basename } from 'node:path';
import type { Command } from 'commander';
import type { Bound } from '../types.js';
import { fieldSpecOf } from '../pack.js';
import { makePlan, parsePlan, partRange, planText, type PlanField, type RunPlan } from '../parts/plan.js';
import { mergeRange, mergeSpectra, rangePiece, rangeRows, spectraPiece, type PlanPiece } from '../parts/plan-pieces.js';
import { parsePiece, pieceText } from '../parts/piece-text.js';
import type { BandSource } from '../codec/tiles.js';
import { planL2Parallel } from '../parallel/encode.js';
import { checkThreads, WorkerPool } from '../parallel/pool.js';
import { encodeTasks } from '../parallel/encode.js';
import { printable } from '../format/schema.js';
import { fileError, UsageError } from './errors.js';
import { checkOutput, readInput, statInput, writeOutput } from './files.js';
import { RangeWatch, suspectMessage, type Suspect } from './fill-guard.js';
import { checkLayout, inputKind, openFieldBands } from './input.js';
import type { Context } from './context.js';
import { Output } from './output.js';
import { defaultThreads, layerOption } from './options.js';
import { partsLayer } from './pack-plan.js';
import { arrayGrid, checkFill, defaultName, watchedBand } from './pack.js';
import { boundOption, dtypeOption, endianOption, fillOption, nameOption, ndShapeOption, threadsOption, tileOption } from './options.js';
import { parseMatrix } from './netcdf.js';
import { seconds } from './format.js';
import { partOption, type FieldFlags } from './pack-plan.js';

interface PlanFlags extends FieldFlags {
  base?: string;
  merge?: string[];
  run?: string;
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

The plan itself can be made in parts, each reading its share of the rows,
then merged (the result is the plan one process makes, byte for byte). Two
passes, since an rmse or psnr plan needs the tolerance, and the tolerance
needs the whole field's range:

  rankfield plan sst.npy -o range-3.json --bound psnr:60 --part 3/8   # range pass, K = 1..8
  rankfield plan sst.npy -o sst.base.json --merge range-*.json
  rankfield plan sst.npy -o spectra-3.json --base sst.base.json --part 3/8   # K = 1..8
  rankfield plan sst.npy -o sst.plan.json --merge spectra-*.json

The range pass splits the rows evenly; its merge chooses the tile shape by
trial (reading only the sampled tiles) and for abs and rel bounds writes
the plan itself, for rmse and psnr bounds its base. The spectra pass splits
as pack --part does (at most B parts); its merge reads the 48 tiles the L2
plan is costed on. A merge refuses pieces of another field, options or
base, and parts given twice or missing.

Input: .npy or raw binary, as for pack (NetCDF variables are packed in one
process). An array of 3 or more axes needs --matrix (its slices are not
split into parts).`;

/** An input opened a band of rows at a time. */
type BandReader = Awaited<ReturnType<typeof openFieldBands>>;

function runOption(text: string): string {
  if (!/^[A-Za-z0-9][A-Za-z0-9._-]{0,127}$/.test(text)) throw new UsageError(`--run must be 1 to 128 letters, digits, '.', '_' or '-', starting with a letter or digit; got '${printable(text)}'`);
  return text;
}

/** Register `plan` on the program. */
export function registerPlan(program: Command, ctx: Context): void {
  program
    .command('plan')
    .summary('make the field-wide choices of a run packed in parts (pack --plan --part, then join)')
    .description('Make the field-wide choices of a run packed in parts, from the whole field, and write them as JSON for pack --plan PLAN --part K/N; or make them in parts and merge them.')
    .argument('<IN>', 'input: .npy (float32/float64) or raw binary with --shape and --dtype')
    .requiredOption('-o, --output <PLAN>', 'plan, base or piece to write (JSON, e.g. run.plan.json)')
    .option('--bound <MODE:VALUE>', 'error bound: abs:E, rel:R, rmse:E or psnr:D (not with --base or --merge: the pieces fix it)', boundOption)
    .option('--part <K/N>', 'make piece K of N: of the range pass, or with --base of the spectra pass', partOption)
    .option('--base <BASE>', 'the spectra pass of the base BASE (written by --merge of range pieces, for rmse and psnr bounds)')
    .option('--merge <PIECES...>', 'merge every piece of one pass into the plan (or the base, after the range pass of an rmse or psnr bound)')
    .option('--tile <RxC>', 'tile size: RxC, one number for square tiles, or auto (default: chosen by trial, as pack does)', tileOption)
    .option('--fill <V>', 'fill value marking missing cells', fillOption)
    .option('--no-fill', 'pack extreme values as data (see pack --help)')
    .option('--name <NAME>', 'field name stored in the archive (default: IN without its extension)', nameOption)
    .option('--shape <RxC>', 'raw input: rows x columns, or AxBxC... in C order', ndShapeOption)
    .option('--dtype <TYPE>', 'raw input: f32 or f64', dtypeOption)
    .option('--endian <ORDER>', 'raw input: byte order, little (default) or big', endianOption)
    .option('--matrix <AXES:NAME>', 'arrays of 3+ axes: flatten the leading axes into rows (as pack --matrix)', parseMatrix)
    .option('--progressive', 'lay tile factors out in rank groups (as pack --progressive)')
    .option('--layer <auto|off|K>', 'runs in parts take no field layer: K is refused, auto packs without one (see pack --layer)', layerOption)
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
      partsLayer(flags.layer, out);
      const layout = { shape: flags.shape, dtype: flags.dtype, endian: flags.endian };
      checkLayout(input, layout, undefined, kind);
      if (flags.merge !== undefined && (flags.part !== undefined || flags.base !== undefined)) throw new UsageError('--merge takes the pieces of a pass and makes no piece itself: drop --part and --base');
      if (flags.base !== undefined && flags.part === undefined) throw new UsageError('--base makes a piece of the spectra pass: give --part K/N (--part 1/1 for the whole field in one piece)');
      const later = flags.merge !== undefined || flags.base !== undefined;
      if (later) {
        const fixed = (['bound', 'tile', 'fill', 'name', 'matrix', 'progressive'] as const).filter((k) => flags[k] !== undefined).map((k) => `--${k === 'fill' && flags.fill === false ? 'no-fill' : k}`);
        if (fixed.length > 0) throw new UsageError(`${fixed.join(', ')}: the ${flags.merge ? 'pieces fix' : 'base fixes'} ${fixed.length === 1 ? 'it' : 'them'}; drop ${fixed.length === 1 ? 'it' : 'them'}`);
      } else if (flags.bound === undefined) throw new UsageError("required option '--bound <MODE:VALUE>' not specified (or give --merge PIECES, or --base BASE --part K/N)");
      if (flags.run !== undefined && (flags.part !== undefined || flags.base !== undefined)) throw new UsageError('--run names the run in the merged plan: give it to --merge (or to a plan made in one process)');
      const io = { force: flags.force === true, inputs: [input, ...(flags.merge ?? []), ...(flags.base ? [flags.base] : [])] };
      await checkOutput(flags.output, io);
      const field = await openFieldBands(input, layout, kind);
      try {
        if (flags.merge !== undefined) await mergeCli(input, field, flags, out, start);
        else if (flags.base !== undefined) await spectraCli(input, field, flags as PlanFlags & { base: string; part: [number, number] }, out, start);
        else await planCli(input, field, flags as PlanFlags & { bound: Bound }, out, start);
      } finally {
        field.close();
      }
    });
}

/** The rows of `field` as the plan's field's rows (an N-D array's flattened to its matrix), read errors in the command line's words. */
function fieldRows(field: BandReader, f: Pick<PlanField, 'shape' | 'nd_shape' | 'dtype'>, input: string, what: string): BandSource {
  const have = `${field.ndShape.join('x')} ${field.dtype}`;
  const want = `${(f.nd_shape ?? f.shape).join('x')} ${f.dtype}`;
  if (have !== want) throw new UsageError(`'${input}' holds a ${have} array; ${what} was made for ${want}`);
  const factor = f.shape[1] / field.shape[1];
  return {
    band: (r0, count) => {
      try {
        return field.band(r0 * factor, count * factor);
      } catch (e) {
        throw fileError(e, 'read', input);
      }
    },
  };
}

/** A plan made in one process, or (with --part) piece K of N of its range pass. */
async function planCli(input: string, field: BandReader, flags: PlanFlags & { bound: Bound }, out: Output, start: number): Promise<void> {
  const io = { force: flags.force === true, inputs: [input] };
  const grid = arrayGrid(field.ndShape, flags.matrix, undefined, input);
  if (grid.slices > 1) throw new UsageError(`'${input}' holds ${field.ndShape.length} axes, packed as ${grid.slices} slices, which plans and parts do not split: give --matrix (e.g. --matrix axis0:space), or pack it in one process`);
  const fill = flags.fill === false ? undefined : flags.fill;
  checkFill(fill, field.dtype);
  const name = flags.name ?? defaultName(input);
  const { spec, page } = fieldSpecOf([grid.rows, grid.cols], field.dtype, { bound: flags.bound, tile: flags.tile, fill: fill ?? null, name, progressive: flags.progressive === true });
  const nd = grid.layout === undefined ? undefined : { nd_shape: field.ndShape, layout: grid.layout };
  if (flags.part !== undefined) {
    const [k, n] = flags.part;
    const rows = rangeRows(grid.rows, k, n);
    // The fill-value guard's state is kept (and judged at the merge) unless --no-fill turned it off.
    const piece = rangePiece({ band: watchedBand(field, grid, input, undefined, null, () => undefined) }, { spec, page, nd }, k, n, flags.fill !== false);
    await writeOutput(flags.output, new TextEncoder().encode(pieceText(piece)), io);
    const elapsed = performance.now() - start;
    out.text(`range pass, part ${k}/${n} of '${input}' (rows ${rows[0]}..${rows[1] - 1}) -> '${flags.output}'; merge every part with 'rankfield plan ${input} --merge PIECES -o OUT'; ${seconds(elapsed)}\n`);
    out.result({ command: 'plan', pass: 'range', input, output: flags.output, part: [k, n], rows, seconds: elapsed / 1000 });
    return;
  }
  const watch = flags.fill === false ? null : new RangeWatch(fill ?? null);
  const band = watchedBand(field, grid, input, fill, watch, () => undefined);
  const threads = defaultThreads(flags.threads, grid.rows * grid.cols) ?? checkThreads(undefined);
  const pool = threads > 1 ? new WorkerPool(threads, { local: (k, body) => encodeTasks[k as keyof typeof encodeTasks](body as never).result, preload: 'encode', steal: true }) : null;
  let plan: RunPlan;
  try {
    plan = await makePlan({ band }, { spec, page, nd, file: basename(input), run: flags.run, planL2: pool ? async (src, s, c) => (await planL2Parallel(src, s, c, pool)).data : undefined });
  } finally {
    await pool?.close();
  }
  await writeOutput(flags.output, new TextEncoder().encode(planText(plan)), io);
  reportPlan(input, flags.output, plan, false, out, start);
}

/** The plan (or base) written: what it fixes and how many parts it splits into. */
function reportPlan(input: string, output: string, plan: RunPlan, base: boolean, out: Output, start: number): void {
  const f = plan.field;
  const bands = partRange(plan, 1, 1).bands[1];
  const elapsed = performance.now() - start;
  const l2 = plan.l2 ? `; L2 plan '${plan.l2.name}'` : '';
  const next = base ? `; next, the spectra pass: 'rankfield plan ${input} --base ${output} --part K/N -o PIECE' for K = 1..N, then --merge` : '';
  out.text(
    `${base ? 'base of' : 'planned'} run '${printable(plan.run)}' for '${input}' (${f.shape.join('x')} ${f.dtype}, field '${printable(f.name)}') -> '${output}': ` +
      `tile ${f.tile.join('x')}, bound ${f.bound.mode}:${f.bound.value} (E = ${f.tolerance})${l2}; ${bands} band${bands === 1 ? '' : 's'} of ${plan.source.band_rows} rows, so at most ${bands} parts${next}; ${seconds(elapsed)}\n`,
  );
  out.result({ command: 'plan', ...(base ? { pass: 'base' } : {}), input, output, run: plan.run, hash: plan.hash, tile: f.tile, tolerance: f.tolerance, range: f.range, bands, bandRows: plan.source.band_rows, l2: plan.l2?.name ?? null, seconds: elapsed / 1000 });
}

/** Piece K of N of the spectra pass of a base. */
async function spectraCli(input: string, field: BandReader, flags: PlanFlags & { base: string; part: [number, number] }, out: Output, start: number): Promise<void> {
  await statInput(flags.base);
  const base = parsePlan(new TextDecoder().decode(await readInput(flags.base)), flags.base, true);
  const [k, n] = flags.part;
  const piece = spectraPiece(fieldRows(field, base.field, input, `the base '${flags.base}'`), base, k, n, `'${input}'`);
  await writeOutput(flags.output, new TextEncoder().encode(pieceText(piece)), { force: flags.force === true, inputs: [input, flags.base] });
  const elapsed = performance.now() - start;
  out.text(`spectra pass, part ${k}/${n} of '${input}' (tiles ${piece.tiles[0]}..${piece.tiles[1] - 1}, ${piece.values.length} singular values held) -> '${flags.output}'; ${seconds(elapsed)}\n`);
  out.result({ command: 'plan', pass: 'spectra', input, output: flags.output, part: [k, n], tiles: piece.tiles, values: piece.values.length, seconds: elapsed / 1000 });
}

/** Merge the pieces of one pass: the plan, or after the range pass of an rmse or psnr bound the base. */
async function mergeCli(input: string, field: BandReader, flags: PlanFlags & { merge?: string[] }, out: Output, start: number): Promise<void> {
  const names = flags.merge ?? [];
  const twice = names.find((p, i) => names.indexOf(p) !== i);
  if (twice !== undefined) throw new UsageError(`'${twice}' is named twice`);
  const pieces: { label: string; piece: PlanPiece }[] = [];
  for (const p of names) {
    await statInput(p);
    pieces.push({ label: p, piece: parsePiece(new TextDecoder().decode(await readInput(p)), p) });
  }
  const first = pieces[0].piece;
  const f = first.pass === 'range' ? { shape: first.ask.shape, nd_shape: first.ask.nd_shape ?? undefined, dtype: first.ask.dtype } : first.base.field;
  const src = fieldRows(field, f, input, `the piece '${names[0]}'`);
  const o = { file: basename(input), run: flags.run, input: `'${input}'`, onSuspect: (s: Suspect): never => {
    throw new UsageError(suspectMessage(s, `'${input}'`, f.dtype === 'f32'));
  } };
  const { plan, base } = first.pass === 'range' ? mergeRange(src, pieces, o) : { plan: mergeSpectra(src, pieces, o), base: false };
  await writeOutput(flags.output, new TextEncoder().encode(planText(plan, base)), { force: flags.force === true, inputs: [input, ...names] });
  reportPlan(input, flags.output, plan, base, out, start);
}
