/**
 * `pack --layer`: a field layer from the command line, its refusals (bad
 * ranks, runs made in parts), and what pack says about it. Field: the
 * vega-datasets volcano grid (data/volcano.json, 61 x 87 heights in metres).
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { formatNpy } from '../../src/io/npy.js';
import { expectCliError, leftovers, rfIn, tempDir, volcano } from './helpers.js';

const { dir, remove } = tempDir();
beforeAll(() => {
  const v = volcano();
  writeFileSync(join(dir, 'volcano.npy'), formatNpy({ data: v.values, shape: v.shape, dtype: 'f64' }));
});
afterAll(remove);

describe('pack --layer', () => {
  it('packs a rank-2 layer: two factor fields before the field, and one line naming them', async () => {
    const r = await rfIn(['pack', 'volcano.npy', '-o', 'v.rfz', '--bound', 'abs:0.5', '--tile', '16', '--layer', '2'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/layer of volcano: rank 2, factors in fields volcano\.layer-rows and volcano\.layer-cols/);
    const a = await open(new Uint8Array(readFileSync(join(dir, 'v.rfz'))));
    expect(a.header.fields.map((f) => f.name)).toEqual(['volcano.layer-rows', 'volcano.layer-cols', 'volcano']);
    expect(a.header.fields[2].layer).toEqual({ rank: 2, left: 0, right: 1 });
    await a.close();
  });

  it.each(['0', '-1', '1.5', '65', 'some'])('refuses --layer %s in one line, exit 2, no output file', async (k) => {
    expectCliError(await rfIn(['pack', 'volcano.npy', '-o', 'bad.rfz', '--bound', 'abs:0.5', '--layer', k], dir), /layer must be auto, off or a rank from 1 to 64/);
    expect(leftovers(dir)).toEqual([]);
  });

  it('refuses a rank above the smaller side of the field (the library names the range)', async () => {
    expectCliError(await rfIn(['pack', 'volcano.npy', '-o', 'bad.rfz', '--bound', 'abs:0.5', '--tile', '16', '--layer', '62'], dir), /layer must be 'auto', 'off' or a rank, an integer in 1\.\.61 for a 61x87 field/);
  });

  it('runs in parts refuse a rank, and take auto as off with one line', async () => {
    expectCliError(await rfIn(['plan', 'volcano.npy', '-o', 'p.json', '--bound', 'abs:0.5', '--layer', '2'], dir), /--layer 2: runs packed in parts .* take no field layer/);
    const plan = await rfIn(['plan', 'volcano.npy', '-o', 'p.json', '--bound', 'abs:0.5', '--tile', '16', '--layer', 'auto'], dir);
    expect(plan.code, plan.stderr).toBe(0);
    expect(plan.stderr).toMatch(/--layer auto: runs packed in parts take no field layer; packing without one/);
    expectCliError(await rfIn(['pack', 'volcano.npy', '-o', 'part.rfz', '--plan', 'p.json', '--part', '1/2', '--layer', '3'], dir), /--layer 3: runs packed in parts/);
  });
});

describe('pack --layer auto keeping no layer', () => {
  it('writes the same bytes as --layer off: required flag bit 1 only once a layer is kept (the output file is patched, spec/FORMAT.md section 4)', async () => {
    // One 61 x 87 tile: auto tries nothing, so the archive must be the one without a layer, flags included.
    const auto = await rfIn(['pack', 'volcano.npy', '-o', 'auto.rfz', '--bound', 'abs:0.5', '--layer', 'auto'], dir);
    expect(auto.code, auto.stderr).toBe(0);
    const off = await rfIn(['pack', 'volcano.npy', '-o', 'off.rfz', '--bound', 'abs:0.5', '--layer', 'off'], dir);
    expect(off.code, off.stderr).toBe(0);
    const a = readFileSync(join(dir, 'auto.rfz'));
    expect(a.equals(readFileSync(join(dir, 'off.rfz')))).toBe(true);
    expect(a.readUInt16LE(10) & 2).toBe(0);
  });

  it('a kept layer sets bit 1 in the prologue and the tail of the written file', async () => {
    const r = await rfIn(['pack', 'volcano.npy', '-o', 'k.rfz', '--bound', 'abs:0.5', '--tile', '16', '--layer', '2'], dir);
    expect(r.code, r.stderr).toBe(0);
    const b = readFileSync(join(dir, 'k.rfz'));
    expect(b.readUInt16LE(10) & 2).toBe(2);
    expect(b.readUInt16LE(b.length - 24 + 10) & 2).toBe(2);
  });
});
