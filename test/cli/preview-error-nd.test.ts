/**
 * `preview --map error` of fields of slices and of fields stored as a matrix
 * (time x space): the original may be the NetCDF file packed, an N-D .npy
 * of the variable, or the drawn snapshot alone, and all three draw the same
 * picture. Under an abs bound every |decoded - original| / E is at most 1
 * (the bound's definition), so the error scale is [0, 1] and the colour of
 * a cell is inferno at that ratio. The original values are read with
 * netcdfjs 4.0.0, an independent reader of the classic format.
 * Data: test/fixtures/netcdf/corvane-run-classic.nc (see its README): sst is
 * (time 6, lat 24, lon 32), land as _FillValue 1e20.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { decode } from 'fast-png';
import { NetCDFReader } from 'netcdfjs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { mapColour } from '../../src/picture/colormap.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, ROOT, rfIn, tempDir } from './helpers.js';

const FIXTURE = join(ROOT, 'test', 'fixtures', 'netcdf', 'corvane-run-classic.nc');
const { dir, remove } = tempDir();
/** sst as netcdfjs reads it: one array per record, flattened to C order. */
const sst = Float32Array.from((new NetCDFReader(readFileSync(FIXTURE)).getDataVariable('sst') as number[][]).flat());

beforeAll(async () => {
  ensureBuilt();
  writeFileSync(join(dir, 'sst.npy'), formatNpy({ data: sst, shape: [6, 24, 32], dtype: 'f32' }));
  writeFileSync(join(dir, 'snap4.npy'), formatNpy({ data: sst.subarray(4 * 768, 5 * 768), shape: [24, 32], dtype: 'f32' }));
  writeFileSync(join(dir, 'wrong.npy'), formatNpy({ data: sst.subarray(0, 24 * 30), shape: [24, 30], dtype: 'f32' }));
});
afterAll(remove);

describe('preview --map error of N-D fields', { timeout: CLI_TIMEOUT }, () => {
  it.each([
    ['a matrix (time x space)', ['--matrix', 'time:space'], [FIXTURE, 'sst.npy', 'snap4.npy']],
    ['slices', ['--layout', 'slices'], [FIXTURE, 'snap4.npy']],
  ])('%s: against the NetCDF file, the N-D .npy or the snapshot alone', async (_, layout, originals) => {
    const rfz = `sst-${layout[0].slice(2)}.rfz`;
    const p = await rfIn(['pack', FIXTURE, '-o', rfz, '--var', 'sst', '--bound', 'abs:0.01', '--tile', '16', ...layout, '--quiet'], dir);
    expect(p.code, p.stderr).toBe(0);
    const pictures: Buffer[] = [];
    let rep = { scale: 0 };
    for (const [k, against] of originals.entries()) {
      const r = await rfIn(['preview', rfz, '--var', 'sst', '--slice', '4', '--map', 'error', '--against', against, '-o', `e${k}.png`, '--force', '--json'], dir);
      expect(r.code, r.stderr).toBe(0);
      rep = JSON.parse(r.stdout);
      // abs:0.01: |decoded - original| <= E for every value, so the error scale is [0, 1].
      expect(rep).toMatchObject({ window: { slice: 4, rows: [0, 24], cols: [0, 32] }, scaleRange: [0, 1] });
      pictures.push(readFileSync(join(dir, `e${k}.png`)));
      if (k > 0) expect(pictures[k].equals(pictures[0]), `the picture against ${against}`).toBe(true);
    }
    // A cell's colour: inferno at |decoded - original| / E, found beside the picture's frame.
    const field = await (await open(readFileSync(join(dir, rfz)))).read('sst');
    const E = 0.01;
    const png = decode(pictures[0]);
    const data = png.data as Uint8Array;
    const at = (x: number, y: number) => Array.from(data.subarray((y * png.width + x) * 3, (y * png.width + x) * 3 + 3));
    const err = (i: number, j: number) => Math.abs(field.values[4 * 768 + i * 32 + j] - sst[4 * 768 + i * 32 + j]) / E;
    let y0 = -1;
    let x0 = -1;
    for (let y = 0; y < png.height && y0 < 0; y++) for (let x = 1; x < png.width / 2; x++) if (at(x - 1, y).join() === '0,0,0' && at(x, y).join() === mapColour('inferno', err(0, 0)).join()) [x0, y0] = [x, y];
    expect(y0).toBeGreaterThan(0);
    for (const [i, j] of [[3, 4], [10, 2], [20, 9]]) {
      expect(sst[4 * 768 + i * 32 + j]).toBeLessThan(1e19); // sea, not land
      expect(at(x0 + j * rep.scale + 1, y0 + i * rep.scale + 1)).toEqual(mapColour('inferno', err(i, j)));
    }
    expectCliError(await rfIn(['preview', rfz, '--var', 'sst', '--map', 'error', '--against', 'wrong.npy', '-o', 'x.png'], dir), /original 'wrong\.npy' is 24x30, but field 'sst' of '.*' is 6x24x32 \(one (snapshot|slice): 24x32\)/);
  });
});
