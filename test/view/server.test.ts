/**
 * `rankfield view` without a browser: its arguments and errors, the HTTP
 * answers of its server (byte ranges as RFC 9110 section 14 states them;
 * 416, 405, 403), reading an archive through it with the library's own
 * HttpSource, proxying an archive at a URL, coordinate variables of a
 * NetCDF source (read back with netcdfjs 4.0.0, an independent reader of
 * the classic format), and ending on SIGINT.
 *
 * Data: vega-datasets data/volcano.json (61 x 87, heights in metres), and
 * test/fixtures/netcdf/corvane-run-classic.nc (see its README).
 */
import { once } from 'node:events';
import { connect, createServer } from 'node:net';
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { NetCDFReader } from 'netcdfjs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ArchiveBuilder, HttpSource, MemorySink, open, pack } from '../../src/index.js';
import { parseByteranges } from '../../src/io/http-source.js';
import { parseRangeHeader } from '../../src/view/server.js';
import { CLI_TIMEOUT, ensureBuilt, ensureBundled, expectCliError, rfAsync, rfIn, ROOT, tempDir, volcano } from '../cli/helpers.js';
import { startRangeServer, type RangeServer } from '../io/range-server.js';
import { fetchOnce, startView, type RunningView } from './start.js';

const FIXTURE = join(ROOT, 'test', 'fixtures', 'netcdf', 'corvane-run-classic.nc');

describe('parseRangeHeader (RFC 9110 section 14.1.2)', () => {
  it('reads first-last, open-ended and suffix ranges and drops those beyond the end', () => {
    // Examples of RFC 9110 section 14.1.2 against a 10000-byte representation.
    expect(parseRangeHeader('bytes=0-499', 10000)).toEqual([[0, 499]]);
    expect(parseRangeHeader('bytes=500-999', 10000)).toEqual([[500, 999]]);
    expect(parseRangeHeader('bytes=-500', 10000)).toEqual([[9500, 9999]]);
    expect(parseRangeHeader('bytes=9500-', 10000)).toEqual([[9500, 9999]]);
    expect(parseRangeHeader('bytes=0-0,-1', 10000)).toEqual([
      [0, 0],
      [9999, 9999],
    ]);
    expect(parseRangeHeader('bytes= 500-600, 601-999', 10000)).toEqual([
      [500, 600],
      [601, 999],
    ]);
    // A last position past the end is cut to the end; a first one past it is unsatisfiable (section 14.1.1).
    expect(parseRangeHeader('bytes=9000-20000', 10000)).toEqual([[9000, 9999]]);
    expect(parseRangeHeader('bytes=10000-10005', 10000)).toBe('unsatisfiable');
    // Not a valid range set: ignored, so the whole representation is sent (section 14.2).
    expect(parseRangeHeader('bytes=5-1', 10000)).toBeNull();
    expect(parseRangeHeader('items=0-5', 10000)).toBeNull();
    expect(parseRangeHeader('bytes=x-5', 10000)).toBeNull();
    expect(parseRangeHeader(undefined, 10000)).toBeNull();
  });
});

describe('rankfield view (command and server)', () => {
  let tmp: ReturnType<typeof tempDir>;
  let file: string;
  let bytes: Uint8Array;
  const running: RunningView[] = [];

  beforeAll(() => {
    ensureBuilt();
    ensureBundled();
    tmp = tempDir('rankfield-view-');
    const g = volcano();
    bytes = pack(Float32Array.from(g.values), g.shape, { bound: 'abs:0.5', tile: [16, 16], name: 'height', attrs: { units: 'm' } });
    file = join(tmp.dir, 'volcano.rfz');
    writeFileSync(file, bytes);
  });

  afterAll(() => {
    for (const v of running) if (v.child.exitCode === null) v.child.kill('SIGKILL');
    tmp?.remove();
  });

  async function view(args: string[]): Promise<RunningView> {
    const v = await startView(args, tmp.dir);
    running.push(v);
    return v;
  }

  it('refuses bad arguments with one line and exit code 2', async () => {
    expectCliError(await rfIn(['view', join(tmp.dir, 'nothing.rfz')], tmp.dir), /cannot read '.*nothing\.rfz': no such file or directory/);
    expectCliError(await rfIn(['view', file, '--port', 'eighty'], tmp.dir), /port must be an integer from 0 to 65535/);
    expectCliError(await rfIn(['view', file, '--port', '70000'], tmp.dir), /port must be an integer from 0 to 65535/);
    const notArchive = join(tmp.dir, 'text.rfz');
    writeFileSync(notArchive, 'not an archive at all, just some text\n'.repeat(4));
    expectCliError(await rfIn(['view', notArchive], tmp.dir), /text\.rfz/);
    expectCliError(await rfIn(['view'], tmp.dir), /missing required argument/);
    const empty = new MemorySink();
    new ArchiveBuilder(empty).finish();
    writeFileSync(join(tmp.dir, 'empty.rfz'), empty.bytes());
    expectCliError(await rfIn(['view', 'empty.rfz'], tmp.dir), /'empty\.rfz' holds no fields to view/);
    // A port in use.
    const busy = createServer();
    await new Promise<void>((resolve) => busy.listen(0, '127.0.0.1', () => resolve()));
    const port = (busy.address() as { port: number }).port;
    try {
      const r = await rfAsync(['view', file, '--port', String(port)], tmp.dir);
      expectCliError(r, new RegExp(`port ${port} on 127\\.0\\.0\\.1 is in use`));
    } finally {
      busy.close();
    }
  }, CLI_TIMEOUT);

  it('serves the page, its modules and the archive with byte ranges', async () => {
    const v = await view([file]);
    const get = (path: string, headers: Record<string, string> = {}) => fetchOnce(new URL(path, v.url), { headers });
    const page = await get('/');
    expect(page.status).toBe(200);
    expect(await page.text()).toContain('rankfield-view.mjs');
    for (const m of ['/rankfield-view.mjs', '/rankfield-decode.mjs']) {
      const r = await get(m);
      expect(r.status).toBe(200);
      expect(r.headers.get('content-type')).toMatch(/^text\/javascript/);
      expect(new Uint8Array(await r.arrayBuffer())).toEqual(new Uint8Array(readFileSync(join(ROOT, 'dist', m.slice(1)))));
    }
    expect(await (await get('/info.json')).json()).toEqual({ label: 'volcano.rfz', coords: {} });
    expect((await get('/elsewhere')).status).toBe(404);
    // One range: 206 with Content-Range (RFC 9110 section 14.4).
    const one = await get('/archive', { Range: 'bytes=10-29' });
    expect(one.status).toBe(206);
    expect(one.headers.get('content-range')).toBe(`bytes 10-29/${bytes.length}`);
    expect(new Uint8Array(await one.arrayBuffer())).toEqual(bytes.subarray(10, 30));
    // Several: multipart/byteranges (section 14.6), parts in the order asked.
    const many = await get('/archive', { Range: 'bytes=100-199,-16' });
    expect(many.status).toBe(206);
    const boundary = /boundary=(\S+)/.exec(many.headers.get('content-type') ?? '')?.[1];
    expect(boundary).toBeDefined();
    const parts = parseByteranges(new Uint8Array(await many.arrayBuffer()), boundary!, 'test');
    expect(parts.map((p) => [p.start, p.total, Array.from(p.bytes)])).toEqual([
      [100, bytes.length, Array.from(bytes.subarray(100, 200))],
      [bytes.length - 16, bytes.length, Array.from(bytes.subarray(bytes.length - 16))],
    ]);
    // None: the whole file; beyond the end: 416 with the size (section 15.5.17).
    expect(new Uint8Array(await (await get('/archive')).arrayBuffer())).toEqual(bytes);
    const beyond = await get('/archive', { Range: `bytes=${bytes.length}-` });
    expect(beyond.status).toBe(416);
    expect(beyond.headers.get('content-range')).toBe(`bytes */${bytes.length}`);
    expect((await fetchOnce(new URL('/archive', v.url), { method: 'POST' })).status).toBe(405);
    // The library reads the field through it, bit for bit as from the file.
    const remote = await open(new HttpSource(new URL('/archive', v.url).href));
    expect(Array.from((await remote.read('height')).values)).toEqual(Array.from((await (await open(bytes)).read('height')).values));
    v.child.kill('SIGINT');
    const end = await v.done;
    expect(end.code).toBe(0);
    expect(end.stdout).toBe(`${JSON.stringify({ command: 'view', input: file, url: v.url, port: Number(new URL(v.url).port), fields: ['height'] }, null, 2)}\n`);
    expect(end.stderr).toBe('rankfield: note: stopped the viewer on SIGINT\n');
  }, CLI_TIMEOUT);

  it('answers only requests addressed to itself (no DNS rebinding)', async () => {
    const v = await view([file]);
    const port = new URL(v.url).port;
    const status = await new Promise<string>((resolve, reject) => {
      const s = connect(Number(port), '127.0.0.1', () => s.write(`GET /archive HTTP/1.1\r\nHost: attacker.example:${port}\r\nConnection: close\r\n\r\n`));
      let text = '';
      s.on('data', (d: Buffer) => (text += d.toString()));
      s.on('end', () => resolve(text.split('\r\n')[0]));
      s.on('error', reject);
    });
    expect(status).toBe('HTTP/1.1 403 Forbidden');
    v.child.kill('SIGTERM');
    expect((await v.done).code).toBe(0);
  }, CLI_TIMEOUT);

  it('proxies the byte ranges of an archive at a URL, one request upstream for each', async () => {
    const upstream: RangeServer = await startRangeServer();
    try {
      upstream.put('/volcano.rfz', bytes);
      const v = await view([`${upstream.url}/volcano.rfz`, '--log']);
      upstream.reset();
      const src = new HttpSource(new URL('/archive', v.url).href);
      const remote = await open(src, { coalesce: { maxGap: 0 } });
      const got = await remote.read('height', { rows: [20, 40], cols: [30, 60] });
      const want = await (await open(bytes)).read('height', { rows: [20, 40], cols: [30, 60] });
      expect(Array.from(got.values)).toEqual(Array.from(want.values));
      // What the page asked of the viewer is what the viewer asked upstream, range for range
      // (once the viewer has logged every request: its stderr arrives on its own time).
      const logged = () => v.stderr().split('\n').filter((l) => l.startsWith('GET /archive')).length;
      while (logged() < src.requests) await once(v.child.stderr!, 'data');
      const asked = v
        .stderr()
        .split('\n')
        .filter((l) => l.startsWith('GET /archive bytes='))
        .flatMap((l) => l.split(' ')[2].slice(6).split(','));
      const forwarded = upstream.log.flatMap((a) => (a.ranges ?? (a.range ? [a.range] : [])).map(([x, y]) => `${x}-${y}`));
      expect(forwarded.sort()).toEqual(asked.sort());
      v.child.kill('SIGTERM');
      expect((await v.done).code).toBe(0);
    } finally {
      await upstream.close();
    }
  }, CLI_TIMEOUT);

  it('offers the coordinate variables a NetCDF source carried', async () => {
    const rfz = join(tmp.dir, 'corvane.rfz');
    // A fixed layout and tile: the point is the coordinates the viewer offers, not the trials.
    expect((await rfIn(['pack', FIXTURE, '-o', rfz, '--bound', 'rel:1e-3', '--var', 'sst', '--layout', 'slices', '--tile', '24x32', '--quiet'], tmp.dir)).code).toBe(0);
    const v = await view([rfz]);
    const info = (await (await fetchOnce(new URL('/info.json', v.url))).json()) as { coords: Record<string, number[]> };
    // The same values netcdfjs 4.0.0 reads from the source file.
    const nc = new NetCDFReader(readFileSync(FIXTURE));
    for (const name of ['time', 'lat', 'lon']) {
      expect(info.coords[name], name).toEqual(Array.from(nc.getDataVariable(name) as number[]));
    }
    v.child.kill('SIGTERM');
    expect((await v.done).code).toBe(0);
  }, CLI_TIMEOUT);
});
