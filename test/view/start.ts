/**
 * Start `rankfield view ... --json` as a child process and wait for the
 * address it prints; the test ends it (SIGTERM) and awaits `done`.
 */
import type { ChildProcess } from 'node:child_process';
import { request } from 'node:http';
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

/**
 * One HTTP request on a connection of its own (`agent: false`: the request
 * says `Connection: close`), as a WHATWG Response. fetch() keeps connections
 * alive and reuses one the server may be closing at that moment: Node's
 * server drops an idle connection after 5 s (its keepAliveTimeout), fetch
 * stops reusing it a second before, but a test process starved of CPU on a
 * busy machine can send its next request after the server closed the
 * connection, and fetch then fails with "other side closed" (seen once under
 * load). A connection per request has no such window.
 */
export function fetchOnce(url: URL | string, init: { method?: string; headers?: Record<string, string> } = {}): Promise<Response> {
  return new Promise((resolve, reject) => {
    const req = request(url, { method: init.method ?? 'GET', headers: init.headers, agent: false }, (res) => {
      const chunks: Buffer[] = [];
      res.on('data', (c: Buffer) => chunks.push(c));
      res.on('error', reject);
      res.on('end', () => {
        const headers = new Headers();
        for (const [k, v] of Object.entries(res.headers)) for (const x of Array.isArray(v) ? v : v === undefined ? [] : [v]) headers.append(k, x);
        resolve(new Response(Buffer.concat(chunks), { status: res.statusCode, headers }));
      });
    });
    req.on('error', reject);
    req.end();
  });
}
