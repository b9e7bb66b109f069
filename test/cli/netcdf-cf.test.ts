/**
 * CF fidelity of a NetCDF round trip (pack, then unpack -o OUT.nc / .npy):
 * _FillValue and missing_value cells each come back as themselves with both
 * attributes kept (CF conventions 1.x section 2.5.1 "Missing data", from
 * memory); a variable packed as short with scale_factor / add_offset comes
 * back as short with its attributes (CF section 8.1 "Packed data", from
 * memory), the bound applying to the physical values; and the written
 * file's history gains a line saying the values come from a lossy archive
 * (NetCDF Users Guide, attribute conventions, history; from memory).
 * Files made by Debian's ncgen from CDL; data: vega-datasets
 * data/volcano.json (61 x 87 integer heights in metres, 94..195), read back
 * with netcdfjs 4.0.0 and ncdump.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { NetCDFReader } from 'netcdfjs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open, restoreMissing } from '../../src/index.js';
import { parseNpy } from '../../src/io/npy.js';
import { cdlValues, haveNetcdfBin, ncdumpHeader, ncgen } from '../cdl.js';
import { CLI_TIMEOUT, ensureBuilt, rfIn, tempDir, volcano } from './helpers.js';

const RUN = haveNetcdfBin('the CF round-trip tests');
const g = volcano();
const N = g.values.length;
/** Cells 0..99 hold _FillValue, 100..149 missing_value (of each variable). */
const FILL_CELLS = 100;
const MISS_CELLS = 50;
const role = (i: number) => (i < FILL_CELLS ? 'fill' : i < FILL_CELLS + MISS_CELLS ? 'missing' : 'valid');
/** height as short: stored = (h - 100) / 0.01, exact for integer heights. */
const stored = Array.from(g.values, (h, i) => (role(i) === 'fill' ? -32767 : role(i) === 'missing' ? -32000 : Math.round((h - 100) * 100)));
const floats = Array.from(g.values, (h, i) => (role(i) === 'fill' ? -999 : role(i) === 'missing' ? -888 : h + 0.25));
const CDL = `netcdf volcano {
dimensions:
  y = 61 ;
  x = 87 ;
variables:
  short height(y, x) ;
    height:units = "m" ;
    height:scale_factor = 0.01f ;
    height:add_offset = 100.f ;
    height:_FillValue = -32767s ;
    height:missing_value = -32000s ;
  float level(y, x) ;
    level:units = "m" ;
    level:_FillValue = -999.f ;
    level:missing_value = -888.f ;
// global attributes:
    :history = "made with ncgen from CDL" ;
data:
  height = ${cdlValues(stored)} ;
  level = ${cdlValues(floats)} ;
}
`;

let t: ReturnType<typeof tempDir>;
beforeAll(async () => {
  ensureBuilt();
  t = tempDir('rankfield-cf-');
  if (RUN) ncgen(CDL, join(t.dir, 'volcano.nc'));
});
afterAll(() => t?.remove());

/** netcdfjs 4.0.0 declares `attributes` as `[]`; at run time they are its Attribute objects. */
type Attr = { name: string; type: string; value: unknown };
const attributes = (r: NetCDFReader, name: string) => r.variables.find((v) => v.name === name)!.attributes as unknown as Attr[];

describe.skipIf(!RUN)('CF round trip of an ncgen file', { timeout: CLI_TIMEOUT }, () => {
  it('under a bound below half the packing step, the stored shorts come back exactly, and every missing cell as itself', async () => {
    // abs:0.004 < scale_factor / 2 = 0.005: rounding the decoded physical value gives the stored integer back.
    const p = await rfIn(['pack', 'volcano.nc', '-o', 'v.rfz', '--bound', 'abs:0.004'], t.dir);
    expect(p.code, p.stderr).toBe(0);
    // Bytes in as stored: 5307 shorts (2 bytes) and 5307 floats (4 bytes).
    expect(p.stdout).toMatch(new RegExp(`: ${N * 2 + N * 4} bytes in,`));
    // show counts the same: per field the stored bytes, against which its ratio is taken.
    const shown = JSON.parse((await rfIn(['show', 'v.rfz', '--json'], t.dir)).stdout) as { rawBytes: number; fields: { name: string; rawBytes: number; payloadBytes: number; ratio: number }[] };
    expect(shown.fields.map((f) => [f.name, f.rawBytes])).toEqual([['height', N * 2], ['level', N * 4]]);
    expect(shown.rawBytes).toBe(N * 6);
    for (const f of shown.fields) expect(f.ratio).toBe(f.rawBytes / f.payloadBytes);
    const u = await rfIn(['unpack', 'v.rfz', '-o', 'back.nc'], t.dir);
    expect(u.code, u.stderr).toBe(0);
    const a = new NetCDFReader(readFileSync(join(t.dir, 'volcano.nc')));
    const b = new NetCDFReader(readFileSync(join(t.dir, 'back.nc')));
    expect(b.variables.find((v) => v.name === 'height')!.type).toBe('short');
    for (const v of ['height', 'level']) expect(attributes(b, v)).toEqual(attributes(a, v));
    expect(b.getDataVariable('height')).toEqual(a.getDataVariable('height'));
    const level = b.getDataVariable('level') as number[];
    for (let i = 0; i < N; i++) {
      if (role(i) === 'fill') expect(level[i]).toBe(-999);
      else if (role(i) === 'missing') expect(level[i]).toBe(-888);
      else expect(Math.abs(level[i] - floats[i])).toBeLessThanOrEqual(0.004);
    }
  });

  it('under a looser bound, each short is within the bound plus half a step of the physical value', async () => {
    expect((await rfIn(['pack', 'volcano.nc', '-o', 'w.rfz', '--bound', 'abs:0.5', '--var', 'height'], t.dir)).code).toBe(0);
    expect((await rfIn(['unpack', 'w.rfz', '-o', 'wide.nc'], t.dir)).code).toBe(0);
    const b = new NetCDFReader(readFileSync(join(t.dir, 'wide.nc')));
    const back = b.getDataVariable('height') as number[];
    let changed = 0;
    for (let i = 0; i < N; i++) {
      if (role(i) !== 'valid') expect(back[i]).toBe(stored[i]);
      else {
        // Physical = stored * 0.01 + 100 (CF 8.1); bound 0.5 plus half a step 0.005.
        expect(Math.abs(back[i] * 0.01 - stored[i] * 0.01)).toBeLessThanOrEqual(0.5 + 0.005 + 1e-9);
        if (back[i] !== stored[i]) changed++;
      }
    }
    expect(changed).toBeGreaterThan(0);
  });

  it('the .nc written back notes in history that its values come from a lossy archive', async () => {
    const h = ncdumpHeader(join(t.dir, 'back.nc'));
    expect(h).toMatch(/:history = "made with ncgen from CDL\\n",?\s*"?\d{4}-\d\d-\d\dT[0-9:]+Z rankfield \S+ unpack: values decoded from a lossy archive \(height abs:0\.004, level abs:0\.004\)/);
  });

  it('in the library, read() gives the missing_value cells as a NaN mark and restoreMissing puts the value back, bit for bit; on a window too', async () => {
    const a = await open(join(t.dir, 'v.rfz'));
    try {
      const h = a.field('level').header;
      const read = await a.read('level');
      const bits = new Uint32Array(read.values.buffer, read.values.byteOffset, read.values.length);
      // Before: the mark, a quiet NaN (binary32 exponent all ones, top fraction bit set; IEEE 754-2008 section 6.2.1).
      for (let i = FILL_CELLS; i < FILL_CELLS + MISS_CELLS; i++) expect(Number.isNaN(read.values[i]) && (bits[i] & 0x7fc00000) === 0x7fc00000).toBe(true);
      restoreMissing(h, read.values);
      // After: the CDL's own values, -999 (_FillValue) and -888 (missing_value), as float32.
      for (let i = 0; i < FILL_CELLS + MISS_CELLS; i++) expect(bits[i]).toBe(new Uint32Array(Float32Array.of(role(i) === 'fill' ? -999 : -888).buffer)[0]);
      expect(read.values.some((x) => Number.isNaN(x))).toBe(false);
      // A window: row 1 (cells 87..173) holds the missing_value cells 100..149.
      const w = await a.read('level', { rows: [1, 2], cols: [0, 87] });
      restoreMissing(h, w.values);
      for (let j = 0; j < 87; j++) if (role(87 + j) === 'missing') expect(w.values[j]).toBe(-888);
      expect(w.values.some((x) => Number.isNaN(x))).toBe(false);
    } finally {
      await a.close();
    }
  });

  it('.npy output gives the missing_value cells their own value too', async () => {
    expect((await rfIn(['unpack', 'v.rfz', '--var', 'level', '-o', 'level.npy'], t.dir)).code).toBe(0);
    const got = parseNpy(new Uint8Array(readFileSync(join(t.dir, 'level.npy'))), 'level.npy').data;
    for (let i = 0; i < FILL_CELLS + MISS_CELLS; i++) expect(got[i]).toBe(role(i) === 'fill' ? -999 : -888);
  });
});
