/**
 * What every command prints, and where: human text on stdout (silenced by
 * `--quiet`), exactly one JSON object on stdout with `--json`, notes on
 * stderr (silenced by `--quiet`), and a progress bar on stderr only when
 * stderr is a terminal. Errors are not printed here: they travel as
 * exceptions to main(), which prints one line whatever the flags.
 */
import { SingleBar } from 'cli-progress';
import type { Command } from 'commander';
import type { Context } from './context.js';

/** The output flags every command takes. */
export interface OutputFlags {
  json?: boolean;
  quiet?: boolean;
}

/** Add `--json` and `--quiet` to every command of the program that lacks them. */
export function addOutputOptions(program: Command): void {
  for (const cmd of program.commands) {
    if (!cmd.options.some((o) => o.long === '--json')) cmd.option('--json', 'print exactly one JSON object on stdout, nothing else (keys in README, "Machine-readable output")');
    if (!cmd.options.some((o) => o.long === '--quiet')) cmd.option('-q, --quiet', 'print nothing but errors (and the JSON object with --json)');
  }
}

/** A command's printer, set by its output flags. */
export class Output {
  readonly json: boolean;
  readonly quiet: boolean;

  constructor(
    private readonly ctx: Context,
    flags: OutputFlags,
  ) {
    this.json = flags.json === true;
    this.quiet = flags.quiet === true;
  }

  /** Human text for stdout: dropped with --json or --quiet. */
  text(s: string): void {
    if (!this.json && !this.quiet) this.ctx.out(s);
  }

  /** A note for stderr (`rankfield: note: ...`): dropped with --quiet. */
  note(s: string): void {
    if (!this.quiet) this.ctx.err(`rankfield: note: ${s}\n`);
  }

  /** The command's one JSON object: printed with --json only. */
  result(obj: object): void {
    if (this.json) this.ctx.out(`${JSON.stringify(obj, null, 2)}\n`);
  }

  /**
   * A progress bar over `total` tiles on stderr, drawn only when stderr is a
   * terminal and --quiet is not given; otherwise a bar that draws nothing.
   * `bytes` is the raw value bytes the tiles stand for, for the MB/s figure.
   */
  progress(label: string, total: number, bytes: number): Progress {
    return new Progress(this.ctx.errTTY === true && !this.quiet ? this.ctx : null, label, total, bytes);
  }

  /**
   * A bar started by the first report of a library call that states its
   * total only as it goes (pack's `onProgress`, check's): pass `onProgress`
   * to the call, and call `stop` when it ends, also on errors. Until the
   * first report, a line names the phase (`before`: what the call does
   * before its first tile, such as reading the input and planning the tiles)
   * and the seconds spent in it, so a terminal is never silent.
   */
  tileProgress(label: string, bytes: number, before = 'reading the input and planning the tiles'): { onProgress: (done: number, total: number) => void; stop: () => void } {
    let bar: Progress | null = null;
    const phase = this.phase(`${label}: ${before}`);
    return {
      onProgress: (done, total) => {
        if (bar === null) {
          phase.stop();
          bar = this.progress(label, total, bytes);
        }
        bar.update(done);
      },
      stop: () => {
        phase.stop();
        bar?.stop();
      },
    };
  }

  /**
   * A line on stderr naming what is being done and for how many seconds,
   * redrawn each second, drawn (like the bars) only when stderr is a
   * terminal and --quiet is not given; `stop` clears it.
   */
  phase(text: string): { stop: () => void } {
    if (this.ctx.errTTY !== true || this.quiet) return { stop: () => undefined };
    const ctx = this.ctx;
    const start = performance.now();
    // A terminal that reports no width (0 columns, as some pseudo-terminals do) is taken as 80 wide.
    const width = Math.max(20, (ctx.errColumns || 80) - 1);
    const draw = () => {
      const line = `${text}... ${Math.floor((performance.now() - start) / 1000)} s`;
      ctx.err(`\r${line.length > width ? `${line.slice(0, width - 3)}...` : line}\x1b[K`);
    };
    draw();
    const timer = setInterval(draw, 1000);
    timer.unref?.();
    let live = true;
    return {
      stop: () => {
        if (!live) return;
        live = false;
        clearInterval(timer);
        // Carriage return and erase to the end of the line (ECMA-48 EL).
        ctx.err('\r\x1b[K');
      },
    };
  }
}

/**
 * A progress bar (cli-progress) over tiles: tiles done, MB/s of raw
 * values, time left. Writes go through the context's stderr, so a bar of a
 * command running in a worker thread is drawn by the main thread.
 */
export class Progress {
  private readonly bar: SingleBar | null;
  private readonly start = performance.now();
  private done = 0;

  constructor(
    ctx: Context | null,
    label: string,
    private readonly total: number,
    private readonly bytes: number,
  ) {
    if (ctx === null || total <= 0) {
      this.bar = null;
      return;
    }
    // The terminal side of cli-progress needs only write, isTTY and columns (cursor moves are written as escape codes).
    const stream = { isTTY: true, columns: ctx.errColumns ?? 80, write: (s: string) => (ctx.err(s), true) } as unknown as NodeJS.WritableStream;
    this.bar = new SingleBar({
      stream,
      format: `${label} [{bar}] {value}/{total} tiles | {rate} MB/s | {eta_formatted} left`,
      barsize: 24,
      hideCursor: true,
      clearOnComplete: true,
      etaBuffer: 50,
      fps: 8,
    });
    this.bar.start(total, 0, { rate: '-' });
  }

  /** Set the tiles done so far. */
  update(done: number): void {
    this.done = done;
    if (this.bar === null) return;
    const s = (performance.now() - this.start) / 1000;
    const rate = s > 0 ? ((this.bytes * done) / this.total / 1e6 / s).toFixed(1) : '-';
    this.bar.update(done, { rate });
  }

  /** Add `n` tiles to those done. */
  add(n: number): void {
    this.update(this.done + n);
  }

  /** Remove the bar (always call, also on errors: it holds a timer). */
  stop(): void {
    this.bar?.stop();
  }
}
