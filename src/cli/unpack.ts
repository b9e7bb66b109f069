/** `rankfield unpack`: decode one field of an archive to .npy or raw binary. */
import type { Command } from 'commander';
import { formatNpy } from '../io/npy.js';
import { formatRaw } from '../io/raw.js';
import { UsageError } from './errors.js';
import { checkOutput, openArchive, statInput, writeOutput } from './files.js';
import { seconds } from './format.js';
import { isNpyPath } from './input.js';
import type { Context } from './main.js';
import { endianOption, nameOption } from './options.js';

interface UnpackFlags {
  output: string;
  field?: string;
  endian?: 'little' | 'big';
  force?: boolean;
}

const HELP = `
OUT ending in .npy gets a .npy file (little-endian, C order); any other name
gets headerless raw binary in C (row-major) order, little-endian unless
--endian big. The element type is the field's own (f32 or f64). Missing
values come back exactly as they were packed (NaN, infinities, fill value).

A tile whose payload fails its checksum or cannot be decoded stops unpack
with exit code 2 and no output; \`rankfield check\` lists every such tile.`;

/** Register `unpack` on the program. */
export function registerUnpack(program: Command, ctx: Context): void {
  program
    .command('unpack')
    .summary('decode a field of an archive to .npy or raw binary')
    .description('Decode one field of an archive (by default the first) to a .npy or raw file.')
    .argument('<IN>', 'archive to read')
    .requiredOption('-o, --output <OUT>', 'file to write: OUT.npy, or raw binary (e.g. OUT.raw)')
    .option('--field <NAME>', 'field to decode (default: the first)', nameOption)
    .option('--endian <ORDER>', 'raw output: byte order, little (default) or big', endianOption)
    .option('--force', 'overwrite OUT if it exists')
    .addHelpText('after', HELP)
    .action(async (input: string, flags: UnpackFlags) => {
      const start = performance.now();
      const npy = isNpyPath(flags.output);
      if (npy && flags.endian !== undefined) throw new UsageError(`--endian applies to raw output; '${flags.output}' is written as .npy (little-endian)`);
      await statInput(input);
      const io = { force: flags.force === true, inputs: [input] };
      await checkOutput(flags.output, io);
      const archive = await openArchive(input);
      try {
        const { header: h } = archive.field(flags.field);
        const field = await archive.read(h.name);
        const arr = { data: field.values, shape: field.shape, dtype: field.dtype };
        const endian = flags.endian ?? 'little';
        const bytes = npy ? formatNpy(arr) : formatRaw(arr, endian);
        await writeOutput(flags.output, bytes, io);
        const kind = npy ? '.npy' : `raw ${endian}-endian`;
        ctx.out(
          `unpacked field '${h.name}' (${h.shape.join('x')} ${h.dtype}) from '${input}' -> '${flags.output}' ` +
            `(${kind}, ${bytes.length} bytes); ${seconds(performance.now() - start)}\n`,
        );
      } finally {
        await archive.close();
      }
    });
}
