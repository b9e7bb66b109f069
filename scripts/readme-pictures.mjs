#!/usr/bin/env node
/**
 * Make the pictures README.md shows, from the demo's invented Corvane Basin
 * field: `npm run pictures` (builds first). The field is packed as the demo
 * packs it (the library's pack, with the field's units and long name), and
 * the pictures are drawn by the command line (rankfield preview), so they
 * are what a user gets. Writes docs/pictures/{value,error,rank}.png.
 */
import { execFileSync } from 'node:child_process';
import { mkdirSync, mkdtempSync, rmSync, writeFileSync } from 'node:fs';
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
} finally {
  rmSync(work, { recursive: true, force: true });
}
