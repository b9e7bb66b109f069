/**
 * The command line over windows and URLs: `unpack --region` from a file and
 * from an http(s) URL, `show URL` and `check URL`, and the streaming `pack`
 * (band reader + file sink), whose archive must be byte-identical to the
 * library's in-memory pack of the same values. Data: the vega-datasets
 * annual-precip grid (data/annual-precip.json, 360 wide x 168 high). The
 * commands run in this process (rfIn), whose event loop keeps the test's HTTP
 * server answering while they read from it.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open, pack } from '../../src/index.js';
import { parseNpy, formatNpy } from '../../src/io/npy.js';
import { formatRaw } from '../../src/io/raw.js';
import { precip } from '../archive/datasets.js';
import { startRangeServer, type RangeServer } from '../io/range-server.js';
import { expectSameBytes } from '../same-bytes.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, leftovers, rfIn, tempDir } from './helpers.js';

let tmp: ReturnType<typeof tempDir>;
let server: RangeServer;
const g = precip();
const data = Float32Array.from(g.values);
let whole: Float32Array;

beforeAll(async () => {
  ensureBuilt();
  tmp = tempDir('rankfield-region-cli-');
  writeFileSync(join(tmp.dir, 'precip.npy'), formatNpy({ data, shape: g.shape, dtype: 'f32' }));
  const r = await rfIn(['pack', 'precip.npy', '-o', 'precip.rfz', '--bound', 'abs:2', '--tile', '32x48'], tmp.dir);
  expect(r.code, r.stderr).toBe(0);
  whole = (await (await open(new Uint8Array(readFileSync(join(tmp.dir, 'precip.rfz'))))).read()).values as Float32Array;
  server = await startRangeServer();
  server.put('/precip.rfz', { file: join(tmp.dir, 'precip.rfz') });
});
afterAll(async () => {
  await server?.close();
  tmp?.remove();
});

function windowOf(rows: [number, number], cols: [number, number]): Float32Array {
  const out = new Float32Array((rows[1] - rows[0]) * (cols[1] - cols[0]));
  for (let i = rows[0]; i < rows[1]; i++) out.set(whole.subarray(i * 360 + cols[0], i * 360 + cols[1]), (i - rows[0]) * (cols[1] - cols[0]));
  return out;
}

describe('streaming pack', { timeout: CLI_TIMEOUT }, () => {
  it('writes the same archive bytes as the library packing the values in memory, from .npy and raw input', async () => {
    const want = pack(data, g.shape, { bound: 'abs:2', tile: [32, 48], name: 'precip' });
    expectSameBytes(new Uint8Array(readFileSync(join(tmp.dir, 'precip.rfz'))), want);
    // Raw input: the first 80 rows (two full bands of 32 and a partial one) keep it quick.
    const top = data.subarray(0, 80 * 360);
    writeFileSync(join(tmp.dir, 'precip.be'), formatRaw({ data: top, shape: [80, 360], dtype: 'f32' }, 'big'));
    const r = await rfIn(['pack', 'precip.be', '-o', 'raw.rfz', '--bound', 'abs:2', '--tile', '32x48', '--shape', '80x360', '--dtype', 'f32', '--endian', 'big', '--name', 'precip'], tmp.dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/115200 bytes in, \d+ bytes out/);
    expectSameBytes(new Uint8Array(readFileSync(join(tmp.dir, 'raw.rfz'))), pack(top, [80, 360], { bound: 'abs:2', tile: [32, 48], name: 'precip' }));
    expect(leftovers(tmp.dir)).toEqual([]);
  });

  it('still notes a fill value that does not occur, and leaves no file behind on a bad input', async () => {
    const r = await rfIn(['pack', 'precip.npy', '-o', 'fill.rfz', '--bound', 'abs:2', '--fill', '-12345'], tmp.dir);
    expect(r.code).toBe(0);
    expect(r.stderr).toMatch(/note: the fill value -12345 does not occur in 'precip.npy'/);
    writeFileSync(join(tmp.dir, 'short.raw'), new Uint8Array(100));
    const bad = await rfIn(['pack', 'short.raw', '-o', 'bad.rfz', '--bound', 'abs:2', '--shape', '168x360', '--dtype', 'f32'], tmp.dir);
    expectCliError(bad, /short\.raw: shape 168x360 of f32 needs 60480 values of 4 bytes = 241920 bytes but the file holds 100 bytes/);
    expect(leftovers(tmp.dir)).toEqual([]);
  });
});

describe('unpack --region from a file', () => {
  it.each([
    ['10:20,30:40', [10, 20], [30, 40]],
    ['0:1,0:360', [0, 1], [0, 360]],
    ['167:168,359:360', [167, 168], [359, 360]],
    [':40,300:', [0, 40], [300, 360]],
    ['31:33,47:49', [31, 33], [47, 49]],
  ] as const)('%s gives that window of the whole decode, bit for bit', async (region, rows, cols) => {
    const out = `w-${region.replace(/[:,]/g, '_')}.npy`;
    const r = await rfIn(['unpack', 'precip.rfz', '-o', out, '--region', region], tmp.dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(new RegExp(`unpacked rows ${rows[0]}\\.\\.${rows[1] - 1}, columns ${cols[0]}\\.\\.${cols[1] - 1} \\(${rows[1] - rows[0]}x${cols[1] - cols[0]}\\) of field 'precip'`));
    const got = parseNpy(new Uint8Array(readFileSync(join(tmp.dir, out))));
    expect(got.shape).toEqual([rows[1] - rows[0], cols[1] - cols[0]]);
    expectSameBytes(got.data, windowOf([rows[0], rows[1]], [cols[0], cols[1]]));
  });

  it.each([
    ['10:20', /region must be R0:R1,C0:C1/],
    ['a:b,1:2', /region must be R0:R1,C0:C1/],
    ['10:10,0:5', /region rows 10:10 are empty/],
    ['0:5,-1:3', /region must be R0:R1,C0:C1/],
    ['0:200,0:5', /field 'precip' has 168 rows; rows \[0, 200\) lies outside rows 0\.\.168/],
    ['0:5,360:', /cols \[360, 360\) is empty/],
  ])('--region %s is refused with one error line and no output', async (region, message) => {
    const r = await rfIn(['unpack', 'precip.rfz', '-o', 'bad.npy', '--region', region], tmp.dir);
    expectCliError(r, message);
    expect(leftovers(tmp.dir)).toEqual([]);
  });
});

/** Bytes the requests since the last reset asked for (each range once, as the server parsed it). */
function asked(s: RangeServer): number {
  let n = 0;
  for (const a of s.log) {
    if (a.range) n += a.range[1] - a.range[0] + 1;
    for (const [x, y] of a.ranges ?? []) n += y - x + 1;
  }
  return n;
}

describe('archives at an http URL', { timeout: CLI_TIMEOUT }, () => {
  it('unpack --region reads only what the window needs and gives the same window', async () => {
    server.reset();
    const r = await rfIn(['unpack', `${server.url}/precip.rfz`, '-o', 'url.npy', '--region', '100:130,200:260'], tmp.dir);
    expect(r.code, r.stderr).toBe(0);
    const got = parseNpy(new Uint8Array(readFileSync(join(tmp.dir, 'url.npy'))));
    expectSameBytes(got.data, windowOf([100, 130], [200, 260]));
    // Bytes asked for: the probe, prologue, tail, header and index directory, the one index
    // page (6 x 8 tiles of 32x48, pages of 8 x 8 tiles), plus the payloads of the tiles the
    // window touches (tile rows 3..4, tile columns 4..5).
    const a = await open(new Uint8Array(readFileSync(join(tmp.dir, 'precip.rfz'))));
    const ix = (await a.loadIndex()).fields[0];
    const gc = Math.ceil(360 / 48);
    let payload = 0;
    for (const ti of [3, 4]) for (const tj of [4, 5]) payload += ix.length[ti * gc + tj];
    const size = a.size;
    const tail = new DataView(readFileSync(join(tmp.dir, 'precip.rfz')).buffer.slice(size - 24));
    // Prologue 12 bytes, tail 24 (its words 0 and 4: header and directory lengths), spec/FORMAT.md 3.1 and 3.5.
    const meta = 1 + 12 + 24 + tail.getUint32(0, true) + tail.getUint32(4, true) + a.directory.fields[0].page_length[0];
    expect(asked(server)).toBe(meta + payload);
    // The two payload runs went in one request (multipart/byteranges): what was sent is the runs plus the part headers.
    expect(server.log.at(-1)?.ranges).toHaveLength(2);
    expect(server.bytesSent).toBeGreaterThan(meta + payload);
    expect(server.bytesSent).toBeLessThan(meta + payload + 400);
  });

  it('show reads only the probe byte, prologue, tail, header and index, and says what a file show says', async () => {
    server.reset();
    const r = await rfIn(['show', `${server.url}/precip.rfz`, '--json'], tmp.dir);
    expect(r.code, r.stderr).toBe(0);
    const local = await rfIn(['show', 'precip.rfz', '--json'], tmp.dir);
    const a = JSON.parse(r.stdout) as Record<string, unknown>;
    const b = JSON.parse(local.stdout) as Record<string, unknown>;
    // The same facts, but for the bytes by role, which a file show counts from the payloads and a URL show does not fetch.
    const noShares = (x: Record<string, unknown>) => ({ ...x, file: '', fields: (x.fields as Record<string, unknown>[]).map((f) => ({ ...f, bytes: null })) });
    expect((a.fields as { bytes: unknown }[])[0].bytes).toBeNull();
    expect((b.fields as { bytes: unknown }[])[0].bytes).not.toBeNull();
    expect(noShares(a)).toEqual(noShares(b));
    const bytes = readFileSync(join(tmp.dir, 'precip.rfz'));
    const tail = new DataView(bytes.buffer.slice(bytes.length - 24));
    const pages = (await open(new Uint8Array(bytes))).directory.fields[0].page_length.reduce((x, y) => x + y, 0);
    // show needs every tile's method and rank: the whole index, directory and pages.
    expect(asked(server)).toBe(1 + 12 + 24 + tail.getUint32(0, true) + tail.getUint32(4, true) + pages);
    expect(server.bytesSent).toBe(asked(server));
  });

  it('check URL passes, against the original too', async () => {
    const r = await rfIn(['check', `${server.url}/precip.rfz`, '--against', 'precip.npy'], tmp.dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/check passed/);
  });

  it('a missing URL and a malformed URL give one error line (exit 2)', async () => {
    expectCliError(await rfIn(['show', `${server.url}/none.rfz`], tmp.dir), /cannot reach '.*none\.rfz': HTTP 404 Not Found/);
    expectCliError(await rfIn(['show', 'http://exa mple/x.rfz'], tmp.dir), /'http:\/\/exa mple\/x\.rfz' is not a URL/);
    expect(leftovers(tmp.dir)).toEqual([]);
  });

  it('an unreachable server gives one error line (exit 2) after the retries', async () => {
    expectCliError(await rfIn(['unpack', 'http://127.0.0.1:1/x.rfz', '-o', 'x.npy'], tmp.dir), /cannot reach 'http:\/\/127\.0\.0\.1:1\/x\.rfz': .*gave up after 4 attempts/);
    // Over 2 s by design: the CLI waits out HttpSource's back-off between its 4 attempts
    // (250 + 500 + 1000 ms by default); the describe's explicit CLI_TIMEOUT covers it.
    expect(leftovers(tmp.dir)).toEqual([]);
  });
});
