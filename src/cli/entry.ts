/**
 * Entry point of bin/rankfield: signal and broken-pipe handling around the
 * command line of main.ts. Long commands run in a worker thread (worker.ts)
 * so that this thread stays free to react to signals; this module therefore
 * imports only what that takes (temporary-file tracking and the error line),
 * and main.ts with the commands and the library only for a command that runs
 * here. A pack of a small field so loads the program once instead of twice.
 */
import { Worker } from 'node:worker_threads';
import { Exit, report, wantsDebug } from './errors.js';
import { removeTempFilesSync, trackTempDir, trackTempFile } from './temp-track.js';

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

/** Run main in this thread; a program that cannot be loaded is one error line, as in bin/rankfield. */
async function inThisThread(argv: string[], out: (s: string) => void): Promise<number> {
  let cli: typeof import('./main.js');
  try {
    cli = await import('./main.js');
  } catch (e) {
    process.stderr.write(`rankfield: error: cannot load the program: ${e instanceof Error ? e.message : String(e)}\n`);
    return Exit.Usage;
  }
  return cli.main(argv, { out });
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
  // Short commands run here; the command modules (and the library) are loaded only then: a long
  // command loads them once, in its worker, not in this thread too.
  process.exitCode = long ? await inWorker(argv, out, (w) => (worker = w)) : await inThisThread(argv, out);
  // The viewer's HTTP reads of a URL may leave idle keep-alive connections: do not wait for them to time out.
  if (command === 'view') process.exit();
}
