/**
 * Archive digests: packs every bench field (the quick run's sizes) under the
 * bench bounds and a few option sets, and prints the SHA-256 of each archive
 * and of them all. A change meant to leave the codec alone (refactoring,
 * dead code) must leave every line unchanged: run this before and after and
 * compare (`npm run digest`; takes about a minute).
 */
import { createHash } from 'node:crypto';
import { pack, type PackOptions } from '../src/index.js';
import { benchFields } from './fields.js';

/** The bounds of bench/run.ts. */
const BOUNDS = ['rel:1e-2', 'rel:1e-3', 'rel:1e-4', 'psnr:40', 'psnr:60', 'psnr:80'];

const sha = (b: Uint8Array) => createHash('sha256').update(b).digest('hex');

const all = createHash('sha256');
let count = 0;
for (const field of benchFields(true)) {
  const shape = [field.rows, field.cols];
  const wide = Float64Array.from(field.values);
  const runs: [string, PackOptions, boolean][] = [];
  const bounds = field.large ? ['rel:1e-3', 'psnr:60'] : [...BOUNDS, 'abs:1e-2', 'rmse:1e-2'];
  for (const bound of bounds) runs.push([`${bound} tile 64`, { bound, tile: 64, fill: field.fill }, false]);
  if (!field.large) {
    for (const bound of ['rel:1e-3', 'psnr:60']) {
      runs.push([`${bound} tile auto`, { bound, tile: 'auto', fill: field.fill }, false]);
      runs.push([`${bound} tile 32x48 progressive`, { bound, tile: [32, 48], fill: field.fill, progressive: true }, false]);
      runs.push([`${bound} tile 64 f64`, { bound, tile: 64, fill: field.fill }, true]);
    }
  }
  for (const [label, o, f64] of runs) {
    const bytes = pack(f64 ? wide : field.values, shape, o);
    const d = sha(bytes);
    all.update(d);
    count++;
    console.log(`${field.id.padEnd(14)} ${label.padEnd(32)} ${String(bytes.length).padStart(8)}  ${d}`);
  }
}
console.log(`all ${count} archives: ${all.digest('hex')}`);
