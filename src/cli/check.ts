/** `rankfield check`: verify every tile of an archive, optionally against the original values. */
import type { Command } from 'commander';
import { InputCode, InputError, isPointwise, type Archive, type CheckReport, type Dtype, type FieldHeader } from '../index.js';
import { Exit, UsageError } from './errors.js';
import { isUrl, openArchive, statInput } from './files.js';
import { boundText, num, rawBytes } from './format.js';
import { loadField } from './input.js';
import type { Context } from './main.js';
import { dtypeOption, endianOption, nameOption, shapeOption } from './options.js';
import { Output, type OutputFlags } from './output.js';

interface CheckFlags extends OutputFlags {
  against?: string;
  field?: string;
  shape?: [number, number];
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

ORIGINAL is a .npy file, or headerless raw binary; for raw, --shape and
--dtype default to the field's own and --endian to little.

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

/** Check that an original fits the field it is compared with. */
function checkOriginal(path: string, shape: number[], dtype: Dtype, h: FieldHeader, archive: string): void {
  if (shape[0] !== h.shape[0] || shape[1] !== h.shape[1]) {
    throw new InputError(InputCode.Shape, `original '${path}' is ${shape.join('x')}, but field '${h.name}' of '${archive}' is ${h.shape.join('x')}`);
  }
  if (dtype !== h.dtype) {
    throw new InputError(InputCode.Dtype, `original '${path}' holds ${dtype} values, but field '${h.name}' of '${archive}' is ${h.dtype}`);
  }
}

function reportText(r: CheckReport, headers: FieldHeader[], input: string, against: { path: string; field: string } | null): string {
  const lines = [`check '${input}'${against ? ` against '${against.path}' (field '${against.field}')` : ''}`];
  for (const f of r.fields) {
    const h = headers.find((x) => x.name === f.name)!;
    const pw = isPointwise(h.bound.mode);
    const share = (maxErr: number, rmse: number) => `${f.tolerance > 0 ? ((pw ? maxErr : rmse) / f.tolerance).toFixed(3) : '-'} E`;
    lines.push(`field '${f.name}': ${f.tiles} tiles, bound ${boundText(h)}`);
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
  const bar = out.tileProgress('checking', raw);
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
    .option('--against <ORIGINAL>', 'original values to compare with: .npy, or raw binary')
    .option('--field <NAME>', 'field ORIGINAL belongs to (default: the first)', nameOption)
    .option('--shape <RxC>', 'raw ORIGINAL: rows x columns (default: the field\'s)', shapeOption)
    .option('--dtype <TYPE>', 'raw ORIGINAL: f32 or f64 (default: the field\'s)', dtypeOption)
    .option('--endian <ORDER>', 'raw ORIGINAL: byte order, little (default) or big', endianOption)
    .option('--json', 'print the report as one JSON object')
    .addHelpText('after', HELP)
    .action(async (input: string, flags: CheckFlags) => {
      const out = new Output(ctx, flags);
      if (flags.against === undefined) {
        const stray = (['field', 'shape', 'dtype', 'endian'] as const).filter((k) => flags[k] !== undefined).map((k) => `--${k}`);
        if (stray.length > 0) throw new UsageError(`${stray.join(', ')} describe the original, which needs --against ORIGINAL`);
      }
      if (!isUrl(input)) await statInput(input);
      if (flags.against !== undefined) await statInput(flags.against);
      const archive = await openArchive(input);
      try {
        let against: { path: string; field: string } | null = null;
        let report: CheckReport;
        if (flags.against !== undefined) {
          const { header: h } = archive.field(flags.field);
          const layout = { shape: flags.shape, dtype: flags.dtype, endian: flags.endian };
          const orig = await loadField(flags.against, layout, { shape: [h.shape[0], h.shape[1]], dtype: h.dtype });
          checkOriginal(flags.against, orig.shape, orig.dtype, h, input);
          against = { path: flags.against, field: h.name };
          report = await withBar(out, archive, (onProgress) => archive.check({ [h.name]: orig.data }, onProgress));
        } else {
          report = await withBar(out, archive, (onProgress) => archive.check(undefined, onProgress));
        }
        out.result({ command: 'check', file: input, against: against?.path ?? null, field: against?.field ?? null, ok: report.ok, fields: report.fields, failures: report.failures });
        out.text(reportText(report, archive.header.fields, input, against));
        ctx.exitCode = report.ok ? Exit.Ok : Exit.CheckFailed;
      } finally {
        await archive.close();
      }
    });
}
