/**
 * `rankfield view` in a browser: the command serves an archive made from
 * vega-datasets data/annual-precip.json (168 rows x 360 columns; missing
 * cells added, as test/browser/chromium.test.ts does), headless Chromium
 * (Debian's chromium package, driven by playwright-core) loads its page, and
 * the test compares the canvas with values the library decodes in Node,
 * mapped through the same colour table (src/picture/colormap.ts, viridis as
 * published), and the byte ranges the server was asked for (its --log
 * lines) with the tiles the view needs, found from the archive's index.
 *
 * Pixel sampling, as src/view/page.ts documents it: at s pixels per cell,
 * pixel (x, y) shows cell (floor(r0 + (y + 0.5) / s), floor(c0 + (x + 0.5) / s)),
 * each rounded down to a multiple of the step (1 here: every view is at
 * least one pixel per cell).
 */
import { once } from 'node:events';
import { mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { NetCDFReader } from 'netcdfjs';
import { join } from 'node:path';
import { chromium, type BrowserContext, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ArchiveBuilder, MemorySink, open, type Archive, type FieldHeader } from '../../src/index.js';
import { mapColour, MISSING } from '../../src/picture/colormap.js';
import { precip } from '../archive/datasets.js';
import { ensureBuilt, ensureBundled, rf, ROOT, tempDir } from '../cli/helpers.js';
import { haveSystemTools } from '../system-tools.js';
import { startView, type RunningView } from '../view/start.js';
import { layeredArchive, smoothFactors } from '../format/layered.js';

const CHROMIUM = '/usr/bin/chromium';
/** .ci/run installs chromium and sets RANKFIELD_SYSTEM_TESTS=required, so that a missing browser fails CI instead of skipping. */
const RUN = haveSystemTools('the viewer test', 'chromium', [CHROMIUM]);

/** Screenshots for people to look at (git-ignored). */
const SHOTS = join(ROOT, 'test-output', 'view');

/** The precipitation grid as float32 with missing cells (NaN, +-Inf) every 211 cells. */
function field(): Float32Array {
  const v = Float32Array.from(precip().values);
  for (let k = 5; k < v.length; k += 211) v[k] = k % 3 === 0 ? Number.NaN : k % 3 === 1 ? Infinity : -Infinity;
  return v;
}

/** The archive: the grid as it is (packed with recorded prefixes), and as a field of 3 slices of 56 rows (bands of latitude), N-D. */
function archiveBytes(): Uint8Array {
  const sink = new MemorySink();
  const b = new ArchiveBuilder(sink, {}, { slices: true });
  const v = field();
  // psnr:40 in 30 x 29 tiles leaves several tiles a low-rank part, hence recorded prefixes.
  b.add(v, [168, 360], { name: 'precip', bound: 'psnr:40', tile: [30, 29], progressive: true });
  b.add(v, [56, 360], { name: 'precip-bands', bound: 'abs:2', tile: [28, 60], slices: 3, ndShape: [3, 56, 360], dims: ['band', 'lat', 'lon'], layout: 'slices' });
  b.finish();
  return sink.bytes();
}

interface ViewState {
  field: string;
  plane: number;
  r0: number;
  c0: number;
  s: number;
  width: number;
  height: number;
}

/** The cell pixel i shows along an axis starting at a0 (the page's sampling rule), or -1 outside n cells. */
function cellAt(a0: number, i: number, s: number, n: number): number {
  const x = Math.floor(a0 + (i + 0.5) / s);
  return x < 0 || x >= n ? -1 : x;
}

/** The colour of a decoded value, as `preview` draws it: viridis over the field's stored range, missing cells grey. */
function colourOf(v: number, h: FieldHeader): readonly number[] {
  const fill = h.fill === null ? null : Math.fround(h.fill);
  if (!Number.isFinite(v) || v === fill) return MISSING;
  const [lo, hi] = h.bound.range!;
  return mapColour('viridis', (v - lo) / (hi - lo));
}

/** Pixels of the canvas that differ from the colours of the plane's decoded values; and how many pixels showed cells. */
function compare(rgba: Uint8Array, view: ViewState, plane: Float32Array | Float64Array, rows: number, cols: number, h: FieldHeader): { wrong: string[]; drawn: number } {
  const wrong: string[] = [];
  let drawn = 0;
  for (let y = 0; y < view.height; y++) {
    const r = cellAt(view.r0, y, view.s, rows);
    if (r < 0) continue;
    for (let x = 0; x < view.width; x++) {
      const c = cellAt(view.c0, x, view.s, cols);
      if (c < 0) continue;
      drawn++;
      const want = colourOf(plane[r * cols + c], h);
      const o = 4 * (y * view.width + x);
      if (rgba[o] !== want[0] || rgba[o + 1] !== want[1] || rgba[o + 2] !== want[2]) {
        if (wrong.length < 5) wrong.push(`pixel ${x},${y} (cell ${r},${c}): ${Array.from(rgba.subarray(o, o + 3)).join(',')} instead of ${want.join(',')}`);
      }
    }
  }
  return { wrong, drawn };
}

/** Parse the server's --log lines for /archive: the byte ranges asked for, inclusive. */
function archiveRanges(lines: string[]): [number, number][] {
  const out: [number, number][] = [];
  for (const l of lines) {
    const m = /^GET \/archive (?:bytes=(\S+) )?(\d{3}) \d+$/.exec(l);
    if (m === null) continue;
    expect(m[1], `a request for the whole archive: ${l}`).toBeDefined();
    for (const part of m[1].split(',')) {
      const [a, b] = part.split('-').map(Number);
      out.push([a, b]);
    }
  }
  return out;
}

describe.skipIf(!RUN)('rankfield view in headless Chromium', () => {
  const bytes = archiveBytes();
  let node: Archive;
  let tmp: ReturnType<typeof tempDir>;
  let viewer: RunningView;
  let url = '';
  let context: BrowserContext | null = null;
  let page: Page;
  const errors: string[] = [];
  const logLines = () => viewer.stderr().split('\n');

  beforeAll(async () => {
    ensureBuilt();
    ensureBundled();
    mkdirSync(SHOTS, { recursive: true });
    node = await open(bytes);
    tmp = tempDir('rankfield-view-');
    const file = join(tmp.dir, 'precip.rfz');
    writeFileSync(file, bytes);
    viewer = await startView([file, '--log'], tmp.dir);
    url = viewer.url;
    context = await chromium.launchPersistentContext(join(tmp.dir, 'profile'), {
      executablePath: CHROMIUM,
      headless: true,
      viewport: { width: 960, height: 600 },
      args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'],
    });
    page = await context.newPage();
    page.on('pageerror', (e) => errors.push(`page error: ${e.message}`));
    page.on('console', (m) => void (m.type() === 'error' && errors.push(`console: ${m.text()}`)));
    // Starting Chromium and the server takes seconds on a busy machine.
  }, 60_000);

  afterAll(async () => {
    await context?.close();
    if (viewer && viewer.child.exitCode === null) viewer.child.kill('SIGKILL');
    tmp?.remove();
  });

  /** Wait until the page has drawn a view newer than `after` with every block it needs; return that view. */
  async function settled(p: Page, after = 0): Promise<ViewState> {
    await p.waitForFunction((n) => document.body.dataset.state === 'ready' && Number(document.body.dataset.gen) > n, after, { timeout: 20_000 });
    return JSON.parse((await p.evaluate(() => document.body.dataset.view))!) as ViewState;
  }
  /** Requests the page's decoder has sent for the archive, as the page counts them. */
  const requests = (p: Page) => p.evaluate(() => Number(document.body.dataset.requests ?? 0));
  /** The server's log lines from line `from` on, once it has logged `count` requests for the archive (its stderr arrives on its own time). */
  async function logged(from: number, count: number): Promise<string[]> {
    const archiveLines = () => logLines().slice(from).filter((l) => l.startsWith('GET /archive'));
    while (archiveLines().length < count) await once(viewer.child.stderr!, 'data');
    return logLines().slice(from);
  }
  const gen = (p: Page) => p.evaluate(() => Number(document.body.dataset.gen ?? 0));
  /** The canvas's RGBA bytes (sent as base64: a plain array of millions of numbers is slow to pass). */
  const pixels = async (p: Page): Promise<Uint8Array> =>
    Buffer.from(
      await p.evaluate(() => {
        const c = document.getElementById('field') as HTMLCanvasElement;
        const d = c.getContext('2d')!.getImageData(0, 0, c.width, c.height).data;
        let text = '';
        for (let i = 0; i < d.length; i += 0x8000) text += String.fromCharCode(...d.subarray(i, i + 0x8000));
        return btoa(text);
      }),
      'base64',
    );
  /** Where the canvas is on the page. */
  const canvasBox = async (p: Page) => (await p.locator('#field').boundingBox())!;

  it('draws the whole field in the colours of the values the library decodes', async () => {
    await page.goto(url);
    const view = await settled(page);
    expect(errors).toEqual([]);
    const h = node.field('precip').header;
    const whole = await node.read('precip');
    const { wrong, drawn } = compare(await pixels(page), view, whole.values, 168, 360, h);
    expect(wrong).toEqual([]);
    expect(drawn).toBeGreaterThan(168 * 360); // at least a pixel per cell: every cell drawn
    // Coarse first: the page says how many tiles came from prefixes, as many as a read at its coarse bound takes.
    const coarse = await node.read('precip', { bound: 'psnr:30' });
    const status = await page.locator('#status').innerText();
    if (coarse.prefixTiles > 0) expect(status).toContain(`(${coarse.prefixTiles} tiles from payload prefixes at psnr:30)`);
    else expect(status).not.toContain('coarse first');
    // The readout under the pointer: the value the library decodes at that cell.
    const box = await canvasBox(page);
    const [x, y] = [200, 150];
    await page.mouse.move(box.x + x, box.y + y);
    const r = cellAt(view.r0, y, view.s, 168);
    const c = cellAt(view.c0, x, view.s, 360);
    const probe = await page.locator('#probe').innerText();
    expect(probe).toContain(`row ${r}, column ${c}`);
    const v = whole.values[r * 360 + c];
    expect(probe).toContain(Number.isFinite(v) ? String(Number(v.toPrecision(7))) : 'missing');
    expect(probe).toContain('psnr:40');
    await page.screenshot({ path: join(SHOTS, 'whole.png') });
  }, 60_000);

  it('zooms into a corner with the wheel and pans by dragging, drawing from the blocks it holds', async () => {
    const before = logLines().length;
    const sent = await requests(page);
    const box = await canvasBox(page);
    let view = JSON.parse((await page.evaluate(() => document.body.dataset.view))!) as ViewState;
    // The pointer over the field's top-left corner cell, then the wheel: the corner stays under it.
    const px = box.x + Math.max(2, (0.5 - view.c0) * view.s);
    const py = box.y + Math.max(2, (0.5 - view.r0) * view.s);
    await page.mouse.move(px, py);
    for (let k = 0; k < 2; k++) {
      const g = await gen(page);
      await page.mouse.wheel(0, -400);
      view = await settled(page, g - 1);
    }
    expect(view.s).toBeGreaterThan(6);
    const g = await gen(page);
    await page.mouse.move(box.x + 300, box.y + 200);
    await page.mouse.down();
    await page.mouse.move(box.x + 260, box.y + 170, { steps: 4 });
    await page.mouse.up();
    view = await settled(page, g);
    // Still the top-left corner: the first cells are in view.
    expect(cellAt(view.r0, view.height - 1, view.s, 168)).toBeGreaterThan(0);
    expect(view.r0).toBeLessThan(10);
    expect(view.c0).toBeLessThan(20);
    const whole = await node.read('precip');
    const { wrong, drawn } = compare(await pixels(page), view, whole.values, 168, 360, node.field('precip').header);
    expect(wrong).toEqual([]);
    expect(drawn).toBeGreaterThan(view.width * view.height * 0.5);
    // Every block in view was read for the whole field already: nothing was fetched again.
    expect(await requests(page)).toBe(sent);
    expect(archiveRanges(logLines().slice(before))).toEqual([]);
    expect(errors).toEqual([]);
    await page.screenshot({ path: join(SHOTS, 'corner.png') });
  }, 60_000);

  it('a fresh page at that view fetches only the tiles it needs (and their index pages)', async () => {
    const hash = new URL(page.url()).hash;
    const fresh = await context!.newPage();
    fresh.on('pageerror', (e) => errors.push(`page error: ${e.message}`));
    const before = logLines().length;
    await fresh.goto(`${url}${hash}`);
    const view = await settled(fresh);
    const asked = archiveRanges(await logged(before, await requests(fresh)));
    const h = node.field('precip').header;
    const whole = await node.read('precip');
    expect(compare(await pixels(fresh), view, whole.values, 168, 360, h).wrong).toEqual([]);
    // The tiles under the pixels, from the sampling rule and the tile shape; their bytes from the index.
    const [tr, tc] = h.tile;
    const gc = Math.ceil(360 / tc);
    const needed = new Set<number>();
    for (let y = 0; y < view.height; y++) {
      const r = cellAt(view.r0, y, view.s, 168);
      for (let x = 0; r >= 0 && x < view.width; x++) {
        const c = cellAt(view.c0, x, view.s, 360);
        if (c >= 0) needed.add(Math.floor(r / tr) * gc + Math.floor(c / tc));
      }
    }
    const ix = (await node.loadIndex()).fields[0];
    const all = ix.offset.length;
    expect(needed.size).toBeGreaterThan(1);
    expect(needed.size).toBeLessThan(all / 4);
    const d = node.directory.fields[0];
    const pageOf = (t: number) => d.data_offset.findIndex((o, p) => ix.offset[t] >= o && ix.offset[t] < o + d.data_length[p]);
    const neededPages = new Set([...needed].map(pageOf));
    // Bytes no request may touch: other tiles' payloads and other index pages (of every field).
    const forbidden: [number, number][] = [];
    for (let t = 0; t < all; t++) if (!needed.has(t) && ix.length[t] > 0) forbidden.push([ix.offset[t], ix.offset[t] + ix.length[t] - 1]);
    for (const [f, fd] of node.directory.fields.entries()) {
      fd.page_offset.forEach((o, p) => {
        if (f !== 0 || !neededPages.has(p)) forbidden.push([o, o + fd.page_length[p] - 1]);
      });
      if (f > 0) fd.data_offset.forEach((o, p) => fd.data_length[p] > 0 && forbidden.push([o, o + fd.data_length[p] - 1]));
    }
    for (const [a, b] of asked) {
      expect(b).toBeLessThan(bytes.length);
      const hit = forbidden.find(([x, y]) => a <= y && x <= b);
      expect(hit, `bytes ${a}-${b} reach into ${hit} (not needed for the view)`).toBeUndefined();
    }
    // And each needed tile's payload was fetched whole.
    for (const t of needed) {
      const [o, e] = [ix.offset[t], ix.offset[t] + ix.length[t] - 1];
      const covered = asked.filter(([a, b]) => a <= o && e <= b);
      expect(covered.length, `tile ${t} at bytes ${o}-${e}`).toBeGreaterThan(0);
    }
    // Prefixes: requested exactly where a read at the page's coarse bound takes tiles from prefixes.
    const r0 = Math.max(0, Math.floor(view.r0));
    const c0 = Math.max(0, Math.floor(view.c0));
    const coarse = await node.read('precip', { rows: [r0, Math.min(168, Math.ceil(view.r0 + view.height / view.s))], cols: [c0, Math.min(360, Math.ceil(view.c0 + view.width / view.s))], bound: 'psnr:30' });
    const prefixEnds = new Set([...needed].flatMap((t) => ix.prefix?.[t]?.filter((_, i) => i % 4 === 0).map((len) => ix.offset[t] + len - 1) ?? []));
    expect(asked.some(([, b]) => prefixEnds.has(b))).toBe(coarse.prefixTiles > 0);
    expect(errors).toEqual([]);
    await fresh.close();
  }, 60_000);

  it('switches to a field of slices and steps through them', async () => {
    const g = await gen(page);
    await page.selectOption('#var', 'precip-bands');
    let view = await settled(page, g);
    expect(view.field).toBe('precip-bands');
    for (let k = 0; k < 2; k++) {
      const g2 = await gen(page);
      await page.click('#next');
      view = await settled(page, g2);
    }
    expect(view.plane).toBe(2);
    const h = node.field('precip-bands').header;
    const slice = await node.read('precip-bands', { slices: [2, 3] });
    expect(compare(await pixels(page), view, slice.values, 56, 360, h).wrong).toEqual([]);
    const box = await canvasBox(page);
    const [x, y] = [Math.floor(view.width / 3), Math.floor(view.height / 2)];
    await page.mouse.move(box.x + x, box.y + y);
    const r = cellAt(view.r0, y, view.s, 56);
    const c = cellAt(view.c0, x, view.s, 360);
    expect(r).toBeGreaterThanOrEqual(0);
    expect(await page.locator('#probe').innerText()).toContain(`band 2, lat ${r}, lon ${c}`);
    expect(errors).toEqual([]);
    await page.screenshot({ path: join(SHOTS, 'slices.png') });
  }, 60_000);

  it('shows under the pointer the coordinate values a NetCDF source carried', async () => {
    // test/fixtures/netcdf/corvane-run-classic.nc (invented test data, see its README): sst is (time 6, lat 24, lon 32).
    const fixture = join(ROOT, 'test', 'fixtures', 'netcdf', 'corvane-run-classic.nc');
    const rfz = join(tmp.dir, 'corvane.rfz');
    expect(rf(['pack', fixture, '-o', rfz, '--var', 'sst', '--bound', 'rel:1e-3', '--layout', 'slices', '--quiet'], tmp.dir).code).toBe(0);
    const other = await startView([rfz], tmp.dir);
    try {
      const p = await context!.newPage();
      await p.goto(other.url);
      const view = await settled(p);
      const box = await canvasBox(p);
      const [x, y] = [Math.floor(view.width / 2), Math.floor(view.height / 2)];
      await p.mouse.move(box.x + x, box.y + y);
      const [r, c] = [cellAt(view.r0, y, view.s, 24), cellAt(view.c0, x, view.s, 32)];
      const probe = await p.locator('#probe').innerText();
      expect(probe).toContain(`time 0, lat ${r}, lon ${c}`);
      // The coordinate values as netcdfjs 4.0.0 (an independent reader of the classic format) reads them.
      const nc = new NetCDFReader(readFileSync(fixture));
      const shown = (v: number) => String(Number(v.toPrecision(7)));
      expect(probe).toMatch(new RegExp(`lat\\s+${shown((nc.getDataVariable('lat') as number[])[r]).replace('.', '\\.')}`));
      expect(probe).toMatch(new RegExp(`lon\\s+${shown((nc.getDataVariable('lon') as number[])[c]).replace('.', '\\.')}`));
      expect(probe).toMatch(new RegExp(`time\\s+${shown((nc.getDataVariable('time') as number[])[0]).replace('.', '\\.')}`));
      await p.close();
    } finally {
      other.child.kill('SIGTERM');
      await other.done;
    }
  }, 60_000);

  it('lists a field with a layer without its factor fields, draws it through the layer, and shows a factor field the address names', async () => {
    // spec/FORMAT.md 6.2.2: the factor fields, listed first here, are part of their field.
    const { left, right } = smoothFactors(168, 360, 2);
    const layered = layeredArchive({ values: field(), shape: [168, 360], tile: [32, 48], tol: 1, rank: 2, left, right, factors: 'before', name: 'precip' }).bytes;
    const rfz = join(tmp.dir, 'layered.rfz');
    writeFileSync(rfz, layered);
    const other = await startView([rfz], tmp.dir);
    try {
      const options = (p: Page) => p.$$eval('#var option', (o) => o.map((x) => (x as HTMLOptionElement).value));
      const p = await context!.newPage();
      await p.goto(other.url);
      const view = await settled(p);
      expect(view.field).toBe('precip');
      expect(await options(p)).toEqual(['precip']);
      const a = await open(layered);
      const want = await a.read('precip');
      expect(compare(await pixels(p), view, want.values, 168, 360, a.field('precip').header).wrong).toEqual([]);
      const q = await context!.newPage();
      await q.goto(`${other.url}#var=precip.left`);
      expect((await settled(q)).field).toBe('precip.left');
      expect(await options(q)).toEqual(['precip', 'precip.left']);
      await p.close();
      await q.close();
    } finally {
      other.child.kill('SIGTERM');
      await other.done;
    }
  }, 60_000);

  it('ends cleanly on SIGTERM', async () => {
    viewer.child.kill('SIGTERM');
    const end = await viewer.done;
    expect(end.code).toBe(0);
    expect(end.stderr).toContain('stopped the viewer on SIGTERM');
    expect(end.stderr).not.toMatch(/error/i);
  }, 30_000);
});
