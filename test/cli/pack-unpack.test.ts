/**
 * `rankfield pack` and `rankfield unpack`: happy paths and the round trip
 * pack -> unpack -> compare, on the vega-datasets volcano grid, with the
 * bound definitions applied to the values read back from the files.
 */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { formatNpy, parseNpy } from '../../src/io/npy.js';
import { formatRaw, parseRaw } from '../../src/io/raw.js';
import { CLI_TIMEOUT, ensureBuilt, expectCliError, leftovers, maxAbsError, rfIn, rmsError, tempDir, validRange, volcano } from './helpers.js';

const { dir, remove } = tempDir();
const vol = volcano();
const [ROWS, COLS] = vol.shape;
/** The volcano as float32 with some cells missing: heights below 100 m as fill -999, a 3x4 block as NaN. */
const FILL = -999;
const masked = Float32Array.from(vol.values);
for (let i = 0; i < masked.length; i++) if (masked[i] < 100) masked[i] = FILL;
for (let i = 30; i < 33; i++) for (let j = 40; j < 44; j++) masked[i * COLS + j] = NaN;

beforeAll(async () => {
  ensureBuilt();
  writeFileSync(join(dir, 'volcano.npy'), formatNpy({ data: vol.values, shape: [ROWS, COLS], dtype: 'f64' }));
  writeFileSync(join(dir, 'masked.npy'), formatNpy({ data: masked, shape: [ROWS, COLS], dtype: 'f32' }));
  writeFileSync(join(dir, 'masked-be.f32'), formatRaw({ data: masked, shape: [ROWS, COLS], dtype: 'f32' }, 'big'));
});
afterAll(remove);

async function unpackNpy(archive: string, out: string, extra: string[] = []): Promise<ReturnType<typeof parseNpy>> {
  const r = await rfIn(['unpack', archive, '-o', out, ...extra], dir);
  expect(r.code, r.stderr).toBe(0);
  return parseNpy(readFileSync(join(dir, out)));
}

describe('pack', { timeout: CLI_TIMEOUT }, () => {
  // abs:2, not below half the integer spacing of the volcano's heights: a bound that small is met exactly by their
  // lattice (spec/FORMAT.md 19), and this test is about a lossy pack.
  it('packs a float64 .npy under abs:2 and the values read back hold the bound', async () => {
    const r = await rfIn(['pack', 'volcano.npy', '-o', 'v-abs.rfz', '--bound', 'abs:2'], dir);
    expect(r.code, r.stderr).toBe(0);
    const size = readFileSync(join(dir, 'v-abs.rfz')).length;
    // One summary line: bytes in (61 x 87 x 8), bytes out, ratio, achieved error vs the bound, time;
    // then indented details: the automatic choices (tile, threads), tile use and byte shares.
    const [first, ...details] = r.stdout.trimEnd().split('\n');
    expect(first).toMatch(/^packed 'volcano\.npy'/);
    expect(details.map((l) => l.split(' ')[2])).toEqual(['tile', 'threads', expect.any(String), 'bytes:']);
    expect(details[0]).toMatch(/^  tile \d+ x \d+ \(chosen automatically: /);
    expect(r.stdout).toContain(`${ROWS * COLS * 8} bytes in, ${size} bytes out, ratio ${((ROWS * COLS * 8) / size).toFixed(2)}`);
    expect(r.stdout).toMatch(/abs:2 \(pointwise limit E = 2\): max error [0-9.e-]+ \([01]\.\d{3} E\), RMSE [0-9.e-]+; \d+(\.\d+)? m?s/);
    const back = await unpackNpy('v-abs.rfz', 'v-abs.npy');
    expect(back.dtype).toBe('f64'); // output dtype = the field's dtype
    expect(back.shape).toEqual([ROWS, COLS]);
    // abs:E means |x - x'| <= E for every value (the definition of a pointwise absolute bound).
    expect(maxAbsError(vol.values, back.data)).toBeLessThanOrEqual(2);
    expect(maxAbsError(vol.values, back.data)).toBeGreaterThan(0); // lossy: something was discarded
    expect(leftovers(dir)).toEqual([]);
  });

  it('rel bound on float32 with fill and NaN: the bound holds and missing cells come back bit for bit', async () => {
    const r = await rfIn(['pack', 'masked.npy', '-o', 'm-rel.rfz', '--bound', 'rel:1e-3', '--fill', String(FILL), '--tile', '16x24'], dir);
    expect(r.code, r.stderr).toBe(0);
    const back = await unpackNpy('m-rel.rfz', 'm-rel.npy');
    expect(back.dtype).toBe('f32');
    const [lo, hi] = validRange(masked, FILL);
    // rel:R means |x - x'| <= R * (max - min) over the valid values (the bound as the pack help defines it).
    expect(maxAbsError(masked, back.data, FILL)).toBeLessThanOrEqual(1e-3 * (hi - lo));
    const a = new Uint32Array(masked.buffer);
    const b = new Uint32Array(back.data.buffer, back.data.byteOffset, back.data.length);
    for (let i = 0; i < masked.length; i++) if (!Number.isFinite(masked[i]) || masked[i] === FILL) expect(b[i]).toBe(a[i]);
  });

  it('rmse and psnr bounds hold on the values read back', async () => {
    expect((await rfIn(['pack', 'volcano.npy', '-o', 'v-rmse.rfz', '--bound', 'rmse:0.25'], dir)).code).toBe(0);
    expect(rmsError(vol.values, (await unpackNpy('v-rmse.rfz', 'v-rmse.npy')).data)).toBeLessThanOrEqual(0.25);
    const r = await rfIn(['pack', 'volcano.npy', '-o', 'v-psnr.rfz', '--bound', 'psnr:55'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/psnr:55 \(RMSE limit E = [0-9.e-]+\): RMSE /);
    const [lo, hi] = validRange(vol.values);
    // PSNR = 20 log10(peak-to-peak range / RMSE) dB (common definition with the range as peak, from memory).
    const psnr = 20 * Math.log10((hi - lo) / rmsError(vol.values, (await unpackNpy('v-psnr.rfz', 'v-psnr.npy')).data));
    expect(psnr).toBeGreaterThanOrEqual(55);
  });

  it('reads raw big-endian input with --shape/--dtype/--endian, and unpacks raw little-endian', async () => {
    const r = await rfIn(['pack', 'masked-be.f32', '-o', 'm-raw.rfz', '--bound', 'abs:0.1', '--fill', '-999', '--shape', `${ROWS}x${COLS}`, '--dtype', 'f32', '--endian', 'big'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toContain("field 'masked-be'"); // default name: IN without its extension
    const u = await rfIn(['unpack', 'm-raw.rfz', '-o', 'm-raw.raw'], dir);
    expect(u.code, u.stderr).toBe(0);
    const bytes = readFileSync(join(dir, 'm-raw.raw'));
    expect(bytes.length).toBe(ROWS * COLS * 4);
    const back = parseRaw(bytes, [ROWS, COLS], 'f32', 'little');
    expect(maxAbsError(masked, back.data, FILL)).toBeLessThanOrEqual(0.1);
  });

  it('--tile takes one number for square tiles, and --name names the field', async () => {
    const r = await rfIn(['pack', 'volcano.npy', '-o', 'v-t20.rfz', '--bound', 'abs:1', '--tile', '20', '--name', 'height'], dir);
    expect(r.code, r.stderr).toBe(0);
    const s = await rfIn(['show', 'v-t20.rfz', '--json'], dir);
    const f = JSON.parse(s.stdout).fields[0];
    expect([f.name, f.tile, f.tiles]).toEqual(['height', [20, 20], Math.ceil(61 / 20) * Math.ceil(87 / 20)]);
  });

  it('refuses an existing output without --force and leaves it untouched; --force replaces it', async () => {
    writeFileSync(join(dir, 'taken.rfz'), 'precious');
    const r = await rfIn(['pack', 'volcano.npy', '-o', 'taken.rfz', '--bound', 'abs:1'], dir);
    expectCliError(r, /output 'taken\.rfz' already exists; use --force to overwrite it/);
    expect(readFileSync(join(dir, 'taken.rfz'), 'utf8')).toBe('precious');
    const f = await rfIn(['pack', 'volcano.npy', '-o', 'taken.rfz', '--bound', 'abs:1', '--force'], dir);
    expect(f.code, f.stderr).toBe(0);
    expect((await rfIn(['check', 'taken.rfz'], dir)).code).toBe(0);
  });

  it('pack --help says that packing is lossy, to keep originals until check --against passes, and to follow retention rules', async () => {
    const r = await rfIn(['pack', '--help'], dir);
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/LOSSY/);
    expect(r.stdout).toMatch(/discards\s+information/);
    expect(r.stdout).toMatch(/Keep the original files until\s+rankfield check OUT\.rfz --against IN\s+passes/);
    expect(r.stdout).toMatch(/institution's data-retention rules/);
  });
});

describe('unpack', { timeout: CLI_TIMEOUT }, () => {
  beforeAll(async () => {
    expect((await rfIn(['pack', 'volcano.npy', '-o', 'u.rfz', '--bound', 'abs:0.5'], dir)).code).toBe(0);
  });

  it('prints a summary and writes the field', async () => {
    const r = await rfIn(['unpack', 'u.rfz', '-o', 'u.npy'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/^unpacked field 'volcano' \(61x87 f64\) from 'u\.rfz' -> 'u\.npy' \(\.npy, \d+ bytes\)/);
  });

  it('--field chooses a field; an unknown one is refused with the list of fields', async () => {
    expect((await rfIn(['unpack', 'u.rfz', '-o', 'u2.npy', '--field', 'volcano'], dir)).code).toBe(0);
    expectCliError(await rfIn(['unpack', 'u.rfz', '-o', 'u3.npy', '--field', 'nope'], dir), /no field 'nope' in u\.rfz \(fields: volcano\)/);
    expect(existsSync(join(dir, 'u3.npy'))).toBe(false);
  });

  it('refuses an existing output without --force', async () => {
    writeFileSync(join(dir, 'u4.npy'), 'keep');
    expectCliError(await rfIn(['unpack', 'u.rfz', '-o', 'u4.npy'], dir), /output 'u4\.npy' already exists; use --force/);
    expect(readFileSync(join(dir, 'u4.npy'), 'utf8')).toBe('keep');
  });

  it('refuses --endian for .npy output', async () => {
    expectCliError(await rfIn(['unpack', 'u.rfz', '-o', 'u5.npy', '--endian', 'big'], dir), /--endian applies to raw output/);
  });
});
