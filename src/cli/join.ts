/** `rankfield join`: the parts of a run (pack --plan --part) put together into one archive, without decoding a tile. */
import type { Command } from 'commander';
import { FileSource } from '../io/file-source.js';
import { joinParts, type JoinResult } from '../parts/join.js';
import { printable } from '../format/schema.js';
import type { ByteSource } from '../io/source.js';

import { checkOutput, openArchive, statInput, writeOutputWith } from './files.js';
import { fileError, UsageError } from './errors.js';
import type { Context } from './context.js';
import { Output, type OutputFlags } from './output.js';
import { num, seconds } from './format.js';

interface JoinFlags extends OutputFlags {
  output: string;
  force?: boolean;
}

const JOIN_HELP = `
The parts must be every part of one run (the same run name and plan), each
once, in any order; anything else is refused with one line naming the part.
Tile payloads are copied, each checked against its CRC-32, and the index is
built anew: no tile is decoded or encoded again, and the archive is the one
a single 'rankfield pack IN --plan PLAN' (or a pack with the plan's options)
writes, byte for byte. See 'rankfield plan --help' for the whole flow.

Example:
  rankfield join part-*.rfz -o run.rfz
  rankfield check run.rfz --against IN`;

/** Register `join` on the program. */
export function registerJoin(program: Command, ctx: Context): void {
  program
    .command('join')
    .summary('put the parts of a run (pack --plan --part) together into one archive')
    .description('Put the parts of a run, packed by pack --plan PLAN --part K/N, together into one archive, copying their tile payloads.')
    .argument('<PARTS...>', 'the part archives (every part of the run, any order)')
    .requiredOption('-o, --output <OUT>', 'archive to write')
    .option('--force', 'overwrite OUT if it exists')
    .addHelpText('after', JOIN_HELP)
    .action(async (inputs: string[], flags: JoinFlags) => {
      const start = performance.now();
      const out = new Output(ctx, flags);
      for (const p of inputs) await statInput(p);
      const io = { force: flags.force === true, inputs };
      await checkOutput(flags.output, io);
      if (new Set(inputs).size !== inputs.length) {
        const twice = inputs.find((p, i) => inputs.indexOf(p) !== i);
        throw new UsageError(`'${twice}' is named twice`);
      }
      let result: JoinResult | undefined;
      await writeOutputWith(flags.output, io, async (sink) => {
        const sources: ByteSource[] = [];
        try {
          for (const p of inputs) sources.push(await FileSource.open(p).catch((e: unknown) => Promise.reject(fileError(e, 'read', p))));
        } catch (e) {
          for (const s of sources) await s.close?.();
          throw e;
        }
        result = await joinParts(sources, sink);
      });
      const r = result as JoinResult;
      const archive = await openArchive(flags.output);
      const size = archive.size;
      const { header: h, summary } = archive.field();
      await archive.close();
      const elapsed = performance.now() - start;
      out.text(`joined ${r.parts} part${r.parts === 1 ? '' : 's'} of run '${printable(r.run)}' -> '${flags.output}': field '${printable(h.name)}' ${(h.nd_shape ?? h.shape).join('x')} ${h.dtype}, ${size} bytes; max error ${num(summary.max_err)}, RMSE ${num(summary.rmse)}; ${seconds(elapsed)}\n`);
      out.result({ command: 'join', inputs, output: flags.output, run: r.run, plan: r.plan, parts: r.parts, bytes: size, summary, seconds: elapsed / 1000 });
    });
}
