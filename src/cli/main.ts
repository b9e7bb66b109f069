/**
 * The `rankfield` command line: argument parsing with commander, one module
 * per command, and one error path. Every error is shown as one line
 * `rankfield: error: <message>` with exit code 2; `--debug` adds the stack.
 */
import { Command, CommanderError } from 'commander';
import { VERSION_STRING } from '../index.js';
import { registerCheck } from './check.js';
import { registerDemo } from './demo.js';
import { Exit, report, wantsDebug } from './errors.js';
import { HTTP_DEFAULTS } from './http.js';
import { addOutputOptions } from './output.js';
import { registerPack } from './pack.js';
import { registerPlan } from './plan.js';
import { registerJoin } from './join.js';
import { registerPreview } from './preview.js';
import { registerTrial } from './trial.js';
import { registerShow } from './show.js';
import { registerUnpack } from './unpack.js';
import { registerView } from './view.js';

import type { Context } from './context.js';

// cli/plan.ts takes the type from here.

/** Build the program with all commands; errors are thrown, never exit the process. */
export function buildProgram(ctx: Context): Command {
  const program = new Command('rankfield');
  program
    .description('Lossy archiving of 2-D floating-point fields under a stated error bound, by tiled truncated SVD.')
    .version(VERSION_STRING, '-V, --version', 'print the version')
    .option('--debug', 'print stack traces of errors')
    .helpOption('-h, --help', 'show help')
    .exitOverride()
    .configureOutput({
      writeOut: (s) => ctx.out(s),
      // Errors are shown by main() as one line; commander's own error and help-on-error output is dropped.
      writeErr: () => undefined,
      outputError: () => undefined,
    })
    .addHelpText(
      'after',
      `
Exit codes: 0 success; 1 \`check\` or \`demo\` found a failure; 2 unusable input
(bad arguments, unreadable or malformed files); 128 + N ended by signal N.

Environment (seconds, 0: no limit), for archives read from http(s) URLs:
  RANKFIELD_HTTP_DEADLINE          all HTTP reads of one command (default ${HTTP_DEFAULTS.deadline})
  RANKFIELD_HTTP_REQUEST_DEADLINE  one request, to its last byte (default ${HTTP_DEFAULTS.requestDeadline})
  RANKFIELD_HTTP_TIMEOUT           silence within a request (default ${HTTP_DEFAULTS.timeout})

Packing is lossy: it discards information. Keep the originals until
\`rankfield check ARCHIVE --against ORIGINAL\` passes, and follow your
institution's data-retention rules.`,
    );
  registerPack(program, ctx);
  registerUnpack(program, ctx);
  registerShow(program, ctx);
  registerCheck(program, ctx);
  registerDemo(program, ctx);
  registerPreview(program, ctx);
  registerTrial(program, ctx);
  registerView(program, ctx);
  registerPlan(program, ctx);
  registerJoin(program, ctx);
  addOutputOptions(program);
  return program;
}

/** Run the command line on `argv` (without the node and script paths); resolves to the exit code. */
export async function main(argv: string[], io?: Partial<Pick<Context, 'out' | 'err' | 'errTTY' | 'errColumns'>>): Promise<number> {
  const ctx: Context = {
    out: io?.out ?? ((s) => void process.stdout.write(s)),
    err: io?.err ?? ((s) => void process.stderr.write(s)),
    exitCode: Exit.Ok,
    errTTY: io?.errTTY ?? (io?.err === undefined && process.stderr.isTTY === true),
    errColumns: io?.errColumns ?? process.stderr.columns,
  };
  const debug = wantsDebug(argv);
  const program = buildProgram(ctx);
  try {
    await program.parseAsync(argv, { from: 'user' });
    return ctx.exitCode;
  } catch (e) {
    if (e instanceof CommanderError) {
      if (e.exitCode === 0) return Exit.Ok; // --help, --version, `help`
      if (e.code === 'commander.help') {
        const names = program.commands.map((c) => c.name()).filter((n) => n !== 'help');
        report(new CommanderError(2, e.code, `missing command (one of ${names.join(', ')}; see 'rankfield --help')`), false, ctx.err);
        return Exit.Usage;
      }
    }
    report(e, debug, ctx.err);
    return Exit.Usage;
  }
}
