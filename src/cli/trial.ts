/**
 * `rankfield trial`: pack a sample of the user's own field at several bounds
 * and report, per bound, what each would cost and achieve, so a bound can be
 * chosen on the data before archiving all of it. Nothing is written but the
 * optional error pictures.
 */
import { join } from 'node:path';
import { InvalidArgumentError, type Command } from 'commander';
import { printable } from '../format/schema.js';
import { InputError, formatBound, isPointwise, MemorySource, open, pack, parseBound, resolveBound, type Bound, type Dtype, type FloatArray } from '../index.js';
import { heatmap } from '../picture/heatmap.js';
import { readGrids, slicePlane } from '../picture/sample.js';
import { openNetcdfInput } from './netcdf-open.js';
import type { NetcdfInput } from '../io/netcdf-input.js';
import { fileError, UsageError } from './errors.js';
import { checkOutput, statInput, writeOutput } from './files.js';
import { num, ratio, seconds, table } from './format.js';
import { checkLayout, flatValues, inputKind, openFieldBands } from './input.js';
import type { Context } from './context.js';
import { dtypeOption, endianOption, fillOption, nameOption, ndShapeOption, nonFinite, tileOption } from './options.js';
import { Output, type OutputFlags } from './output.js';
import { byteShares, tileUse, type ByteShares, type TileUse } from './summary.js';

interface TrialFlags extends OutputFlags {
  bounds?: Bound[];
  var?: string;
  sample?: number;
  tile?: [number, number] | 'auto';
  fill?: number;
  shape?: number[];
  dtype?: Dtype;
  endian?: 'little' | 'big';
  pictures?: string;
  force?: boolean;
}

/** The bounds tried by default. */
export const TRIAL_BOUNDS = 'rel:1e-2,rel:1e-3,rel:1e-4,psnr:60';

/** Side of the sample by default, in cells. */
const DEFAULT_SAMPLE = 384;

/** One bound's outcome on the sample. */
export interface TrialRow {
  bound: string;
  /** The resolved tolerance E (pointwise limit or RMSE limit), against the whole field's value range. */
  tolerance: number;
  bytes: number;
  ratio: number;
  bitsPerValue: number;
  maxErr: number;
  rmse: number;
  /** 20 log10(range / RMSE), range of the whole field's valid values; null when the RMSE is 0. */
  psnr: number | null;
  tiles: TileUse;
  shares: ByteShares;
  picture: string | null;
}

const HELP = `
The sample is the central block of up to --sample x --sample cells of the
field (for NetCDF input, of the variable --var names, else of the first of 2
or more dimensions, read as pack reads it); of an array of 3 or more axes, of its middle slice over the last two
axes (the slices pack stores by default). IN is read once whole, a band of rows at a time, for the value range
that rel and psnr bounds are resolved against (as pack does), so the
tolerance E on the sample is the one the whole field would get. The sample is packed at each bound in
memory, read back and compared with itself: ratio (raw value bytes / archive
bytes), bits per value, the achieved max error, RMSE and PSNR (over the
sample's value range), how many tiles use a low-rank part, and which share of
the bytes is low-rank factors and which residual. A sample is not the whole
field: ratios on the full field differ, most where the field changes
character from place to place.

Whatever bound you choose, packing is lossy: it discards information. Keep
the original files until rankfield check ARCHIVE --against ORIGINAL passes,
and follow your institution's data-retention rules.

--pictures DIR writes one error picture per bound, DIR/trial-MODE-VALUE.png
(|decoded - original| / E per cell; see rankfield preview --help).

Example:
  rankfield trial sst.npy --fill -999 --bounds abs:0.01,abs:0.05,psnr:60`;

/** `--bounds A,B,...`: bounds, each as --bound takes it. */
function boundsOption(text: string): Bound[] {
  const parts = text.split(',').map((p) => p.trim());
  if (parts.length === 0 || parts.some((p) => p === '')) throw new InvalidArgumentError(`bounds must be a comma-separated list such as rel:1e-2,psnr:60, got '${printable(text)}'`);
  if (parts.length > 16) throw new InvalidArgumentError(`at most 16 bounds at once, got ${parts.length}`);
  return parts.map((p) => {
    const m = /^([a-z]+):(.+)$/.exec(p);
    const bad = m === null ? null : nonFinite(m[2]);
    if (bad !== null) throw new InvalidArgumentError(`bound value in '${printable(p)}' must be a positive finite number, got ${bad}`);
    try {
      return parseBound(p);
    } catch (e) {
      throw new InvalidArgumentError(e instanceof Error ? e.message : String(e));
    }
  });
}

function sampleOption(text: string): number {
  const n = Number(text.trim());
  if (!/^[0-9]+$/.test(text.trim()) || !Number.isSafeInteger(n) || n < 8 || n > 4096) throw new InvalidArgumentError(`sample must be an integer from 8 to 4096, got '${printable(text)}'`);
  return n;
}

/** The sample a trial packs, where it lies, and the whole field's value range. */
export interface Sample {
  values: FloatArray;
  shape: [number, number];
  /** The whole field's shape. */
  field: number[];
  /** The variable sampled (NetCDF input), else null. */
  variable: string | null;
  slice: number | null;
  rows: [number, number];
  cols: [number, number];
  dtype: Dtype;
  range: [number, number] | null;
  /** The fill value marking missing cells: --fill, or for NetCDF the variable's own. */
  fill: number | null;
}

/**
 * The sample of a variable of a NetCDF file (classic, or NetCDF-4 / HDF5
 * through h5wasm), read as pack reads it: CF missing values are the fill
 * value (`--fill` stands in where the variable declares none), packed
 * values are unpacked. The variable is `--var`, or the first numeric one of
 * two or more dimensions, as pack would take. It is read a band of rows at
 * a time, once for its value range, then the sample's rows.
 */
async function readNetcdfSample(input: string, flags: TrialFlags & { sample: number }, hdf5: boolean): Promise<Sample> {
  const given = (['shape', 'dtype', 'endian'] as const).filter((k) => flags[k] !== undefined).map((k) => `--${k}`);
  if (given.length > 0) throw new UsageError(`${given.join(', ')} describe raw input; '${printable(input)}' is NetCDF, which describes itself`);
  const nc = await openNetcdfInput(input, hdf5);
  try {
    return netcdfSample(nc, flags);
  } finally {
    nc.close();
  }
}

/**
 * The sample of {@link readNetcdfSample} from an open file: one pass over
 * the variable of `rangeValues` values a read at most, for its value range,
 * then the sample's rows, each read alone (its columns only).
 */
export function netcdfSample(nc: NetcdfInput, flags: Pick<TrialFlags, 'var' | 'fill'> & { sample: number }, rangeValues = RANGE_VALUES): Sample {
  const input = nc.path;
  {
    const file = nc.file;
    const fields = file.variables.filter((v) => v.type !== 'char' && v.shape.length >= 2 && v.shape.every((d) => d > 0));
    const name = flags.var ?? fields[0]?.name;
    if (name === undefined) throw new UsageError(`'${printable(input)}' has no numeric variable of 2 or more dimensions to sample`);
    const named = (e: unknown): unknown => (e instanceof InputError ? new InputError(e.code, `${input}: ${e.message}`) : fileError(e, 'read', input));
    let reader;
    try {
      reader = nc.variable(name);
    } catch (e) {
      throw named(e);
    }
    const info = reader.info;
    const fill = info.fill ?? flags.fill ?? null;
    const f = fill === null ? null : info.dtype === 'f32' ? Math.fround(fill) : fill;
    const nd = info.shape;
    let cut: CentralSample;
    try {
      cut = centralSample({ nd, all: reader.shape[0], dtype: info.dtype, rows: (b0, count) => reader.rows(b0, count), values: (offset, count) => reader.values(offset, count) }, flags.sample, f, rangeValues);
    } catch (e) {
      throw named(e);
    }
    return { ...cut, field: nd, variable: name, dtype: info.dtype, fill };
  }
}

/** A sample's values and where they lie, with the whole field's value range. */
type CentralSample = Pick<Sample, 'values' | 'shape' | 'slice' | 'rows' | 'cols' | 'range'>;

/**
 * The central block of up to side x side cells of a field (of its middle
 * slice, for an N-D array read as the matrix of all axes but the last by
 * the last: slice k is rows k R .. (k + 1) R - 1), each of its rows read
 * alone (its columns only), and the value range of the whole field over
 * its valid values (finite, not `fill`), in one pass of about
 * `rangeValues` values a read.
 */
function centralSample(src: { nd: readonly number[]; all: number; dtype: Dtype; rows(b0: number, count: number): FloatArray; values(offset: number, count: number): FloatArray }, side: number, fill: number | null, rangeValues: number): CentralSample {
  const { nd, all } = src;
  const R = nd[nd.length - 2];
  const C = nd[nd.length - 1];
  const slice = nd.length > 2 ? Math.floor(all / R / 2) : null;
  const m = Math.min(R, side);
  const n = Math.min(C, side);
  const r0 = Math.floor((R - m) / 2);
  const c0 = Math.floor((C - n) / 2);
  let lo = Infinity;
  let hi = -Infinity;
  const step = Math.max(1, Math.floor(rangeValues / C));
  for (let b0 = 0; b0 < all; b0 += step) {
    const part = src.rows(b0, Math.min(step, all - b0));
    for (let k = 0; k < part.length; k++) {
      const v = part[k];
      if (!Number.isFinite(v) || v === fill) continue;
      if (v < lo) lo = v;
      if (v > hi) hi = v;
    }
  }
  const values = src.dtype === 'f32' ? new Float32Array(m * n) : new Float64Array(m * n);
  for (let i = 0; i < m; i++) values.set(src.values(((slice ?? 0) * R + r0 + i) * C + c0, n), i * n);
  return { values, shape: [m, n], slice, rows: [r0, r0 + m], cols: [c0, c0 + n], range: lo <= hi ? [lo, hi] : null };
}

/** Values read at a time when a NetCDF variable's value range is measured (about). */
const RANGE_VALUES = 1 << 22;


/**
 * Read the central block of up to side x side cells of IN, and the value
 * range of the whole field (one pass over it, a band of rows at a time), which
 * rel and psnr bounds are resolved against, as pack does.
 */
async function readSample(
  input: string,
  flags: TrialFlags & { sample: number },
  kind: 'npy' | 'raw',
): Promise<Sample> {
  const layout = { shape: flags.shape, dtype: flags.dtype, endian: flags.endian };
  checkLayout(input, layout, undefined, kind);
  const field = await openFieldBands(input, layout, kind);
  try {
    const fill = flags.fill === undefined ? null : field.dtype === 'f32' ? Math.fround(flags.fill) : flags.fill;
    let cut: CentralSample;
    try {
      cut = centralSample({ nd: field.ndShape, all: field.shape[0], dtype: field.dtype, rows: (b0, count) => field.band(b0, count), values: (offset, count) => flatValues(field, offset, count) }, flags.sample, fill, RANGE_VALUES);
    } catch (e) {
      throw fileError(e, 'read', input);
    }
    return { ...cut, field: field.ndShape, variable: null, dtype: field.dtype, fill: flags.fill ?? null };
  } finally {
    field.close();
  }
}

/** Pack the sample at one bound, read it back and measure it. */
async function tryBound(sample: FloatArray, shape: [number, number], range: [number, number] | null, fill: number | null, bound: Bound, flags: TrialFlags, out: Output, pictures: string | null, io: { force: boolean; inputs: string[] }): Promise<TrialRow> {
  const bar = out.tileProgress(`trial ${formatBound(bound)}`, sample.byteLength, 'planning the tiles');
  // rel and psnr are resolved against the whole field's range, not the sample's: the E a pack of the field would use.
  const span = range ? range[1] - range[0] : 0;
  const pointwise = isPointwise(bound.mode);
  const tol = resolveBound(bound, span);
  const fixed: Bound = bound.mode === 'rel' || bound.mode === 'psnr' ? { mode: pointwise ? 'abs' : 'rmse', value: tol > 0 ? tol : Number.MIN_VALUE } : bound;
  let bytes: Uint8Array;
  try {
    bytes = pack(sample, shape, { bound: fixed, tile: flags.tile, fill, fillGuard: false, name: 'sample', onProgress: bar.onProgress });
  } finally {
    bar.stop();
  }
  const archive = await open(bytes);
  const { header: h } = archive.field();
  const ix = await archive.fieldIndex();
  const back = (await archive.read()).values;
  const stored = h.fill === null ? null : h.dtype === 'f32' ? Math.fround(h.fill) : h.fill;
  let max = 0;
  let sq = 0;
  let valid = 0;
  for (let k = 0; k < sample.length; k++) {
    const v = sample[k];
    if (!Number.isFinite(v) || v === stored) continue;
    const e = Math.abs(back[k] - v);
    if (e > max) max = e;
    sq += e * e;
    valid++;
  }
  const rmse = valid > 0 ? Math.sqrt(sq / valid) : 0;
  let picture: string | null = null;
  if (pictures !== null) {
    picture = join(pictures, `trial-${formatBound(bound).replace(':', '-')}.png`);
    const grids = await readGrids(slicePlane(archive, h, 0), h, { slice: 0, rows: [0, shape[0]], cols: [0, shape[1]] }, Math.max(1, Math.ceil(Math.max(...shape) / 768)), sample, h.bound.tolerance > 0 ? h.bound.tolerance : 1);
    const g = grids.errors!;
    const worst = g.cells.reduce((a, b) => (b > a ? b : a), 0);
    const scale = g.block > 1 ? 1 : Math.max(1, Math.floor(384 / Math.max(g.rows, g.cols)));
    const png = heatmap({
      cells: g.cells,
      rows: g.rows,
      cols: g.cols,
      scale,
      map: 'inferno',
      lo: 0,
      hi: Math.max(1, worst),
      barLabel: '|error| / E',
      title: [`trial sample: |decoded - original| / E`, `bound ${formatBound(bound)} (E = ${num(h.bound.tolerance)}); ratio ${ratio(sample.byteLength, bytes.length)}`],
      notes: [g.block > 1 ? `one pixel: ${g.block} x ${g.block} cells (largest)` : scale > 1 ? `one cell: ${scale} x ${scale} pixels` : 'one cell per pixel'],
      missing: g.missing > 0,
    }).png();
    await writeOutput(picture, png, io);
  }
  await archive.close();
  return {
    bound: formatBound(bound),
    tolerance: tol,
    bytes: bytes.length,
    ratio: sample.byteLength / bytes.length,
    bitsPerValue: (bytes.length * 8) / sample.length,
    maxErr: max,
    rmse,
    psnr: rmse > 0 && span > 0 ? 20 * Math.log10(span / rmse) : null,
    tiles: tileUse(ix),
    shares: await byteShares(new MemorySource(bytes), ix, 'trial sample'),
    picture,
  };
}

/** "45% / 50%": the shares of factors and residual in a row's payload bytes. */
function carried(s: ByteShares): string {
  const total = s.factors + s.residual + s.exact + s.tileHeaders;
  const pct = (n: number) => `${total > 0 ? Math.round((100 * n) / total) : 0}%`;
  return `${pct(s.factors)} / ${pct(s.residual + s.exact)}`;
}

/** Register `trial` on the program. */
export function registerTrial(program: Command, ctx: Context): void {
  program
    .command('trial')
    .summary('pack a sample of a field at several bounds and compare ratio and error, to choose a bound')
    .description('Pack a sample of a field at several bounds, in memory, and print per bound the ratio, bits per value, achieved max error, RMSE and PSNR, and what carried the bytes (low-rank factors or residual). Nothing is archived.')
    .argument('<IN>', 'input: NetCDF (told by its first bytes; --var picks the variable), .npy, or raw binary with --shape and --dtype')
    .option('--var <NAME>', 'NetCDF input: the variable to sample (default: the first of 2 or more dimensions)', nameOption)
    .option('--bounds <LIST>', `bounds to try, comma-separated (default ${TRIAL_BOUNDS})`, boundsOption)
    .option('--sample <N>', `side of the central sample in cells (default ${DEFAULT_SAMPLE})`, sampleOption)
    .option('--tile <RxC>', 'tile size as for pack (default: chosen on the sample per bound)', tileOption)
    .option('--fill <V>', 'fill value marking missing cells, as for pack', fillOption)
    .option('--shape <RxC>', 'raw input: rows x columns, or AxBxC... for an N-D array in C order', ndShapeOption)
    .option('--dtype <TYPE>', 'raw input: f32 or f64', dtypeOption)
    .option('--endian <ORDER>', 'raw input: byte order, little (default) or big', endianOption)
    .option('--pictures <DIR>', 'write an error picture per bound into DIR (an existing folder)')
    .option('--force', 'overwrite pictures of an earlier trial')
    .addHelpText('after', HELP)
    .action(async (input: string, given: TrialFlags) => {
      const start = performance.now();
      const flags = { ...given, bounds: given.bounds ?? boundsOption(TRIAL_BOUNDS), sample: given.sample ?? DEFAULT_SAMPLE };
      const out = new Output(ctx, flags);
      await statInput(input);
      const kind = await inputKind(input);
      const netcdf = kind === 'netcdf' || kind === 'hdf5';
      if (!netcdf && flags.var !== undefined) throw new UsageError(`--var applies to NetCDF input; '${printable(input)}' is not NetCDF (by its first bytes or its name)`);
      const io = { force: flags.force === true, inputs: [input] };
      const pictures = flags.pictures ?? null;
      if (pictures !== null) {
        for (const b of flags.bounds) await checkOutput(join(pictures, `trial-${formatBound(b).replace(':', '-')}.png`), io);
      }
      const s = netcdf ? await readNetcdfSample(input, flags, kind === 'hdf5') : await readSample(input, flags, kind);
      const rows: TrialRow[] = [];
      for (const b of flags.bounds) rows.push(await tryBound(s.values, s.shape, s.range, s.fill, b, flags, out, pictures, io));
      const where = `${s.slice === null ? '' : `slice ${s.slice}, `}rows ${s.rows[0]}..${s.rows[1] - 1}, columns ${s.cols[0]}..${s.cols[1] - 1}`;
      const range = s.range ? `valid range [${num(s.range[0])}, ${num(s.range[1])}]` : 'no valid values';
      out.text(`trial of '${input}'${s.variable === null ? '' : `, variable '${printable(s.variable)}'`} (${s.field.join('x')} ${s.dtype}, ${range}): sample ${s.shape.join(' x ')} (${where}), ${s.values.byteLength} bytes of raw values\n\n`);
      const body = rows.map((r) => [
        r.bound,
        num(r.tolerance),
        r.ratio.toFixed(2),
        r.bitsPerValue.toFixed(2),
        num(r.maxErr),
        num(r.rmse),
        r.psnr === null ? 'inf' : r.psnr.toFixed(1),
        `${r.tiles.lowRank}/${r.tiles.tiles}`,
        r.tiles.lowRank > 0 ? r.tiles.meanRank.toFixed(1) : '-',
        carried(r.shares),
      ]);
      out.text(`${table(['bound', 'E', 'ratio', 'bits/value', 'max error', 'RMSE', 'PSNR dB', 'low-rank tiles', 'mean rank', 'factors / residual'], body)}\n\n`);
      out.text('factors / residual: shares of the payload bytes in low-rank factors and in the residual with exactly stored values; the rest is tile headers and masks.\n');
      for (const r of rows) if (r.picture) out.text(`error picture for ${r.bound}: '${r.picture}'\n`);
      out.text(`A sample is not the whole field: check the full archive with rankfield check. ${seconds(performance.now() - start)}\n`);
      out.result({
        command: 'trial',
        input,
        variable: s.variable,
        shape: s.field,
        dtype: s.dtype,
        range: s.range,
        sample: { slice: s.slice, rows: s.rows, cols: s.cols, shape: s.shape, rawBytes: s.values.byteLength },
        bounds: rows,
        seconds: (performance.now() - start) / 1000,
      });
    });
}
