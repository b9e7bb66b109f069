/**
 * Time limits of the command line's HTTP reads, from the environment:
 *
 * - RANKFIELD_HTTP_DEADLINE: seconds all HTTP reads of one command may take
 *   together, retries included (default 3600; 0: none).
 * - RANKFIELD_HTTP_REQUEST_DEADLINE: seconds one request may take from
 *   sending it to the last byte of its answer (default 300; 0: none).
 * - RANKFIELD_HTTP_TIMEOUT: seconds of silence (no answer, or no more of
 *   its body) after which a request counts as failed (default 30).
 *
 * Fractions of a second are allowed. A request past its deadline or idle
 * time is retried (a few times, as for a dropped connection); the command
 * deadline is final.
 */
import type { HttpSourceOptions } from '../io/http-source.js';
import { UsageError } from './errors.js';

/** Defaults of the command line, in seconds. */
export const HTTP_DEFAULTS = { deadline: 3600, requestDeadline: 300, timeout: 30 } as const;

const VARS = {
  deadline: 'RANKFIELD_HTTP_DEADLINE',
  requestDeadline: 'RANKFIELD_HTTP_REQUEST_DEADLINE',
  timeout: 'RANKFIELD_HTTP_TIMEOUT',
} as const;

const DECIMAL = /^\+?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?$/;

/** Seconds from an environment variable: a finite decimal number >= 0. */
function seconds(name: string, text: string | undefined, dflt: number): number {
  if (text === undefined || text.trim() === '') return dflt;
  const t = text.trim();
  const v = Number(t);
  if (!DECIMAL.test(t) || !Number.isFinite(v)) {
    const what = /^[+-]?inf(inity)?$/i.test(t) ? 'infinite' : /^[+-]?nan$/i.test(t) ? 'not a number' : t.startsWith('-') ? 'negative' : 'not a decimal number';
    throw new UsageError(`${name} must be a number of seconds >= 0 (0: no limit), got '${text}' (${what})`);
  }
  return v;
}

/** The HttpSource time limits (milliseconds) the environment asks for. */
export function httpOptions(env: NodeJS.ProcessEnv = process.env): HttpSourceOptions {
  const deadline = seconds(VARS.deadline, env[VARS.deadline], HTTP_DEFAULTS.deadline);
  const requestDeadline = seconds(VARS.requestDeadline, env[VARS.requestDeadline], HTTP_DEFAULTS.requestDeadline);
  const timeout = seconds(VARS.timeout, env[VARS.timeout], HTTP_DEFAULTS.timeout);
  return { deadline: deadline * 1000, requestDeadline: requestDeadline * 1000, timeout: timeout * 1000 };
}
