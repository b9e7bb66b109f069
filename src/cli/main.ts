/**
 * The `rankfield` command line: argument parsing with commander, one module
 * per command, and one error path. Every error is shown as one line
 * `rankfield: error: <message>` with exit code 2; `--debug` adds the stack.
 */
import { Command, CommanderError } from 'commander';
import { VERSION_STRING } from '../version.js';
import { Exit, report, wantsDebug } from './errors.js';
import { HTTP_DEFAULTS } from './http.js';
import { addOutputOptions } from './output.js';

import type { Context } from './context.js';

// cli/plan.ts takes the type from here.

/** Build the program with the commands of `registers` (see {@link registersFor}); errors are thrown, never exit the process. */
export function buildProgram(ctx: Context, registers: readonly Register[]): Command {
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
  for (const register of registers) register(program, ctx);
  addOutputOptions(program);
  return program;
}

type Register = (program: Command, ctx: Context) => void;

/**
 * Each command's module, in the order help lists them. A command's module
 * imports what it runs (the encoder, the NetCDF and HDF5 writers, the
 * picture code...), so only the module of the command being run is loaded:
 * `unpack` and `show` start without the encoder.
 */
const COMMANDS: Record<string, () => Promise<Register>> = {
  pack: async () => (await import('./pack.js')).registerPack,
  unpack: async () => (await import('./unpack.js')).registerUnpack,
  show: async () => (await import('./show.js')).registerShow,
  check: async () => (await import('./check.js')).registerCheck,
  demo: async () => (await import('./demo.js')).registerDemo,
  preview: async () => (await import('./preview.js')).registerPreview,
  trial: async () => (await import('./trial.js')).registerTrial,
  view: async () => (await import('./view.js')).registerView,
  plan: async () => (await import('./plan.js')).registerPlan,
  join: async () => (await import('./join.js')).registerJoin,
};

/**
 * The registrations `argv` needs: its command's alone when its first word
 * that is not an option names one, else every command's (help, the
 * version, a missing or misspelt command: commander lists or suggests them).
 */
async function registersFor(argv: readonly string[]): Promise<Register[]> {
  const word = argv.find((a) => !a.startsWith('-'));
  const load = word !== undefined && Object.hasOwn(COMMANDS, word) ? [COMMANDS[word]] : Object.values(COMMANDS);
  return Promise.all(load.map((f) => f()));
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
  let program: Command | null = null;
  try {
    program = buildProgram(ctx, await registersFor(argv));
    await program.parseAsync(argv, { from: 'user' });
    return ctx.exitCode;
  } catch (e) {
    if (e instanceof CommanderError) {
      if (e.exitCode === 0) return Exit.Ok; // --help, --version, `help`
      if (e.code === 'commander.help') {
        const names = (program?.commands ?? []).map((c) => c.name()).filter((n) => n !== 'help');
        report(new CommanderError(2, e.code, `missing command (one of ${names.join(', ')}; see 'rankfield --help')`), false, ctx.err);
        return Exit.Usage;
      }
    }
    report(e, debug, ctx.err);
    return Exit.Usage;
  }
}
