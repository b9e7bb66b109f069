/**
 * Start `rankfield view ... --json` as a child process and wait for the
 * address it prints; the test ends it (SIGTERM) and awaits `done`.
 */
import type { ChildProcess } from 'node:child_process';
import { rfStart, type ChildResult } from '../cli/helpers.js';

export interface RunningView {
  url: string;
  child: ChildProcess;
  done: Promise<ChildResult>;
  /** Standard error so far (the --log lines among it). */
  stderr(): string;
}

/** Run `view ...args --json` in `cwd`; resolves with its address once printed, rejects if it ends first. */
export async function startView(args: string[], cwd: string, env: NodeJS.ProcessEnv = {}): Promise<RunningView> {
  const { child, done } = rfStart(['view', ...args, '--json'], cwd, env);
  let err = '';
  child.stderr!.on('data', (d: Buffer) => (err += d.toString()));
  const url = await new Promise<string>((resolve, reject) => {
    let text = '';
    child.stdout!.on('data', (d: Buffer) => {
      text += d.toString();
      try {
        resolve((JSON.parse(text) as { url: string }).url);
      } catch {
        // not all of it yet
      }
    });
    child.on('close', (code) => reject(new Error(`view ended with exit code ${code} before printing its address: ${err}`)));
  });
  return { url, child, done, stderr: () => err };
}
