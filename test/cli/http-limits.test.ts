/**
 * The command line's HTTP time limits, set by environment variables
 * (RANKFIELD_HTTP_DEADLINE for all reads of one command,
 * RANKFIELD_HTTP_REQUEST_DEADLINE per request, RANKFIELD_HTTP_TIMEOUT for
 * silence), against a server on 127.0.0.1 that drips bytes: the command
 * ends with one line and exit 2 instead of running as long as the server
 * keeps sending.
 */
import { afterAll, beforeAll, beforeEach, describe, expect, it } from 'vitest';
import { pack } from '../../src/index.js';
import { volcano } from '../archive/datasets.js';
import { drip, startRangeServer, type RangeServer } from '../io/range-server.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, rfAsync, tempDir } from './helpers.js';

const { dir, remove } = tempDir('rankfield-http-limits-');
let server: RangeServer;

beforeAll(async () => {
  ensureBuilt();
  server = await startRangeServer();
  const g = volcano();
  server.put('/v.rfz', pack(g.values, g.shape, { bound: 'abs:1' }));
});
beforeEach(() => {
  server.misbehave = null;
});
afterAll(async () => {
  await server.close();
  remove();
});

const run = (args: string[], env: NodeJS.ProcessEnv) => rfAsync(args, dir, env);

describe('HTTP time limits of a command', () => {
  it('RANKFIELD_HTTP_DEADLINE ends show of a server that drips bytes: one line, exit 2', async () => {
    // One byte every 50 ms: reading the archive's tail, header and index would take minutes.
    server.misbehave = drip(50);
    const r = await run(['show', `${server.url}/v.rfz`], { RANKFIELD_HTTP_DEADLINE: '0.5' });
    expectCliError(r, /cannot read bytes \d+\.\.\d+ of 'http:\/\/127\.0\.0\.1:\d+\/v\.rfz': the deadline of 500 ms for all reads passed/);
  }, CLI_TIMEOUT);

  it('RANKFIELD_HTTP_REQUEST_DEADLINE ends each request, which is retried, then gives up', async () => {
    server.misbehave = drip(50);
    const r = await run(['show', `${server.url}/v.rfz`], { RANKFIELD_HTTP_REQUEST_DEADLINE: '0.2' });
    expectCliError(r, /the answer did not complete within 200 ms \(gave up after 4 attempts\)/);
  }, CLI_TIMEOUT);

  it('the same server well-behaved: show succeeds within the limits', async () => {
    const r = await run(['show', `${server.url}/v.rfz`], { RANKFIELD_HTTP_DEADLINE: '60', RANKFIELD_HTTP_REQUEST_DEADLINE: '30' });
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/shape +61 x 87 f64/);
  }, CLI_TIMEOUT);

  it('refuses a limit that is not a number of seconds >= 0, naming infinities', async () => {
    expectCliError(await run(['show', `${server.url}/v.rfz`], { RANKFIELD_HTTP_DEADLINE: 'inf' }), /RANKFIELD_HTTP_DEADLINE must be a number of seconds >= 0 \(0: no limit\), got 'inf' \(infinite\)/);
    expectCliError(await run(['show', `${server.url}/v.rfz`], { RANKFIELD_HTTP_TIMEOUT: '-3' }), /RANKFIELD_HTTP_TIMEOUT must be a number of seconds >= 0 \(0: no limit\), got '-3' \(negative\)/);
  }, CLI_TIMEOUT);
});
