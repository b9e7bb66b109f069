/** `rankfield unpack`: decode one field of an archive, or a window of it, to .npy or raw binary. */
import { InvalidArgumentError, type Command } from 'commander';
import { formatNpy } from '../io/npy.js';
import { formatRaw } from '../io/raw.js';
import { UsageError } from './errors.js';
import { checkOutput, isUrl, openArchive, statInput, writeOutput } from './files.js';
import { seconds } from './format.js';
import { isNpyPath } from './input.js';
import type { Context } from './main.js';
import { boundOption, endianOption, nameOption } from './options.js';
import { formatBound } from '../codec/bound.js';
import type { Bound } from '../types.js';

/** A window as given by --region: each end may be left open (to the field's edge). */
export interface Region {
  rows: [number | undefined, number | undefined];
  cols: [number | undefined, number | undefined];
}

interface UnpackFlags {
  output: string;
  field?: string;
  region?: Region;
  bound?: Bound;
  endian?: 'little' | 'big';
  force?: boolean;
}

const HELP = `
IN is an archive file or an http(s) URL; a URL is read with HTTP Range
requests, fetching only the tail, header, index and the tiles needed.

--region R0:R1,C0:C1 decodes rows R0 to R1-1 and columns C0 to C1-1
(half-open ranges, counted from 0); an end left empty means the field's
edge, so ':100,50:' is the first 100 rows from column 50 on. Only the tiles
the window touches are read and decoded.

OUT ending in .npy gets a .npy file (little-endian, C order); any other name
gets headerless raw binary in C (row-major) order, little-endian unless
--endian big. The element type is the field's own (f32 or f64). Missing
values come back exactly as they were packed (NaN, infinities, fill value).

A tile whose payload fails its checksum or cannot be decoded stops unpack
with exit code 2 and no output; \`rankfield check\` lists every such tile.

Example:
  rankfield unpack https://example.org/sst.rfz -o box.npy --region 1000:1256,2000:2256`;

const END = /^[0-9]*$/;

/** `--region R0:R1,C0:C1`: two half-open ranges of non-negative integers, either end optional. */
export function regionOption(text: string): Region {
  const parts = text.split(',');
  const ranges = parts.map((p) => p.trim().split(':'));
  if (parts.length !== 2 || ranges.some((r) => r.length !== 2 || !r.every((e) => END.test(e.trim())))) {
    throw new InvalidArgumentError(`region must be R0:R1,C0:C1 (rows R0..R1-1, columns C0..C1-1; an empty end means the edge), got '${text}'`);
  }
  const [rows, cols] = ranges.map((r) => r.map((e) => (e.trim() === '' ? undefined : Number(e.trim()))) as [number | undefined, number | undefined]);
  for (const v of [...rows, ...cols]) {
    if (v !== undefined && !Number.isSafeInteger(v)) throw new InvalidArgumentError(`region ends must be integers below 2^53, got '${text}'`);
  }
  for (const [what, [a, b]] of [['rows', rows], ['columns', cols]] as const) {
    if (a !== undefined && b !== undefined && a >= b) throw new InvalidArgumentError(`region ${what} ${a}:${b} are empty (the start must be below the end), in '${text}'`);
  }
  return { rows, cols };
}

/** Register `unpack` on the program. */
export function registerUnpack(program: Command, ctx: Context): void {
  program
    .command('unpack')
    .summary('decode a field of an archive (or a window of it) to .npy or raw binary')
    .description('Decode one field of an archive (by default the first), or a window of it, to a .npy or raw file.')
    .argument('<IN>', 'archive to read: a file or an http(s) URL')
    .requiredOption('-o, --output <OUT>', 'file to write: OUT.npy, or raw binary (e.g. OUT.raw)')
    .option('--field <NAME>', 'field to decode (default: the first)', nameOption)
    .option('--region <R0:R1,C0:C1>', 'decode only rows R0..R1-1 and columns C0..C1-1 (an empty end means the edge)', regionOption)
    .option('--bound <MODE:VALUE>', 'a looser bound than the archive holds: read only as much of each tile as meets it (prints what the values satisfy)', boundOption)
    .option('--endian <ORDER>', 'raw output: byte order, little (default) or big', endianOption)
    .option('--force', 'overwrite OUT if it exists')
    .addHelpText('after', HELP)
    .action(async (input: string, flags: UnpackFlags) => {
      const start = performance.now();
      const npy = isNpyPath(flags.output);
      if (npy && flags.endian !== undefined) throw new UsageError(`--endian applies to raw output; '${flags.output}' is written as .npy (little-endian)`);
      if (!isUrl(input)) await statInput(input);
      const io = { force: flags.force === true, inputs: isUrl(input) ? [] : [input] };
      await checkOutput(flags.output, io);
      const archive = await openArchive(input);
      try {
        const { header: h } = archive.field(flags.field);
        const r = flags.region;
        const window = r && {
          rows: [r.rows[0] ?? 0, r.rows[1] ?? h.shape[0]] as [number, number],
          cols: [r.cols[0] ?? 0, r.cols[1] ?? h.shape[1]] as [number, number],
        };
        const field = await archive.read(h.name, { ...(window ?? {}), ...(flags.bound ? { bound: flags.bound } : {}) });
        const arr = { data: field.values, shape: field.shape, dtype: field.dtype };
        const endian = flags.endian ?? 'little';
        const bytes = npy ? formatNpy(arr) : formatRaw(arr, endian);
        await writeOutput(flags.output, bytes, io);
        const kind = npy ? '.npy' : `raw ${endian}-endian`;
        const [[r0, r1], [c0, c1]] = [field.window.rows, field.window.cols];
        const what = window ? `rows ${r0}..${r1 - 1}, columns ${c0}..${c1 - 1} (${field.shape.join('x')}) of field '${h.name}' (${h.shape.join('x')} ${h.dtype})` : `field '${h.name}' (${h.shape.join('x')} ${h.dtype})`;
        ctx.out(`unpacked ${what} from '${input}' -> '${flags.output}' (${kind}, ${bytes.length} bytes); ${seconds(performance.now() - start)}\n`);
        if (flags.bound) {
          const a = field.achieved;
          ctx.out(`requested ${formatBound(flags.bound)}: ${field.prefixTiles} of the tiles read as factors only; the values satisfy max error ${a.maxErr.toPrecision(4)}, RMSE ${a.rmse.toPrecision(4)} (recorded at encode time)\n`);
        }
      } finally {
        await archive.close();
      }
    });
}
