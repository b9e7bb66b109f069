/**
 * `--threads N` of pack and unpack: the same archive and the same output for
 * every N, the refusal of unusable counts, and errors raised on worker
 * threads shown as the usual one line. Inputs: the vega-datasets volcano grid
 * (61 x 87), cells below 100 m as fill -999 and a block as NaN; and the
 * annual-precip grid mirror-tiled to 360 x 720, large enough (more than
 * 2^16 values) for unpack to decode on worker threads.
 */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { formatRaw } from '../../src/io/raw.js';
import { mirrored, precip } from '../archive/datasets.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, leftovers, rfIn, tempDir, volcano } from './helpers.js';

const { dir, remove } = tempDir('rankfield-threads-cli-');
const vol = volcano();
const [ROWS, COLS] = vol.shape;
const masked = Float32Array.from(vol.values, (v) => (v < 100 ? -999 : v));
for (let i = 30; i < 33; i++) for (let j = 40; j < 44; j++) masked[i * COLS + j] = Number.NaN;

beforeAll(async () => {
  ensureBuilt();
  writeFileSync(join(dir, 'masked.npy'), formatNpy({ data: masked, shape: [ROWS, COLS], dtype: 'f32' }));
  writeFileSync(join(dir, 'precip.npy'), formatNpy({ data: mirrored(precip(), 720, 0, 360), shape: [360, 720], dtype: 'f32' }));
});
afterAll(remove);

const bytesOf = (name: string) => readFileSync(join(dir, name));

describe('--threads', { timeout: CLI_TIMEOUT * 2 }, () => {
  it('pack writes the same archive with 1 and 3 threads (pointwise and psnr bounds, fill cells)', async () => {
    for (const bound of ['rel:1e-3', 'psnr:60']) {
      const names = [1, 3].map((t) => `m-${bound.replace(':', '')}-${t}.rfz`);
      for (const [k, name] of names.entries()) {
        const r = await rfIn(['pack', 'masked.npy', '-o', name, '--bound', bound, '--fill', '-999', '--tile', '16x24', '--threads', String(2 * k + 1)], dir);
        expect(r.code, r.stderr).toBe(0);
      }
      expect(bytesOf(names[1]).equals(bytesOf(names[0])), bound).toBe(true);
    }
  });

  it('reports the threads a pack used: one for a small field whose tile is chosen by trial, whatever --threads says', async () => {
    const r = await rfIn(['pack', 'masked.npy', '-o', 'auto3.rfz', '--bound', 'rel:1e-3', '--fill', '-999', '--threads', '3'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/\n  threads 1 \(chosen automatically: /);
    const fixed = await rfIn(['pack', 'masked.npy', '-o', 'fixed3.rfz', '--bound', 'rel:1e-3', '--fill', '-999', '--tile', '16x24', '--threads', '3'], dir);
    expect(fixed.stdout).toMatch(/\n  threads 3\n/);
  });

  it('unpack writes, band by band, the .npy and raw bytes of the values Archive.read returns, with 1 and 2 threads', async () => {
    expect((await rfIn(['pack', 'precip.npy', '-o', 'u.rfz', '--bound', 'rel:1e-3', '--tile', '24x40'], dir)).code).toBe(0);
    const archive = await open(new Uint8Array(bytesOf('u.rfz')));
    const whole = await archive.read();
    const window = await archive.read(undefined, { rows: [3, 341], cols: [10, 700] });
    for (const t of ['1', '2']) {
      expect((await rfIn(['unpack', 'u.rfz', '-o', `u${t}.npy`, '--threads', t], dir)).code).toBe(0);
      expect(bytesOf(`u${t}.npy`).equals(formatNpy({ data: whole.values, shape: whole.shape, dtype: 'f32' })), `threads ${t}`).toBe(true);
      expect((await rfIn(['unpack', 'u.rfz', '-o', `w${t}.raw`, '--region', '3:341,10:700', '--endian', 'big', '--threads', t], dir)).code).toBe(0);
      expect(bytesOf(`w${t}.raw`).equals(formatRaw({ data: window.values, shape: window.shape, dtype: 'f32' }, 'big')), `threads ${t}`).toBe(true);
    }
    await archive.close();
  });

  it('refuses a count that is not an integer from 1 to 1024, with one line and exit 2', async () => {
    for (const [k, bad] of ['0', '-1', '2.5', 'many', '100000'].entries()) {
      const args = k % 2 === 0 ? ['pack', 'masked.npy', '-o', 'x.rfz', '--bound', 'rel:1e-3'] : ['unpack', 'u.rfz', '-o', 'x.npy'];
      expectCliError(await rfIn([...args, '--threads', bad], dir), /--threads.*integer from 1 to 1024/);
    }
    expect(existsSync(join(dir, 'x.rfz')) || existsSync(join(dir, 'x.npy'))).toBe(false);
  });

  it('a damaged tile decoded on a worker thread: one line naming the tile, exit 2, no output left', async () => {
    const bytes = new Uint8Array(bytesOf('u.rfz'));
    const e = await (await open(bytes)).tileEntry(undefined, 17);
    bytes[e.offset + 2] ^= 0x10;
    writeFileSync(join(dir, 'bad.rfz'), bytes);
    expectCliError(await rfIn(['unpack', 'bad.rfz', '-o', 'bad.npy', '--threads', '2'], dir), /bad\.rfz field 'precip' tile 17: payload CRC-32 mismatch/);
    expect(existsSync(join(dir, 'bad.npy'))).toBe(false);
    expect(leftovers(dir)).toEqual([]);
  });
});
