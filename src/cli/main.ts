/**
 * The `rankfield` command line: argument parsing with commander, one module
 * per command, and one error path. Every error is shown as one line
 * `rankfield: error: <message>` with exit code 2; `--debug` adds the stack.
 */
import { Command, CommanderError } from 'commander';
import { VERSION_STRING } from '../index.js';
import { registerCheck } from './check.js';
import { registerDemo } from './demo.js';
import { Exit, report } from './errors.js';
import { removeTempFilesSync, trackTempDir, trackTempFile } from './files.js';
import { HTTP_DEFAULTS } from './http.js';
import { Worker } from 'node:worker_threads';
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

/** True when `--debug` appears among the arguments (before a `--`). */
function wantsDebug(argv: readonly string[]): boolean {
  const end = argv.indexOf('--');
  return (end < 0 ? argv : argv.slice(0, end)).includes('--debug');
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

/** Commands that run long enough to be interrupted mid-way: they run in a worker thread (see worker.ts). */
const LONG_COMMANDS = ['pack', 'demo', 'trial', 'plan', 'join'];

/** The command word of argv: its first argument that is not an option. */
function commandOf(argv: readonly string[]): string | undefined {
  return argv.find((a) => !a.startsWith('-'));
}

/** Run main in a worker thread, relaying its output, temporary files and exit code. */
function inWorker(argv: string[], out: (s: string) => void, setWorker: (w: Worker) => void): Promise<number> {
  return new Promise((resolveCode) => {
    const tty = { errTTY: process.stderr.isTTY === true, errColumns: process.stderr.columns };
    const w = new Worker(new URL('./worker.js', import.meta.url), { workerData: { argv, rankfieldWorker: true, ...tty } });
    setWorker(w);
    let done = false;
    const finish = (code: number) => {
      if (!done) {
        done = true;
        resolveCode(code);
      }
    };
    w.on('message', (m: { out?: string; err?: string; tmp?: string; dir?: string; active?: boolean; exit?: number }) => {
      if (m.out !== undefined) out(m.out);
      if (m.err !== undefined) process.stderr.write(m.err);
      if (m.tmp !== undefined) trackTempFile(m.tmp, m.active === true);
      if (m.dir !== undefined) trackTempDir(m.dir, m.active === true);
      if (m.exit !== undefined) finish(m.exit);
    });
    // A worker that dies (out of memory, an uncaught error) cannot remove its temporary files: do it here.
    w.on('error', (e) => {
      removeTempFilesSync();
      report(e, wantsDebug(argv), (s) => void process.stderr.write(s));
      finish(Exit.Usage);
    });
    w.on('exit', (code) => {
      // Messages are delivered before 'exit': whatever is still tracked was abandoned.
      removeTempFilesSync();
      finish(code === 0 ? Exit.Ok : Exit.Usage);
    });
  });
}

/** Entry point of bin/rankfield: runs main on process.argv, with signal and broken-pipe handling. */
export async function run(): Promise<void> {
  let worker: Worker | undefined;
  const onSignal = (signal: NodeJS.Signals, code: number) => () => {
    removeTempFilesSync();
    void worker?.terminate();
    process.stderr.write(`rankfield: error: interrupted by ${signal}; unfinished output files were removed\n`);
    process.exit(code);
  };
  // Exit codes 128 + the signal number (common practice, no source). Inputs are opened without
  // blocking (src/io/regular-file.ts), so no thread can be stuck in open() and hold up the exit.
  const command = commandOf(process.argv.slice(2));
  // `view` runs until a signal, which ends it normally: it handles them itself (src/cli/view.ts).
  if (command !== 'view') {
    process.once('SIGINT', onSignal('SIGINT', 130));
    process.once('SIGTERM', onSignal('SIGTERM', 143));
    process.once('SIGHUP', onSignal('SIGHUP', 129));
  }
  // A reader that closes the pipe early (`rankfield show x | head -1`) is not an error: further
  // output is dropped, and the command still finishes (and cleans up) normally.
  let stdoutOpen = true;
  process.stdout.on('error', (e: NodeJS.ErrnoException) => {
    if (e.code !== 'EPIPE') throw e;
    stdoutOpen = false;
  });
  const out = (s: string) => void (stdoutOpen && process.stdout.write(s));
  const argv = process.argv.slice(2);
  const long = LONG_COMMANDS.includes(command ?? '');
  process.exitCode = long ? await inWorker(argv, out, (w) => (worker = w)) : await main(argv, { out });
  // The viewer's HTTP reads of a URL may leave idle keep-alive connections: do not wait for them to time out.
  if (command === 'view') process.exit();
}
