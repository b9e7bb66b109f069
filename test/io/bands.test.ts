/**
 * Band readers for .npy and raw files, the .npy band writer, and FileSink.
 * Band reads are checked against reading the whole file with parseNpy /
 * parseRaw (themselves tested against the NumPy format description), and
 * must read only the rows asked for.
 */
import { appendFileSync, mkdtempSync, readFileSync, rmSync, truncateSync, utimesSync, writeFileSync, openSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { ArchiveBuilder, InputCode, InputError, MemorySink, open, pack, packAsync } from '../../src/index.js';
import { NpyBandWriter, openNpyBands, openRawBands } from '../../src/io/bands.js';
import { FileSink } from '../../src/io/file-sink.js';
import { formatNpy, parseNpy } from '../../src/io/npy.js';
import { formatRaw, parseRaw } from '../../src/io/raw.js';
import { precip, volcano } from '../archive/datasets.js';

const dir = mkdtempSync(join(tmpdir(), 'rankfield-bands-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

const g = volcano(); // 61 x 87
const bits = (a: Float32Array | Float64Array) => new Uint32Array(a.buffer, a.byteOffset, a.byteLength / 4);

/** Rows [r0, r0 + count) of a row-major array. */
const rowsOf = (a: Float32Array | Float64Array, cols: number, r0: number, count: number) => a.subarray(r0 * cols, (r0 + count) * cols);

/** A .npy v1.0 file written by hand after the format description (big-endian, Fortran order as asked). */
function handNpy(values: Float64Array, shape: [number, number], descr: string, fortran: boolean): Uint8Array {
  const [rows, cols] = shape;
  const dict = `{'descr': '${descr}', 'fortran_order': ${fortran ? 'True' : 'False'}, 'shape': (${rows}, ${cols}), }`;
  const hl = Math.ceil((10 + dict.length + 1) / 64) * 64 - 10;
  const item = descr.endsWith('4') ? 4 : 8;
  const out = new Uint8Array(10 + hl + rows * cols * item);
  out.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0, hl & 0xff, hl >> 8]);
  for (let i = 0; i < hl - 1; i++) out[10 + i] = i < dict.length ? dict.charCodeAt(i) : 0x20;
  out[10 + hl - 1] = 0x0a;
  const view = new DataView(out.buffer, 10 + hl);
  const little = descr.startsWith('<');
  for (let i = 0; i < rows; i++) {
    for (let j = 0; j < cols; j++) {
      const k = fortran ? j * rows + i : i * cols + j;
      if (item === 4) view.setFloat32(k * 4, values[i * cols + j], little);
      else view.setFloat64(k * 8, values[i * cols + j], little);
    }
  }
  return out;
}

describe('band readers', () => {
  it.each([
    ['<f8', false],
    ['>f8', false],
    ['<f4', false],
    ['>f4', true],
    ['<f8', true],
  ] as const)('.npy %s fortran=%s: every band equals the same rows of the whole file', (descr, fortran) => {
    const file = join(dir, `v-${descr.replace(/[<>]/, (c) => (c === '<' ? 'le' : 'be'))}-${fortran}.npy`);
    const bytes = handNpy(g.values, g.shape, descr, fortran);
    writeFileSync(file, bytes);
    const whole = parseNpy(bytes, file);
    const r = openNpyBands(file);
    try {
      expect(r.shape).toEqual([61, 87]);
      expect(r.dtype).toBe(descr.endsWith('4') ? 'f32' : 'f64');
      for (const [r0, count] of [[0, 61], [0, 1], [60, 1], [16, 16], [48, 13], [5, 0]]) {
        expect(bits(r.band(r0, count)), `rows ${r0}+${count}`).toEqual(bits(rowsOf(whole.data, 87, r0, count)));
      }
    } finally {
      r.close();
    }
  });

  it.each(['<f8', '>f4'] as const)('.npy %s of 3 and 4 axes in Fortran order: bands are the C-order rows (read whole and reordered)', (descr) => {
    // The .npy format description (NumPy's NEP 1 and the numpy.lib.format docstring): with
    // 'fortran_order': True the data is the array in column-major order, the FIRST axis varying
    // fastest, so element (i0, i1, ..., ik) lies at i0 + d0 * (i1 + d1 * (i2 + ...)). The bytes are
    // placed by that rule; each element's value encodes its own index, 1000 i0 + 100 i1 + 10 i2 + i3.
    for (const shape of [[3, 4, 5], [2, 3, 4, 5]]) {
      const n = shape.reduce((a, b) => a * b, 1);
      const dict = `{'descr': '${descr}', 'fortran_order': True, 'shape': (${shape.join(', ')}), }`;
      const hl = Math.ceil((10 + dict.length + 1) / 64) * 64 - 10;
      const item = descr.endsWith('4') ? 4 : 8;
      const bytes = new Uint8Array(10 + hl + n * item);
      bytes.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0, hl & 0xff, hl >> 8]);
      for (let i = 0; i < hl - 1; i++) bytes[10 + i] = i < dict.length ? dict.charCodeAt(i) : 0x20;
      bytes[10 + hl - 1] = 0x0a;
      const view = new DataView(bytes.buffer, 10 + hl);
      const value = (idx: number[]) => idx.reduce((v, x, a) => v + x * 10 ** (3 - a - (4 - shape.length)), 0);
      const idx = new Array<number>(shape.length).fill(0);
      for (let e = 0; e < n; e++) {
        let f = 0;
        for (let a = shape.length - 1; a >= 0; a--) f = f * shape[a] + idx[a];
        if (item === 4) view.setFloat32(f * 4, value(idx), descr.startsWith('<'));
        else view.setFloat64(f * 8, value(idx), descr.startsWith('<'));
        for (let a = shape.length - 1; a >= 0 && ++idx[a] === shape[a]; a--) idx[a] = 0;
      }
      const file = join(dir, `fortran-${shape.length}-${item}.npy`);
      writeFileSync(file, bytes);
      // The C-order values, index by index (last axis fastest).
      const want: number[] = [];
      idx.fill(0);
      for (let e = 0; e < n; e++) {
        want.push(value(idx));
        for (let a = shape.length - 1; a >= 0 && ++idx[a] === shape[a]; a--) idx[a] = 0;
      }
      const r = openNpyBands(file);
      try {
        expect(r.ndShape).toEqual(shape);
        const cols = shape[shape.length - 1];
        expect(r.shape).toEqual([n / cols, cols]);
        expect(r.bytesRead).toBe(bytes.length);
        for (const [r0, count] of [[0, n / cols], [0, 1], [n / cols - 1, 1], [2, 5]]) {
          expect(Array.from(r.band(r0, count)), `${shape.join('x')} rows ${r0}+${count}`).toEqual(want.slice(r0 * cols, (r0 + count) * cols));
        }
      } finally {
        r.close();
      }
      expect(() => r.band(0, 1)).toThrow(InputError);
    }
  });

  it.each([
    ['<f4', false],
    ['>f8', false],
    ['<f8', true],
  ] as const)('.npy %s fortran=%s with reuse: every band equals the same rows, read into one buffer', (descr, fortran) => {
    const file = join(dir, `reuse-${descr.replace(/[<>]/, (c) => (c === '<' ? 'le' : 'be'))}-${fortran}.npy`);
    const bytes = handNpy(g.values, g.shape, descr, fortran);
    writeFileSync(file, bytes);
    const whole = parseNpy(bytes, file);
    const r = openNpyBands(file, { reuse: true });
    try {
      // The largest band first: the later ones fit in its buffer.
      const first = r.band(0, 61);
      expect(bits(first)).toEqual(bits(whole.data));
      for (const [r0, count] of [[0, 1], [60, 1], [16, 16], [48, 13], [5, 0], [3, 58]]) {
        const b = r.band(r0, count);
        expect(b.buffer, `rows ${r0}+${count}: the same buffer`).toBe(first.buffer);
        expect(bits(b), `rows ${r0}+${count}`).toEqual(bits(rowsOf(whole.data, 87, r0, count)));
      }
    } finally {
      r.close();
    }
    expect(() => r.band(0, 1)).toThrow(InputError);
  });

  it('an archive packed from a reader with reuse is the one packed from the values in memory', async () => {
    // vega-datasets annual-precip (168 x 360, see ../archive/datasets.ts): the tile trial reads bands of
    // several heights, the L2 plan reads bands again; the encoder must be done with each band before the next.
    const p = precip();
    const file = join(dir, 'precip.npy');
    const values = Float32Array.from(p.values);
    writeFileSync(file, formatNpy({ data: values, shape: p.shape, dtype: 'f32' }));
    // Fixed tiles run on 2 threads (a tile trial of a field this small runs on one).
    for (const o of [{ bound: 'rel:1e-3' }, { bound: 'psnr:60' }, { bound: 'abs:0.5', tile: 32 }, { bound: 'psnr:60', tile: 48 }]) {
      const want = pack(values, p.shape, o);
      for (const threads of [1, 2]) {
        const r = openNpyBands(file, { reuse: true });
        try {
          const sink = new MemorySink();
          const b = new ArchiveBuilder(sink);
          if (threads === 1) b.addBands((r0, count) => r.band(r0, count), p.shape, 'f32', o);
          else await b.addBandsAsync((r0, count) => r.band(r0, count), p.shape, 'f32', { ...o, threads });
          b.finish();
          expect(sink.bytes(), `${o.bound} threads ${threads}`).toEqual(want);
        } finally {
          r.close();
        }
      }
    }
    expect(await packAsync(values, p.shape, { bound: 'rel:1e-3', threads: 2 })).toEqual(pack(values, p.shape, { bound: 'rel:1e-3' }));
  }, 30_000);

  it('reads only the header and the rows asked for (C order)', () => {
    const file = join(dir, 'count.npy');
    const bytes = formatNpy({ data: g.values, shape: [61, 87], dtype: 'f64' });
    writeFileSync(file, bytes);
    const r = openNpyBands(file);
    try {
      const header = r.bytesRead;
      expect(header).toBe(bytes.length - 61 * 87 * 8);
      r.band(10, 3);
      expect(r.bytesRead - header).toBe(3 * 87 * 8);
    } finally {
      r.close();
    }
  });

  it('raw files, both byte orders', () => {
    for (const endian of ['little', 'big'] as const) {
      const file = join(dir, `v-${endian}.raw`);
      const data = Float32Array.from(g.values);
      writeFileSync(file, formatRaw({ data, shape: [61, 87], dtype: 'f32' }, endian));
      const whole = parseRaw(readFileSync(file), [61, 87], 'f32', endian, file);
      const r = openRawBands(file, [61, 87], 'f32', endian);
      try {
        expect(bits(r.band(7, 20))).toEqual(bits(rowsOf(whole.data, 87, 7, 20)));
        expect(r.bytesRead).toBe(20 * 87 * 4);
      } finally {
        r.close();
      }
    }
  });

  it('refuses files whose size does not fit the shape, and bands outside the rows', () => {
    const raw = join(dir, 'short.raw');
    writeFileSync(raw, new Uint8Array(61 * 87 * 4 - 4));
    expect(() => openRawBands(raw, [61, 87], 'f32', 'little')).toThrow(/needs 5307 values of 4 bytes = 21228 bytes but the file holds 21224 bytes/);
    const npy = join(dir, 'short.npy');
    writeFileSync(npy, formatNpy({ data: g.values, shape: [61, 87], dtype: 'f64' }).subarray(0, 1000));
    expect(() => openNpyBands(npy)).toThrow(/file truncated\?/);
    const ok = join(dir, 'ok.npy');
    writeFileSync(ok, formatNpy({ data: g.values, shape: [61, 87], dtype: 'f64' }));
    const r = openNpyBands(ok);
    try {
      expect(() => r.band(60, 2)).toThrow(/rows 60\.\.62 lies outside rows 0\.\.61/);
    } finally {
      r.close();
    }
    const three = join(dir, 'three.npy');
    writeFileSync(three, formatNpy({ data: Float64Array.from({ length: 8 }, (_, i) => i), shape: [2, 2, 2], dtype: 'f64' }));
    // A C-order N-D array is read as the matrix of its values: all axes but the last as rows.
    const nd = openNpyBands(three);
    try {
      expect([nd.shape, nd.ndShape]).toEqual([[4, 2], [2, 2, 2]]);
      expect(Array.from(nd.band(1, 2))).toEqual([2, 3, 4, 5]);
    } finally {
      nd.close();
    }
    const one = join(dir, 'one.npy');
    writeFileSync(one, formatNpy({ data: new Float64Array(3), shape: [3], dtype: 'f64' }));
    expect(() => openNpyBands(one)).toThrow(/1-D array of shape \(3,\); a field has 2 or more axes/);
  });

  it.each([
    ['grows', (f: string) => appendFileSync(f, new Uint8Array(8)), /its size went from 42456 to 42464 bytes/],
    ['shrinks', (f: string) => truncateSync(f, 30_000), /its size went from 42456 to 30000 bytes/],
    ['is rewritten in place', (f: string) => utimesSync(f, new Date(), new Date(Date.now() + 5000)), /it was modified/],
  ])('reports a file that %s while being read', (_what, change, message) => {
    const file = join(dir, `changing-${_what.replace(/ /g, '-')}.raw`);
    writeFileSync(file, formatRaw({ data: g.values, shape: [61, 87], dtype: 'f64' }));
    const r = openRawBands(file, [61, 87], 'f64', 'little');
    try {
      r.band(0, 16);
      change(file);
      let e: unknown = null;
      try {
        r.band(16, 16);
      } catch (err) {
        e = err;
      }
      expect(e).toBeInstanceOf(InputError);
      expect((e as InputError).code).toBe(InputCode.File);
      expect((e as InputError).message).toMatch(/the file changed while being read/);
      expect((e as InputError).message).toMatch(message);
    } finally {
      r.close();
    }
  });
});

describe('NpyBandWriter', () => {
  it('writes a .npy file band by band that parseNpy reads back bit for bit', () => {
    const file = join(dir, 'written.npy');
    const data = Float32Array.from(g.values);
    const w = new NpyBandWriter(file, [61, 87], 'f32');
    for (let r0 = 0; r0 < 61; r0 += 20) w.write(rowsOf(data, 87, r0, Math.min(20, 61 - r0)));
    w.close();
    const back = parseNpy(readFileSync(file), file);
    expect(back.shape).toEqual([61, 87]);
    expect(bits(back.data)).toEqual(bits(data));
    // The same header formatNpy writes.
    expect(readFileSync(file)).toEqual(Buffer.from(formatNpy({ data, shape: [61, 87], dtype: 'f32' })));
  });

  it('refuses too many or too few rows, and an existing file', () => {
    const file = join(dir, 'partial.npy');
    const w = new NpyBandWriter(file, [2, 87], 'f64');
    w.write(rowsOf(g.values, 87, 0, 1));
    expect(() => w.write(rowsOf(g.values, 87, 0, 2))).toThrow(/more than the 2 rows/);
    expect(() => w.close()).toThrow(/1 of 2 rows written/);
    expect(() => new NpyBandWriter(file, [2, 87], 'f64')).toThrow(/EEXIST/);
  });
});

describe('FileSink', () => {
  it('writes what it is given, in order, across its buffer', () => {
    const file = join(dir, 'sink.bin');
    const sink = new FileSink(openSync(file, 'w'), file, 100);
    const parts = [40, 50, 30, 250, 1, 99, 100].map((n, k) => Uint8Array.from({ length: n }, (_, i) => (i + k * 17) & 0xff));
    for (const p of parts) sink.write(p);
    sink.close();
    sink.close();
    expect(new Uint8Array(readFileSync(file))).toEqual(Uint8Array.from(parts.flatMap((p) => [...p])));
    expect(sink.bytesWritten).toBe(570);
    expect(() => sink.write(new Uint8Array(1))).toThrow(/after the file sink was closed/);
  });

  it('an archive built into a FileSink holds the same bytes as one built in memory', async () => {
    const file = join(dir, 'built.rfz');
    const sink = FileSink.create(file);
    const b = new ArchiveBuilder(sink);
    b.add(g.values, g.shape, { bound: 'abs:0.5', tile: 16, name: 'v' });
    b.finish();
    sink.close();
    const mem = new MemorySink();
    const m = new ArchiveBuilder(mem);
    m.add(g.values, g.shape, { bound: 'abs:0.5', tile: 16, name: 'v' });
    m.finish();
    expect(new Uint8Array(readFileSync(file))).toEqual(mem.bytes());
    expect(mem.bytes()).toEqual(pack(g.values, g.shape, { bound: 'abs:0.5', tile: 16, name: 'v' }));
    await open(mem.bytes());
  });
});
