/**
 * `rankfield preview` and `rankfield trial` on the Maunga Whau volcano grid
 * of vega-datasets: the pictures decode (fast-png) to the size reported, the
 * value map shows each cell in the colour of its decoded value, the error map
 * stays within 1 under an abs bound (the bound's definition), and the trial's
 * figures agree with a pack of the same sample.
 */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { decode } from 'fast-png';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open, pack } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { mapColour } from '../../src/picture/colormap.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, ROOT, rfIn, tempDir, volcano } from './helpers.js';

const { dir, remove } = tempDir();
const vol = volcano();
const COLS = vol.shape[1];

beforeAll(async () => {
  ensureBuilt();
  writeFileSync(join(dir, 'volcano.npy'), formatNpy({ data: vol.values, shape: vol.shape, dtype: 'f64' }));
  const r = await rfIn(['pack', 'volcano.npy', '-o', 'v.rfz', '--bound', 'abs:0.5', '--tile', '16'], dir);
  expect(r.code, r.stderr).toBe(0);
});
afterAll(remove);

/** The decoded PNG at `name` in the test folder. */
function png(name: string): { width: number; height: number; at: (x: number, y: number) => number[] } {
  const p = decode(readFileSync(join(dir, name)));
  expect(p.channels).toBe(3);
  const data = p.data as Uint8Array;
  return { width: p.width, height: p.height, at: (x, y) => Array.from(data.subarray((y * p.width + x) * 3, (y * p.width + x) * 3 + 3)) };
}

/** The top-left pixel of the picture's first cell, found by its colour just right of the black frame. */
function topLeft(p: ReturnType<typeof png>, first: number[]): [number, number] {
  for (let y = 0; y < p.height; y++) for (let x = 1; x < p.width / 2; x++) if (p.at(x, y).every((c, k) => c === first[k]) && p.at(x - 1, y).join() === '0,0,0') return [x, y];
  throw new Error('no cell of the first colour beside the frame');
}

describe('preview', { timeout: CLI_TIMEOUT }, () => {
  it('value map: each cell in the colour of its decoded value on the field\'s valid range', async () => {
    const r = await rfIn(['preview', 'v.rfz', '-o', 'value.png', '--json'], dir);
    expect(r.code, r.stderr).toBe(0);
    const rep = JSON.parse(r.stdout);
    const p = png('value.png');
    expect([p.width, p.height]).toEqual([rep.width, rep.height]);
    // 87 columns fit 384 pixels 4 times: each cell is drawn 4 x 4.
    expect([rep.block, rep.scale, rep.colourMap]).toEqual([1, 4, 'viridis']);
    // The Maunga Whau heights span 94..195 m (from memory; also R's datasets::volcano): the scale of the bar.
    expect(rep.scaleRange).toEqual([94, 195]);
    const back = (await open(readFileSync(join(dir, 'v.rfz')))).read();
    const values = (await back).values;
    const [x0, y0] = topLeft(p, mapColour('viridis', (values[0] - 94) / 101));
    for (const [i, j] of [[0, 0], [30, 40], [60, 86], [12, 70]]) {
      expect(p.at(x0 + j * 4 + 2, y0 + i * 4 + 2)).toEqual(mapColour('viridis', (values[i * COLS + j] - 94) / 101));
    }
  });

  it('error map: needs the original, and stays within 1 under an abs bound; rank map of a region', async () => {
    expectCliError(await rfIn(['preview', 'v.rfz', '-o', 'e.png', '--map', 'error'], dir), /--map error needs --against ORIGINAL/);
    const e = await rfIn(['preview', 'v.rfz', '-o', 'e.png', '--map', 'error', '--against', 'volcano.npy', '--json'], dir);
    expect(e.code, e.stderr).toBe(0);
    const rep = JSON.parse(e.stdout);
    expect(rep.colourMap).toBe('inferno');
    // abs:0.5 means |decoded - original| <= E = 0.5 for every value, so the error scale is [0, 1].
    expect(rep.scaleRange).toEqual([0, 1]);
    const rank = await rfIn(['preview', 'v.rfz', '-o', 'r.png', '--map', 'rank', '--region', '0:32,16:', '--json'], dir);
    expect(rank.code, rank.stderr).toBe(0);
    expect(JSON.parse(rank.stdout).window).toEqual({ slice: 0, rows: [0, 32], cols: [16, COLS] });
    expect(png('r.png').width).toBeGreaterThan(0);
  });

  it('a field stored as a matrix (time x space) is drawn one snapshot at a time over its last two axes', async () => {
    const nc = join(ROOT, 'test', 'fixtures', 'netcdf', 'corvane-run-classic.nc');
    expect((await rfIn(['pack', nc, '-o', 'nc.rfz', '--bound', 'rel:1e-3', '--matrix', 'time:space'], dir)).code).toBe(0);
    const r = await rfIn(['preview', 'nc.rfz', '--var', 'sst', '--slice', '2', '-o', 'snap.png', '--json'], dir);
    expect(r.code, r.stderr).toBe(0);
    const rep = JSON.parse(r.stdout);
    expect(rep.window).toEqual({ slice: 2, rows: [0, 24], cols: [0, 32] }); // sst is (time 6, lat 24, lon 32) in the fixture
    const field = await (await open(readFileSync(join(dir, 'nc.rfz')))).read('sst');
    expect(field.shape).toEqual([6, 24, 32]);
    const [lo, hi] = rep.scaleRange;
    const at = (i: number, j: number) => field.values[2 * 768 + i * 32 + j];
    const p = png('snap.png');
    const [x0, y0] = topLeft(p, mapColour('viridis', (at(0, 0) - lo) / (hi - lo)));
    // Cells in the west of the basin, all sea (land, the fill value 1e20, lies east).
    for (const [i, j] of [[3, 4], [10, 2], [20, 9]]) {
      expect(at(i, j)).toBeLessThan(1e30);
      expect(p.at(x0 + j * rep.scale + 1, y0 + i * rep.scale + 1)).toEqual(mapColour('viridis', (at(i, j) - lo) / (hi - lo)));
    }
    expectCliError(await rfIn(['preview', 'nc.rfz', '--var', 'sst', '--slice', '6', '-o', 'x.png'], dir), /field 'sst' has snapshots 0\.\.5, not 6/);
  });

  it('large fields are drawn in blocks: --size 20 gives one picture cell per 5 x 5 cells', async () => {
    const r = await rfIn(['preview', 'v.rfz', '-o', 'small.png', '--size', '20', '--json'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(JSON.parse(r.stdout).block).toBe(5); // ceil(87 / 20)
  });

  it('refuses bad requests with one line and exit 2, writing nothing', async () => {
    expectCliError(await rfIn(['preview', 'v.rfz', '-o', 'x.jpg'], dir), /name it with \.png/);
    expectCliError(await rfIn(['preview', 'v.rfz', '-o', 'x.png', '--map', 'heat'], dir), /map must be value, error or rank, got 'heat'/);
    expectCliError(await rfIn(['preview', 'v.rfz', '-o', 'x.png', '--slice', '2'], dir), /plain 2-D field: it has no slices/);
    expectCliError(await rfIn(['preview', 'v.rfz', '-o', 'x.png', '--region', '0:10,80:99'], dir), /has 87 columns; the region's columns 80:99 lie outside it/);
    expectCliError(await rfIn(['preview', 'v.rfz', '-o', 'x.png', '--against', 'volcano.npy'], dir), /--against, --dtype and --endian apply to --map error/);
    expectCliError(await rfIn(['preview', 'v.rfz', '-o', 'value.png'], dir), /already exists/);
    expect(existsSync(join(dir, 'x.png'))).toBe(false);
  });
});

describe('trial', { timeout: CLI_TIMEOUT }, () => {
  it('reports per bound the figures of a pack of the central sample, and writes error pictures', async () => {
    const r = await rfIn(['trial', 'volcano.npy', '--sample', '32', '--bounds', 'abs:1,rel:1e-2,psnr:45', '--tile', '16', '--pictures', '.', '--json'], dir);
    expect(r.code, r.stderr).toBe(0);
    const t = JSON.parse(r.stdout);
    expect(t.sample).toEqual({ slice: null, rows: [14, 46], cols: [27, 59], shape: [32, 32], rawBytes: 32 * 32 * 8 }); // centred: (61 - 32) / 2, (87 - 32) / 2, rounded down
    expect(t.range).toEqual([94, 195]); // the whole field's range, from memory (R's datasets::volcano)
    const sample = new Float64Array(32 * 32);
    for (let i = 0; i < 32; i++) sample.set(vol.values.subarray((14 + i) * COLS + 27, (14 + i) * COLS + 59), i * 32);
    const [abs, rel, psnr] = t.bounds;
    // rel:R resolves to E = R x (max - min) of the whole field; psnr:D to RMSE limit (max - min) / 10^(D/20).
    expect(rel.tolerance).toBeCloseTo(1.01, 12);
    expect(psnr.tolerance).toBeCloseTo(101 / 10 ** (45 / 20), 12);
    for (const [row, e] of [[abs, 1], [rel, 1.01]]) expect(row.maxErr).toBeLessThanOrEqual(e); // pointwise bounds hold for every value
    expect(psnr.rmse).toBeLessThanOrEqual(psnr.tolerance);
    expect(psnr.psnr).toBeCloseTo(20 * Math.log10(101 / psnr.rmse), 9); // PSNR = 20 log10(range / RMSE)
    // The same pack of the same sample gives the same bytes.
    const same = pack(sample, [32, 32], { bound: 'abs:1', tile: 16, name: 'sample' });
    expect(abs.bytes).toBe(same.length);
    expect(abs.ratio).toBeCloseTo((32 * 32 * 8) / same.length, 12);
    expect(abs.bitsPerValue).toBeCloseTo((same.length * 8) / (32 * 32), 12);
    expect(abs.tiles.tiles).toBe(4);
    const shares = abs.shares;
    expect(shares.factors + shares.residual + shares.exact + shares.tileHeaders).toBeLessThan(same.length);
    for (const row of t.bounds) expect(png(row.picture).width).toBeGreaterThan(0);
    expect(t.bounds.map((b: { picture: string }) => b.picture)).toEqual(['trial-abs-1.png', 'trial-rel-0.01.png', 'trial-psnr-45.png']);
  });

  it('refuses bad bounds, a broken NetCDF file and tiny samples with one line and exit 2', async () => {
    expectCliError(await rfIn(['trial', 'volcano.npy', '--bounds', 'abs:1,,rel:2'], dir), /comma-separated list/);
    expectCliError(await rfIn(['trial', 'volcano.npy', '--bounds', 'abs:inf'], dir), /got infinity/);
    expectCliError(await rfIn(['trial', 'volcano.npy', '--sample', '4'], dir), /sample must be an integer from 8 to 4096/);
    writeFileSync(join(dir, 'x.nc'), new Uint8Array(8));
    expectCliError(await rfIn(['trial', 'x.nc'], dir), /x\.nc/); // named .nc, read as NetCDF, and refused as not one
  });
});
