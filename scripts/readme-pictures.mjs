#!/usr/bin/env node
/**
 * Make the pictures README.md shows, from the demo's invented Corvane Basin
 * field: `npm run pictures` (builds first). The field is packed as the demo
 * packs it (the library's pack, with the field's units and long name), and
 * the pictures are drawn by the command line (rankfield preview), so they
 * are what a user gets. Writes docs/pictures/{value,error,rank}.png, and
 * docs/pictures/view.png: the page of `rankfield view sst.rfz`, as headless
 * Chromium (Debian's chromium, driven by playwright-core) draws it after a
 * zoom, with the pointer over the field (skipped, with a note, without
 * /usr/bin/chromium).
 */
import { execFileSync, spawn } from 'node:child_process';
import { existsSync, mkdirSync, mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';

const root = resolve(dirname(fileURLToPath(import.meta.url)), '..');
const { corvaneBasin, BASIN_DEFAULTS } = await import(join(root, 'dist', 'demo', 'basin.js'));
const { formatNpy } = await import(join(root, 'dist', 'io', 'npy.js'));
const { pack } = await import(join(root, 'dist', 'index.js'));
const out = join(root, 'docs', 'pictures');
mkdirSync(out, { recursive: true });
const work = mkdtempSync(join(tmpdir(), 'rankfield-pictures-'));
const rf = (...args) => execFileSync(process.execPath, [join(root, 'bin', 'rankfield'), ...args], { cwd: work, stdio: ['ignore', 'inherit', 'inherit'] });
try {
  const basin = corvaneBasin();
  const shape = [BASIN_DEFAULTS.rows, BASIN_DEFAULTS.cols];
  writeFileSync(join(work, 'sst.npy'), formatNpy({ data: basin.values, shape, dtype: 'f32' }));
  const keep = (name, bound, tile) => writeFileSync(join(work, name), pack(basin.values, shape, { bound, tile, fill: basin.fill, name: 'sst', attrs: basin.attrs }));
  keep('sst.rfz', 'rel:1e-3', 'auto');
  keep('sst64.rfz', 'psnr:60', 64);
  rf('preview', 'sst.rfz', '-o', join(out, 'value.png'), '--size', '512', '--force');
  rf('preview', 'sst.rfz', '-o', join(out, 'error.png'), '--map', 'error', '--against', 'sst.npy', '--region', '128:384,256:512', '--force');
  rf('preview', 'sst64.rfz', '-o', join(out, 'rank.png'), '--map', 'rank', '--size', '512', '--force');
  if (existsSync('/usr/bin/chromium')) await viewShot(join(work, 'sst.rfz'), join(out, 'view.png'));
  else console.error('note: no /usr/bin/chromium (apt-get install -y chromium): docs/pictures/view.png not made');
} finally {
  rmSync(work, { recursive: true, force: true });
}

/** Start `rankfield view ARCHIVE`, load its page in headless Chromium, zoom in once, point at the field, and save a screenshot. */
async function viewShot(archive, png) {
  const { chromium } = await import('playwright-core');
  const child = spawn(process.execPath, [join(root, 'bin', 'rankfield'), 'view', archive, '--json'], { stdio: ['ignore', 'pipe', 'inherit'] });
  let text = '';
  const url = await new Promise((resolve, reject) => {
    child.stdout.on('data', (d) => {
      text += d;
      try {
        resolve(JSON.parse(text).url);
      } catch {
        // not all of it yet
      }
    });
    child.on('close', (code) => reject(new Error(`rankfield view ended with exit code ${code}`)));
  });
  const browser = await chromium.launch({ executablePath: '/usr/bin/chromium', headless: true, args: ['--no-sandbox', '--disable-gpu'] });
  try {
    const page = await browser.newPage({ viewport: { width: 1100, height: 640 } });
    await page.goto(url);
    const ready = () => page.waitForFunction(() => document.body.dataset.state === 'ready', undefined, { timeout: 30_000 });
    await ready();
    await page.click('#zoom-in');
    await ready();
    const box = await page.locator('#field').boundingBox();
    await page.mouse.move(box.x + box.width * 0.4, box.y + box.height * 0.55);
    await page.screenshot({ path: png });
  } finally {
    await browser.close();
    child.kill('SIGTERM');
  }
}
