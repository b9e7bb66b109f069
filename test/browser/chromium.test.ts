/**
 * The decoder in a browser: headless Chromium (Debian's chromium package,
 * driven by playwright-core) loads the single-file bundle
 * dist/rankfield-decode.mjs (no import map) and dist/decode.js as ES modules
 * from a server on 127.0.0.1, opens an archive there with HTTP Range
 * requests, decodes windows with each, and hands back the bits of the
 * values, which must equal what Node decodes from the same bytes. Data: vega-datasets
 * data/annual-precip.json (360 wide x 168 high), with missing cells added;
 * also as a field with a layer (spec/FORMAT.md 6.2.2, test/format/layered.ts).
 */
import { existsSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { chromium, type BrowserContext, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open, pack } from '../../src/index.js';
import { precip } from '../archive/datasets.js';
import { ensureBuilt, ensureBundled, ROOT } from '../cli/helpers.js';
import { startRangeServer, type RangeServer } from '../io/range-server.js';
import { haveSystemTools } from '../system-tools.js';
import { layeredArchive, smoothFactors } from '../format/layered.js';

const CHROMIUM = '/usr/bin/chromium';
/** .ci/run installs chromium and sets RANKFIELD_SYSTEM_TESTS=required, so that a missing browser fails CI instead of skipping. */
const RUN = haveSystemTools('the browser test', 'chromium', [CHROMIUM]);

const PAGE = `<!doctype html>
<html><head><meta charset="utf-8"><title>rankfield decode</title><link rel="icon" href="data:,">
<script type="importmap">
{ "imports": {
  "fflate": "/node_modules/fflate/esm/browser.js",
  "@msgpack/msgpack": "/node_modules/@msgpack/msgpack/dist.esm/index.mjs"
} }
</script>
<script type="module">
import * as bundle from '/dist/rankfield-decode.mjs';
import * as modules from '/dist/decode.js';
const { open, HttpSource, FormatError } = bundle;
window.decodeWindows = async (url, windows, which) => {
  const lib = which === 'modules' ? modules : bundle;
  const archive = await lib.open(new lib.HttpSource(url));
  // Several windows at once on one archive object.
  const fields = await Promise.all(windows.map(([rows, cols]) => archive.read(undefined, { rows, cols })));
  return fields.map((f) => ({ shape: f.shape, dtype: f.dtype, words: Array.from(new Uint32Array(f.values.buffer, f.values.byteOffset, f.values.byteLength / 4)) }));
};
window.decodeError = async (url) => {
  try { await open(new HttpSource(url, { retries: 0 })); return 'opened'; }
  catch (e) { return (e instanceof FormatError ? 'FormatError: ' : e.name + ': ') + e.message; }
};
window.ready = true;
</script></head><body></body></html>`;

/** The precipitation grid as float32 with missing cells: a NaN with a payload, and +-Inf. */
function field(): Float32Array {
  const g = precip();
  const v = Float32Array.from(g.values);
  const w = new Uint32Array(v.buffer);
  for (let k = 5; k < v.length; k += 211) {
    if (k % 3 === 0) w[k] = 0x7fc0_abcd;
    else v[k] = k % 3 === 1 ? Infinity : -Infinity;
  }
  return v;
}

const WINDOWS: [[number, number], [number, number]][] = [
  [[0, 168], [0, 360]], // the whole field
  [[40, 104], [100, 164]], // inner tiles
  [[150, 168], [330, 360]], // edge tiles on both axes
  [[77, 78], [0, 360]], // one row
  [[0, 168], [359, 360]], // one column
];

describe.skipIf(!RUN)('the decoder in headless Chromium', () => {
  let server: RangeServer;
  let context: BrowserContext | null = null;
  let page: Page;
  let profile: string;
  const errors: string[] = [];
  const bytes = pack(field(), [168, 360], { bound: 'abs:1', tile: [32, 48], name: 'precip' });

  beforeAll(async () => {
    if (!existsSync(CHROMIUM)) return;
    ensureBuilt();
    ensureBundled();
    server = await startRangeServer();
    server.put('/index.html', new TextEncoder().encode(PAGE));
    server.put('/precip.rfz', bytes);
    server.mount('/dist/', join(ROOT, 'dist'));
    server.mount('/node_modules/', join(ROOT, 'node_modules'));
    profile = mkdtempSync(join(tmpdir(), 'rankfield-chromium-'));
    context = await chromium.launchPersistentContext(profile, {
      executablePath: CHROMIUM,
      headless: true,
      args: [
        '--headless',
        '--no-sandbox',
        '--disable-gpu',
        '--disable-quic',
        '--no-first-run',
        '--disable-background-networking',
        '--disable-component-update',
        '--disable-sync',
      ],
    });
    page = await context.newPage();
    page.on('pageerror', (e) => errors.push(`page error: ${e.message}`));
    page.on('console', (m) => void (m.type() === 'error' && errors.push(`console: ${m.text()}`)));
    await page.goto(`${server.url}/index.html`);
    await page.waitForFunction(() => (window as unknown as { ready?: boolean }).ready === true, undefined, { timeout: 20_000 });
    // Explicit limits in this file: starting Chromium and loading the page take seconds,
    // and each test then decodes inside the browser over HTTP; a busy machine multiplies both.
  }, 60_000);

  afterAll(async () => {
    await context?.close();
    await server?.close();
    if (profile) rmSync(profile, { recursive: true, force: true });
  });

  it('has Debian chromium to run in', () => {
    expect(existsSync(CHROMIUM), `${CHROMIUM} is missing: install Debian's chromium package (apt-get install -y chromium), as .ci/run does`).toBe(true);
  });

  it.each(['bundle', 'modules'])('decodes windows over HTTP Range requests, bit for bit as Node does (%s)', async (which) => {
    expect(context, `${CHROMIUM} is missing: install Debian's chromium package (apt-get install -y chromium)`).not.toBeNull();
    server.reset();
    const got = await page.evaluate(([url, windows, w]) => (window as unknown as { decodeWindows: (u: string, x: unknown, w: string) => Promise<{ shape: number[]; dtype: string; words: number[] }[]> }).decodeWindows(url, windows, w), [`${server.url}/precip.rfz`, WINDOWS, which] as const);
    expect(errors).toEqual([]);
    const node = await open(bytes);
    for (const [k, [rows, cols]] of WINDOWS.entries()) {
      const want = await node.read(undefined, { rows, cols });
      expect(got[k].shape).toEqual(want.shape);
      expect(got[k].dtype).toBe('f32');
      expect(got[k].words, `window ${k}`).toEqual(Array.from(new Uint32Array(want.values.buffer)));
    }
    // Every request for the archive was a ranged one: one range, or several in one request
    // (multipart/byteranges, RFC 9110 section 14.6), which the browser's fetch sends as well.
    const archiveRequests = server.log.filter((a) => a.path === '/precip.rfz');
    expect(archiveRequests.length).toBeGreaterThan(4);
    expect(archiveRequests.every((a) => a.range !== null || a.ranges !== null)).toBe(true);
    expect(archiveRequests.some((a) => a.ranges !== null)).toBe(true);
  }, 60_000);

  it('decodes windows of a field with a layer, its factor fields read over HTTP too, bit for bit as Node does', async () => {
    expect(context).not.toBeNull();
    const { left, right } = smoothFactors(168, 360, 2);
    const layered = layeredArchive({ values: field(), shape: [168, 360], tile: [32, 48], tol: 1, rank: 2, left, right, factors: 'before', name: 'precip' }).bytes;
    server.put('/layered.rfz', layered);
    const windows = WINDOWS.slice(0, 3);
    const got = await page.evaluate(([url, w]) => (window as unknown as { decodeWindows: (u: string, x: unknown, w: string) => Promise<{ shape: number[]; words: number[] }[]> }).decodeWindows(url, w, 'bundle'), [`${server.url}/layered.rfz`, windows] as const);
    expect(errors).toEqual([]);
    const node = await open(layered);
    expect(node.field().header.layer).toEqual({ rank: 2, left: 0, right: 1 });
    for (const [k, [rows, cols]] of windows.entries()) {
      const want = await node.read(undefined, { rows, cols });
      expect(got[k].shape).toEqual(want.shape);
      expect(got[k].words, `window ${k}`).toEqual(Array.from(new Uint32Array(want.values.buffer)));
    }
  }, 60_000);

  it('reports a damaged archive with FormatError in the browser too', async () => {
    expect(context).not.toBeNull();
    const broken = bytes.slice(0, bytes.length - 10);
    server.put('/broken.rfz', broken);
    const message = await page.evaluate((url) => (window as unknown as { decodeError: (u: string) => Promise<string> }).decodeError(url), `${server.url}/broken.rfz`);
    expect(message).toMatch(/^FormatError: .*broken\.rfz: no archive tail/);
  }, 30_000);
});
