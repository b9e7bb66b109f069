/** `rankfield check`: verify every tile of an archive, optionally against the original values. */
import type { Command } from 'commander';
import { InputCode, InputError, isPointwise, type Archive, type BandOriginal, type CheckReport, type Dtype, type FieldHeader, type FloatArray } from '../index.js';
import { printable } from '../format/schema.js';
import { ndShape } from '../geometry.js';
import { setOwn } from '../io/netcdf-types.js';
import { byPath } from './netcdf.js';
import { Exit, fileError, UsageError } from './errors.js';
import { isUrl, openArchive, statInput } from './files.js';
import { openNetcdfInput } from './netcdf-open.js';
import { boundText, num, rawBytes } from './format.js';
import { flatValues, inputKind, openFieldBands, type InputKind, type RawLayout } from './input.js';
import type { Context } from './context.js';
import { dtypeOption, endianOption, nameOption, ndShapeOption } from './options.js';
import { Output, type OutputFlags } from './output.js';

interface CheckFlags extends OutputFlags {
  against?: string;
  field?: string;
  var?: string[];
  shape?: number[];
  dtype?: Dtype;
  endian?: 'little' | 'big';
}

const HELP = `
What is checked, for every tile of every field: the payload CRC-32, that it
decodes, the CRC-32 of the decoded values (so a reader gets exactly what was
verified at pack time), and the recorded error against the bound. With
--against, the decoded values are also compared with the original: the max
error (abs, rel) or RMSE (rmse, psnr) is measured, and every missing cell
(NaN, infinity, fill value) must come back bit for bit.

ORIGINAL is anything pack reads, told apart by its first bytes (else its
name): a NetCDF file, whose variables are compared with the fields of their
names (every field, or those named by --var) and reported one by one; a .npy
file of the field's shape (N-D included); or headerless raw binary, whose
--shape (RxC or AxBxC...) and --dtype default to the field's own and
--endian to little. The original is read a band of tile rows at a time, as
the tiles are checked, so it may be larger than memory.

Exit codes:
  0  every tile holds its bound and checksums (and matches ORIGINAL)
  1  the check failed: each failure is listed (field, tile, what)
  2  unusable input: IN cannot be read, is not an archive, or its tail,
     header or index directory is truncated or corrupted (then no tile
     can be located); ORIGINAL cannot be read or has the wrong shape or
     dtype; bad options
A damaged tile payload, or a damaged index page (its tiles cannot be
located), is a check failure (exit 1); damage to the tail,
header or index directory is exit 2.`;

/** Check that an original fits the field it is compared with (both shapes as the files give them). */
function checkOriginal(what: string, shape: number[], dtype: Dtype, h: FieldHeader, archive: string): void {
  const want = ndShape(h);
  if (shape.length !== want.length || shape.some((d, i) => d !== want[i])) {
    throw new InputError(InputCode.Shape, `${what} has shape ${shape.join('x')}, but field '${printable(h.name)}' of '${archive}' has shape ${want.join('x')}`);
  }
  if (dtype !== h.dtype) {
    throw new InputError(InputCode.Dtype, `${what} holds ${dtype} values, but field '${printable(h.name)}' of '${archive}' is ${h.dtype}`);
  }
}

/** An original's values, read by runs of C-order positions: [start, start + count). */
export type FlatRead = (start: number, count: number) => FloatArray;

/** Originals open for reading: a reader per field name, and the files to close. */
export interface Originals {
  values: Record<string, FlatRead>;
  close(): void;
}

/**
 * The originals of an archive's fields from a NetCDF file, read as pack
 * reads them (CF missing values and packing applied), a run at a time:
 * every field of the archive but the factor fields of layers (checked
 * through the field they belong to), or those named by --var; each must be a
 * variable of the file, of the field's shape and dtype. Only the header is
 * read here. The caller closes them.
 */
export async function netcdfOriginals(path: string, archive: Archive, names: string[] | undefined, input: string, hdf5: boolean): Promise<Originals> {
  const nc = await openNetcdfInput(path, hdf5);
  try {
    const file = nc.file;
    const chosen = names && names.length > 0 ? names.map((n) => archive.field(byPath(archive.names, n)).header.name) : archive.mainNames;
    const out: Record<string, FlatRead> = {};
    for (const name of chosen) {
      const h = archive.field(name).header;
      if (!file.variables.some((v) => v.name === name)) {
        throw new InputError(InputCode.Missing, `'${path}' has no variable '${printable(name)}' to compare with field '${printable(name)}' of '${input}' (variables: ${file.variables.map((v) => printable(v.name)).join(', ')}); name the fields to compare with --var`);
      }
      const named = (e: unknown): unknown => (e instanceof InputError ? new InputError(e.code, `${path}: ${e.message}`) : fileError(e, 'read', path));
      let reader;
      try {
        reader = nc.variable(name, { mark: true });
      } catch (e) {
        throw named(e);
      }
      checkOriginal(`variable '${printable(name)}' of '${path}'`, reader.info.shape, reader.info.dtype, h, input);
      const r = reader;
      setOwn(out, name, (start: number, count: number) => {
        try {
          return r.values(start, count);
        } catch (e) {
          throw named(e);
        }
      });
    }
    return { values: out, close: () => nc.close() };
  } catch (e) {
    nc.close();
    throw e;
  }
}

/**
 * The original of one field from a .npy or raw file, read by bands (its
 * shape and dtype checked against the field's; raw --shape and --dtype
 * default to the field's). The caller closes it.
 */
export async function arrayOriginal(path: string, h: FieldHeader, layout: RawLayout, kind: InputKind, input: string): Promise<Originals> {
  const field = await openFieldBands(path, layout, kind, { shape: ndShape(h), dtype: h.dtype });
  try {
    checkOriginal(`original '${path}'`, field.ndShape, field.dtype, h, input);
  } catch (e) {
    field.close();
    throw e;
  }
  const values: Record<string, FlatRead> = {};
  setOwn(values, h.name, (start: number, count: number) => {
    try {
      return flatValues(field, start, count);
    } catch (e) {
      throw fileError(e, 'read', path);
    }
  });
  return { values, close: () => field.close() };
}

/** The band originals {@link Archive.check} reads: rows of each field's stacked matrix. */
function bandOriginals(archive: Archive, o: Originals): Record<string, BandOriginal> {
  const out: Record<string, BandOriginal> = {};
  for (const [name, read] of Object.entries(o.values)) {
    const cols = archive.field(name).header.shape[1];
    setOwn(out, name, { band: (r0: number, count: number) => read(r0 * cols, count * cols) });
  }
  return out;
}

function reportText(r: CheckReport, headers: FieldHeader[], input: string, against: { path: string; fields: string[] } | null): string {
  const which = against ? (against.fields.length === 1 ? `field '${against.fields[0]}'` : `fields ${against.fields.map((f) => `'${f}'`).join(', ')}`) : '';
  const lines = [`check '${input}'${against ? ` against '${against.path}' (${which})` : ''}`];
  for (const f of r.fields) {
    const h = headers.find((x) => x.name === f.name)!;
    const pw = isPointwise(h.bound.mode);
    const share = (maxErr: number, rmse: number) => `${f.tolerance > 0 ? ((pw ? maxErr : rmse) / f.tolerance).toFixed(3) : '-'} E`;
    const role = h.factorOf ? `; the ${h.factorOf.side} factor of the layer of field '${headers[h.factorOf.field].name}'` : h.layer ? `; a rank-${h.layer.rank} layer, its factors checked as fields and through every low-rank tile` : '';
    lines.push(`field '${f.name}': ${f.tiles} tiles, bound ${boundText(h)}${role}`);
    lines.push(`  recorded  max error ${num(f.recorded.maxErr)}, RMSE ${num(f.recorded.rmse)} (${pw ? 'max error' : 'RMSE'} ${share(f.recorded.maxErr, f.recorded.rmse)})`);
    if (f.measured) {
      const m = f.measured;
      const specials = m.specialMismatches === 0 ? 'missing cells identical' : `${m.specialMismatches} missing cells differ`;
      lines.push(`  measured  max error ${num(m.maxErr)}, RMSE ${num(m.rmse)} (${pw ? 'max error' : 'RMSE'} ${share(m.maxErr, m.rmse)}); ${specials}`);
    }
  }
  for (const f of r.failures) {
    const prefix = `${input} field '${f.field}' tile ${f.tile}: `;
    const what = f.what.startsWith(prefix) ? f.what.slice(prefix.length) : f.what;
    lines.push(`FAIL field '${f.field}' ${f.tile >= 0 ? `tile ${f.tile}` : '(whole field)'}: ${what}`);
  }
  const n = r.failures.length;
  lines.push(r.ok ? `check passed: every tile holds its bound and checksums${against ? ' and matches the original' : ''}` : `check FAILED: ${n} problem${n === 1 ? '' : 's'}`);
  return lines.join('\n') + '\n';
}

/** Run a check with a progress bar over the tiles of every field. */
async function withBar(out: Output, archive: Archive, run: (onProgress: (done: number, total: number) => void) => Promise<CheckReport>): Promise<CheckReport> {
  const raw = archive.header.fields.reduce((a, h) => a + rawBytes(h), 0);
  const bar = out.tileProgress('checking', raw, 'reading the index and the first tiles');
  try {
    return await run(bar.onProgress);
  } finally {
    bar.stop();
  }
}

/** Register `check` on the program. */
export function registerCheck(program: Command, ctx: Context): void {
  program
    .command('check')
    .summary('verify an archive tile by tile, optionally against the original')
    .description('Verify every tile of an archive: checksums, decoding, and the error bound; with --against, also against the original values.')
    .argument('<IN>', 'archive to check: a file or an http(s) URL')
    .option('--against <ORIGINAL>', 'original values to compare with: whatever pack takes (.npy, NetCDF, or raw binary)')
    .option('--field <NAME>', '.npy or raw ORIGINAL: the field it belongs to (default: the first)', nameOption)
    .option('--var <NAME>', 'NetCDF ORIGINAL: a variable to compare with the field of its name (repeatable; default every field)', (v: string, prev: string[] | undefined) => [...(prev ?? []), v])
    .option('--shape <RxC>', 'raw ORIGINAL: its shape, RxC or AxBxC... (default: the field\'s)', ndShapeOption)
    .option('--dtype <TYPE>', 'raw ORIGINAL: f32 or f64 (default: the field\'s)', dtypeOption)
    .option('--endian <ORDER>', 'raw ORIGINAL: byte order, little (default) or big', endianOption)
    .option('--json', 'print the report as one JSON object')
    .addHelpText('after', HELP)
    .action(async (input: string, flags: CheckFlags) => {
      const out = new Output(ctx, flags);
      if (flags.against === undefined) {
        const stray = (['field', 'var', 'shape', 'dtype', 'endian'] as const).filter((k) => flags[k] !== undefined).map((k) => `--${k}`);
        if (stray.length > 0) throw new UsageError(`${stray.join(', ')} describe the original, which needs --against ORIGINAL`);
      }
      if (!isUrl(input)) await statInput(input);
      if (flags.against !== undefined) await statInput(flags.against);
      const archive = await openArchive(input);
      try {
        let against: { path: string; fields: string[] } | null = null;
        let report: CheckReport;
        if (flags.against !== undefined) {
          const path = flags.against;
          const kind = await inputKind(path);
          // The originals are read a band of tile rows at a time, as the tiles are checked: never whole.
          let originals: Originals;
          if (kind === 'netcdf' || kind === 'hdf5') {
            const misplaced = (['field', 'shape', 'dtype', 'endian'] as const).filter((k) => flags[k] !== undefined).map((k) => `--${k}`);
            if (misplaced.length > 0) throw new UsageError(`${misplaced.join(', ')} describe a .npy or raw original; '${path}' is NetCDF (choose variables with --var)`);
            originals = await netcdfOriginals(path, archive, flags.var, input, kind === 'hdf5');
          } else {
            if (flags.var !== undefined) throw new UsageError(`--var chooses variables of a NetCDF original; '${path}' is not NetCDF (by its first bytes or its name): use --field`);
            const { header: h } = archive.field(flags.field);
            const layout = { shape: flags.shape, dtype: flags.dtype, endian: flags.endian };
            originals = await arrayOriginal(path, h, layout, kind, input);
          }
          try {
            against = { path, fields: Object.keys(originals.values) };
            const bands = bandOriginals(archive, originals);
            report = await withBar(out, archive, (onProgress) => archive.check(bands, onProgress));
          } finally {
            originals.close();
          }
        } else {
          report = await withBar(out, archive, (onProgress) => archive.check(undefined, onProgress));
        }
        out.result({ command: 'check', file: input, against: against?.path ?? null, field: against?.fields[0] ?? null, compared: against?.fields ?? [], ok: report.ok, fields: report.fields, failures: report.failures });
        out.text(reportText(report, archive.header.fields, input, against));
        ctx.exitCode = report.ok ? Exit.Ok : Exit.CheckFailed;
      } finally {
        await archive.close();
      }
    });
}
