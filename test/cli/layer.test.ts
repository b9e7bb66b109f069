/**
 * What users see of a field layer (spec/FORMAT.md 6.2.2) on the command
 * line: `show` names the layer and marks its factor fields, `check` checks
 * them and the field through them (also against the original), `unpack`
 * writes the field, not its factors, unless one is named. The archive is
 * made by test/format/layered.ts, its factor fields listed first.
 */
import { mkdirSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open } from '../../src/index.js';
import { formatNpy, parseNpy } from '../../src/io/npy.js';
import { layeredArchive, smoothFactors, type Layered } from '../format/layered.js';
import { ensureBuilt, rfIn, tempDir } from './helpers.js';

const { dir, remove } = tempDir();
const path = (name: string) => join(dir, name);
const SHAPE = [2, 24, 40];
let made: Layered;
let values: Float64Array;

beforeAll(() => {
  ensureBuilt();
  const { left, right } = smoothFactors(48, 40, 2);
  values = new Float64Array(48 * 40);
  for (let i = 0; i < 48; i++) for (let j = 0; j < 40; j++) values[i * 40 + j] = left[2 * i] * right[2 * j] + left[2 * i + 1] * right[2 * j + 1] + 0.01 * Math.sin(i + j);
  made = layeredArchive({ values, shape: [24, 40], slices: 2, tile: [8, 10], tol: 1e-3, rank: 2, left, right, factors: 'before', name: 'sea' });
  writeFileSync(path('l.rfz'), made.bytes);
  writeFileSync(path('orig.npy'), formatNpy({ data: values, shape: SHAPE, dtype: 'f64' }));
});
afterAll(remove);

describe('a layered archive on the command line', () => {
  it('show names the layer and marks the factor fields', async () => {
    const r = await rfIn(['show', 'l.rfz'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/for 1 field \(/);
    expect(r.stdout).toMatch(/layer +rank 2 over the whole field, added to every low-rank tile: left factor 'sea\.left', right factor 'sea\.right'/);
    expect(r.stdout).toMatch(/factor +the left factor of the layer of field 'sea': read with that field, unpacked only when named/);
    expect(r.stdout).toMatch(/sea\.right: .* \(right factor of the layer of 'sea', counted there\)/);
    const j = JSON.parse((await rfIn(['show', 'l.rfz', '--json'], dir)).stdout);
    const a = await open(made.bytes);
    const ix = await a.loadIndex();
    const bytes = (i: number) => ix.fields[i].length.reduce((x, y) => x + y, 0);
    expect(j.fields[2].layer).toEqual({ rank: 2, left: 'sea.left', right: 'sea.right', bytes: bytes(0) + bytes(1) });
    expect(j.fields[0].factorOf).toEqual({ field: 'sea', side: 'left' });
    // The field's ratio counts its layer's bytes; the archive's raw bytes are the field's alone.
    expect(j.fields[2].ratio).toBeCloseTo((48 * 40 * 8) / (bytes(0) + bytes(1) + bytes(2)), 12);
    expect(j.rawBytes).toBe(48 * 40 * 8);
  });

  it('check passes, alone and against the original', async () => {
    const r = await rfIn(['check', 'l.rfz'], dir);
    expect(r.code, r.stdout + r.stderr).toBe(0);
    expect(r.stdout).toMatch(/field 'sea\.left': .*; the left factor of the layer of field 'sea'/);
    expect(r.stdout).toMatch(/field 'sea': .*; a rank-2 layer, its factors checked as fields and through every low-rank tile/);
    const w = await rfIn(['check', 'l.rfz', '--against', 'orig.npy'], dir);
    expect(w.code, w.stdout + w.stderr).toBe(0);
    expect(w.stdout).toMatch(/against 'orig\.npy' \(field 'sea'\)/);
  });

  it('check fails (exit 1) when a factor tile is damaged, naming the factor field and the layered field', async () => {
    const a = await open(made.bytes);
    const e = await a.tileEntry('sea.right', 1);
    const bad = made.bytes.slice();
    bad[e.offset + 2] ^= 0x55;
    writeFileSync(path('bad.rfz'), bad);
    const r = await rfIn(['check', 'bad.rfz'], dir);
    expect(r.code).toBe(1);
    expect(r.stdout).toMatch(/FAIL field 'sea\.right' tile 1: payload CRC-32 mismatch/);
    expect(r.stdout).toMatch(/FAIL field 'sea' \(whole field\): layer factors of tiles 0 to 23: .*field 'sea': reading rows 0 to 39 of its layer's right factor: field 'sea\.right' tile 1: payload CRC-32 mismatch/);
  });

  it('unpack writes the field, not its factors; a factor field is written when named', async () => {
    const r = await rfIn(['unpack', 'l.rfz', '-o', 'sea.npy'], dir);
    expect(r.code, r.stderr).toBe(0);
    const got = parseNpy(readFileSync(path('sea.npy')));
    expect(got.shape).toEqual(SHAPE);
    expect(Buffer.from((got.data as Float64Array).buffer).equals(Buffer.from(made.decoded.buffer))).toBe(true);
    mkdirSync(path('all'));
    const f = await rfIn(['unpack', 'l.rfz', '-o', 'all/'], dir);
    expect(f.code, f.stderr).toBe(0);
    expect(readdirSync(path('all'))).toEqual(['sea.npy']);
    const l = await rfIn(['unpack', 'l.rfz', '--var', 'sea.left', '-o', 'left.npy'], dir);
    expect(l.code, l.stderr).toBe(0);
    const left = parseNpy(readFileSync(path('left.npy')));
    expect(left.shape).toEqual([48, 2]);
    expect(Array.from(left.data)).toEqual(Array.from(made.left));
    const nc = await rfIn(['unpack', 'l.rfz', '-o', 'sea.nc', '--json'], dir);
    expect(nc.code, nc.stderr).toBe(0);
    expect(JSON.parse(nc.stdout).files[0].fields).toEqual(['sea']);
    // That NetCDF file holds the decoded field: check against it compares the one main field (its factor fields have no variable there).
    const c = await rfIn(['check', 'l.rfz', '--against', 'sea.nc'], dir);
    expect(c.code, c.stdout + c.stderr).toBe(0);
    expect(c.stdout).toMatch(/against 'sea\.nc' \(field 'sea'\)/);
    expect(c.stdout).toMatch(/measured +max error 0,/);
  });

  it('preview draws the field by default', async () => {
    const r = await rfIn(['preview', 'l.rfz', '-o', 'sea.png', '--json'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(JSON.stringify(JSON.parse(r.stdout))).toMatch(/"sea"/);
    // PNG signature (ISO/IEC 15948, from memory).
    expect(Array.from(readFileSync(path('sea.png')).subarray(0, 8))).toEqual([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]);
  });
});
