/** What commands write to and report back. */
export interface Context {
  /** Write to standard output. */
  out(text: string): void;
  /** Write to standard error. */
  err(text: string): void;
  /** Exit code a command sets when it completes but reports a failure (check). */
  exitCode: number;
  /** Standard error is a terminal: progress bars are drawn (output.ts). */
  errTTY?: boolean;
  /** Width of that terminal in columns, when known. */
  errColumns?: number;
}
