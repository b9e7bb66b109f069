/**
 * `rankfield show` and `rankfield check`: the facts shown agree with the
 * archive's bytes, check passes on a good archive, fails (exit 1, naming the
 * tile) on a damaged tile payload or an original that the archive does not
 * match, and refuses (exit 2) archives whose tail, header or index is damaged.
 */
import { readFileSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ArchiveBuilder, MemorySink, open } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { formatRaw } from '../../src/io/raw.js';
import { ensureBuilt, expectCliError, rfIn, tempDir, validRange, volcano } from './helpers.js';

const { dir, remove } = tempDir();
const vol = volcano();
const [ROWS, COLS] = vol.shape;
const path = (name: string) => join(dir, name);

beforeAll(async () => {
  ensureBuilt();
  writeFileSync(path('volcano.npy'), formatNpy({ data: vol.values, shape: [ROWS, COLS], dtype: 'f64' }));
  const r = await rfIn(['pack', 'volcano.npy', '-o', 'v.rfz', '--bound', 'rel:1e-3', '--tile', '32'], dir);
  expect(r.code, r.stderr).toBe(0);
});
afterAll(remove);

/** Copy v.rfz to `name` with one byte flipped at `offset` (negative: from the end). */
function damaged(name: string, offset: number): void {
  const bytes = new Uint8Array(readFileSync(path('v.rfz')));
  const at = offset < 0 ? bytes.length + offset : offset;
  bytes[at] ^= 0xff;
  writeFileSync(path(name), bytes);
}

describe('show', () => {
  it('prints the facts of each field as text', async () => {
    const r = await rfIn(['show', 'v.rfz'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/field 'volcano'/);
    expect(r.stdout).toMatch(/shape +61 x 87 f64; tiles 32 x 32 \(2 x 3 = 6 tiles\)/);
    expect(r.stdout).toMatch(/bound +rel:0\.001 -> pointwise limit E = 0\.101 /); // 1e-3 x (195 - 94): the volcano's height range
    expect(r.stdout).toMatch(/ratio \d+\.\d\d; \d+\.\d{3} bits per value/);
    expect(r.stdout).toMatch(/achieved +max error [0-9.e-]+, RMSE [0-9.e-]+/);
    expect(r.stdout).toMatch(/methods +/);
    expect(r.stdout).toMatch(/ranks +/);
  });

  it('--json gives the same facts, consistent with the file and the index', async () => {
    const r = await rfIn(['show', 'v.rfz', '--json'], dir);
    expect(r.code, r.stderr).toBe(0);
    const facts = JSON.parse(r.stdout);
    const bytes = new Uint8Array(readFileSync(path('v.rfz')));
    const archive = await open(bytes);
    const ix = (await archive.loadIndex()).fields[0];
    const payload = ix.length.reduce((a, b) => a + b, 0);
    const f = facts.fields[0];
    expect(facts.fileBytes).toBe(statSync(path('v.rfz')).size);
    expect(facts.rawBytes).toBe(ROWS * COLS * 8);
    expect(facts.ratio).toBeCloseTo((ROWS * COLS * 8) / bytes.length, 12);
    expect([f.name, f.shape, f.dtype, f.tile, f.tiles]).toEqual(['volcano', [61, 87], 'f64', [32, 32], 6]);
    const [lo, hi] = validRange(vol.values);
    expect([lo, hi]).toEqual([94, 195]); // the Maunga Whau heights span 94..195 m (from memory; also R's datasets::volcano)
    expect(f.bound).toMatchObject({ mode: 'rel', value: 1e-3, limits: 'pointwise', range: [94, 195] });
    expect(f.bound.tolerance).toBeCloseTo(1e-3 * (hi - lo), 12);
    expect(f.payloadBytes).toBe(payload);
    expect(f.ratio).toBeCloseTo((ROWS * COLS * 8) / payload, 12);
    expect(f.bitsPerValue).toBeCloseTo((payload * 8) / (ROWS * COLS), 12);
    expect(f.achieved).toEqual({ maxErr: ix.summary.max_err, rmse: ix.summary.rmse });
    const ranked = Object.values(f.rankHistogram as Record<string, number>).reduce((a, b) => a + b, 0);
    expect(ranked + f.exactTiles).toBe(6);
    expect(Object.values(f.methods as Record<string, number>).reduce((a, b) => a + b, 0)).toBe(6);
    for (const [rank, n] of Object.entries(f.rankHistogram as Record<string, number>)) {
      expect(ix.rank.filter((x, t) => ix.method[t] !== 0 && x === Number(rank))).toHaveLength(n);
    }
  });
});

describe('check', () => {
  it('passes on a good archive (exit 0), with and without the original', async () => {
    const a = await rfIn(['check', 'v.rfz'], dir);
    expect(a.code, a.stdout + a.stderr).toBe(0);
    expect(a.stdout).toMatch(/check passed/);
    const b = await rfIn(['check', 'v.rfz', '--against', 'volcano.npy'], dir);
    expect(b.code, b.stdout + b.stderr).toBe(0);
    expect(b.stdout).toMatch(/measured +max error .*; missing cells identical/);
    const j = JSON.parse((await rfIn(['check', 'v.rfz', '--against', 'volcano.npy', '--json'], dir)).stdout);
    expect(j.ok).toBe(true);
    expect(j.failures).toEqual([]);
    expect(j.fields[0].measured.maxErr).toBeLessThanOrEqual(j.fields[0].tolerance);
  });

  it('accepts a raw original, taking shape and dtype from the field unless given', async () => {
    writeFileSync(path('volcano.f64'), formatRaw({ data: vol.values, shape: [ROWS, COLS], dtype: 'f64' }));
    expect((await rfIn(['check', 'v.rfz', '--against', 'volcano.f64'], dir)).code).toBe(0);
    expect((await rfIn(['check', 'v.rfz', '--against', 'volcano.f64', '--shape', '61x87', '--dtype', 'f64'], dir)).code).toBe(0);
  });

  it('fails (exit 1) when the original differs from the archive beyond the bound, naming field and tile', async () => {
    const moved = Float64Array.from(vol.values);
    const [i, j] = [40, 70]; // tile row 1, tile column 2 of a 2 x 3 grid of 32 x 32 tiles: tile 5
    moved[i * COLS + j] += 1;
    writeFileSync(path('moved.npy'), formatNpy({ data: moved, shape: [ROWS, COLS], dtype: 'f64' }));
    const r = await rfIn(['check', 'v.rfz', '--against', 'moved.npy'], dir);
    expect(r.code).toBe(1);
    expect(r.stdout).toMatch(/FAIL field 'volcano' tile 5: measured max error [0-9.]+ exceeds the bound/);
    expect(r.stdout).toMatch(/check FAILED: 1 problem/);
    const json = JSON.parse((await rfIn(['check', 'v.rfz', '--against', 'moved.npy', '--json'], dir)).stdout);
    expect(json.ok).toBe(false);
    expect(json.failures.map((f: { field: string; tile: number }) => [f.field, f.tile])).toEqual([['volcano', 5]]);
  });

  it('refuses (exit 2) an original of the wrong shape or dtype', async () => {
    writeFileSync(path('small.npy'), formatNpy({ data: new Float64Array(12), shape: [3, 4], dtype: 'f64' }));
    expectCliError(await rfIn(['check', 'v.rfz', '--against', 'small.npy'], dir), /original 'small\.npy' has shape 3x4, but field 'volcano' of 'v\.rfz' has shape 61x87/);
    writeFileSync(path('v32.npy'), formatNpy({ data: Float32Array.from(vol.values), shape: [ROWS, COLS], dtype: 'f32' }));
    expectCliError(await rfIn(['check', 'v.rfz', '--against', 'v32.npy'], dir), /holds f32 values, but field 'volcano' of 'v\.rfz' is f64/);
    expectCliError(await rfIn(['check', 'v.rfz', '--against', 'volcano.f64', '--shape', '87x61'], dir), /original 'volcano\.f64' has shape 87x61/);
    expectCliError(await rfIn(['check', 'v.rfz', '--shape', '61x87'], dir), /--shape describe the original, which needs --against/);
  });

  it('a flipped byte in a tile payload is a check failure (exit 1) naming the tile; unpack refuses it (exit 2)', async () => {
    const archive = await open(new Uint8Array(readFileSync(path('v.rfz'))));
    const ix = (await archive.loadIndex()).fields[0];
    const t = 3;
    damaged('tile.rfz', ix.offset[t] + Math.floor(ix.length[t] / 2));
    const r = await rfIn(['check', 'tile.rfz'], dir);
    expect(r.code).toBe(1);
    expect(r.stdout).toMatch(new RegExp(`FAIL field 'volcano' tile ${t}: payload CRC-32 mismatch`));
    expectCliError(await rfIn(['unpack', 'tile.rfz', '-o', 'tile.npy'], dir), new RegExp(`field 'volcano' tile ${t}: payload CRC-32 mismatch`));
    expect((await rfIn(['show', 'tile.rfz'], dir)).code).toBe(0); // show reads only the header and index
  });

  it('a flipped byte in an index page is a check failure (exit 1) naming the page; show and unpack refuse it (exit 2)', async () => {
    const archive = await open(new Uint8Array(readFileSync(path('v.rfz'))));
    const d = archive.directory.fields[0];
    damaged('page.rfz', d.page_offset[0] + Math.floor(d.page_length[0] / 2));
    const r = await rfIn(['check', 'page.rfz'], dir);
    expect(r.code).toBe(1);
    expect(r.stdout).toMatch(/FAIL field 'volcano'.*index page 0 of field 'volcano' \(at offset \d+\): CRC-32 mismatch/);
    expectCliError(await rfIn(['unpack', 'page.rfz', '-o', 'page.npy'], dir), /index page 0 of field 'volcano' \(at offset \d+\): CRC-32 mismatch/);
    expectCliError(await rfIn(['show', 'page.rfz'], dir), /index page 0 of field 'volcano' \(at offset \d+\): CRC-32 mismatch/);
  });

  it('a flipped byte in the tail or the header is exit 2, for check, show and unpack', async () => {
    // Tail byte 10 is the required flags word (spec/FORMAT.md 3.5): it then disagrees with the prologue's.
    damaged('tail.rfz', -14);
    for (const cmd of [['check', 'tail.rfz'], ['show', 'tail.rfz'], ['unpack', 'tail.rfz', '-o', 'tail.npy']]) {
      expectCliError(await rfIn(cmd, dir), /tail\.rfz: tail says version 8 flags 255, prologue says 8 flags 0/);
    }
    // A length word of the tail, and a header byte: the tail's CRC over header, directory and tail fails.
    damaged('length.rfz', -24);
    expectCliError(await rfIn(['check', 'length.rfz'], dir), /length\.rfz: CRC-32 mismatch over the header, index directory and tail|length\.rfz: .*do not fit/);
    const bytes = new Uint8Array(readFileSync(path('v.rfz')));
    const view = new DataView(bytes.buffer, bytes.byteOffset + bytes.length - 24);
    const headerOffset = bytes.length - 24 - view.getUint32(0, true) - view.getUint32(4, true);
    damaged('header.rfz', headerOffset + 3);
    expectCliError(await rfIn(['check', 'header.rfz'], dir), /header\.rfz: CRC-32 mismatch over the header, index directory and tail/);
  });

  it('a truncated archive, a non-archive and an empty file are exit 2', async () => {
    const bytes = readFileSync(path('v.rfz'));
    writeFileSync(path('cut.rfz'), bytes.subarray(0, bytes.length - 10));
    expectCliError(await rfIn(['check', 'cut.rfz'], dir), /cut\.rfz: no archive tail at the end of the file \(truncated/);
    expectCliError(await rfIn(['check', 'volcano.npy'], dir), /volcano\.npy: not a rankfield archive/);
    writeFileSync(path('empty.rfz'), '');
    expectCliError(await rfIn(['check', 'empty.rfz'], dir), /'empty\.rfz' is empty \(0 bytes\)/);
    expectCliError(await rfIn(['check', 'missing.rfz'], dir), /cannot read 'missing\.rfz': no such file or directory/);
  });

  it('check --help documents the exit codes and the payload / tail distinction', async () => {
    const r = await rfIn(['check', '--help'], dir);
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/0 +every tile holds its bound/);
    expect(r.stdout).toMatch(/1 +the check failed/);
    expect(r.stdout).toMatch(/2 +unusable input/);
    expect(r.stdout).toMatch(/A damaged tile payload, or a damaged index page \(its tiles cannot be\s+located\), is a check failure \(exit 1\); damage to the tail,\s+header or index directory is exit 2/);
  });

  it('on a many-field archive, --field names the field the original belongs to', async () => {
    const sink = new MemorySink();
    const b = new ArchiveBuilder(sink);
    const small = Float64Array.from({ length: 10 * 12 }, (_, c) => Math.sin(c / 9));
    b.add(vol.values, [ROWS, COLS], { bound: 'abs:0.5', name: 'height', tile: 64 });
    b.add(small, [10, 12], { bound: 'abs:1e-3', name: 'wave', tile: 8 });
    b.finish();
    writeFileSync(path('two.rfz'), sink.bytes());
    writeFileSync(path('wave.npy'), formatNpy({ data: small, shape: [10, 12], dtype: 'f64' }));
    const s = JSON.parse((await rfIn(['show', 'two.rfz', '--json'], dir)).stdout);
    expect(s.fields.map((f: { name: string; tiles: number }) => [f.name, f.tiles])).toEqual([['height', 2], ['wave', 4]]); // 64 x 64 tiles over 61 x 87; 8 x 8 over 10 x 12
    expect(s.rawBytes).toBe((ROWS * COLS + 120) * 8);
    const ok = await rfIn(['check', 'two.rfz', '--against', 'wave.npy', '--field', 'wave'], dir);
    expect(ok.code, ok.stdout + ok.stderr).toBe(0);
    expect(ok.stdout).toMatch(/against 'wave\.npy' \(field 'wave'\)/);
    // Without --field the original is compared with the first field, whose shape differs.
    expectCliError(await rfIn(['check', 'two.rfz', '--against', 'wave.npy'], dir), /original 'wave\.npy' has shape 10x12, but field 'height' of 'two\.rfz' has shape 61x87/);
    expectCliError(await rfIn(['check', 'two.rfz', '--against', 'wave.npy', '--field', 'nope'], dir), /no field 'nope' in two\.rfz \(fields: height, wave\)/);
  });
});
