/**
 * CSV text of unpack (src/cli/unpack.ts formatCsv): the layout RFC 4180
 * describes (comma-separated fields, one record per line; from memory),
 * encoded a chunk of lines at a time so that no single string outgrows the
 * runtime (issue 15: a large window ended in "Invalid string length").
 */
import { describe, expect, it } from 'vitest';
import { CsvWriter, formatCsv } from '../../src/cli/unpack.js';

describe('formatCsv', () => {
  it('writes a matrix as rows of comma-separated values, across several encoding chunks exactly as one string would', () => {
    const rows = 700;
    const cols = 1000;
    const v = Float64Array.from({ length: rows * cols }, (_, k) => (k % 7) - 2.25);
    const text = new TextDecoder().decode(formatCsv(v, [rows, cols], ['y', 'x']));
    // About 3.5 MB of text: more than three of the 1 MiB chunks.
    expect(text.length).toBeGreaterThan(3 << 20);
    let want = '';
    for (let i = 0; i < rows; i++) want += `${Array.from(v.subarray(i * cols, (i + 1) * cols), String).join(',')}\n`;
    expect(text).toBe(want);
  });

  it('writes more axes as a header of dimension names and one line per value with its indexes', () => {
    const v = Float32Array.of(1, 2.5, -3, 0);
    expect(new TextDecoder().decode(formatCsv(v, [2, 1, 2], ['time', 'lat', 'lon']))).toBe('time,lat,lon,value\n0,0,0,1\n0,0,1,2.5\n1,0,0,-3\n1,0,1,0\n');
    // A name holding a comma or a quote is quoted, its quotes doubled (RFC 4180, section 2; from memory).
    expect(new TextDecoder().decode(formatCsv(Float32Array.of(7), [1, 1, 1], ['a,b', 'say "x"', 'c'])).split('\n')[0]).toBe('"a,b","say ""x""",c,value');
  });

  it('is the same text when the values come a few rows or a piece of a row at a time (CsvWriter, as unpack streams bands)', () => {
    for (const shape of [
      [37, 29],
      [3, 11, 7],
      [2, 3, 4, 5],
    ]) {
      const n = shape.reduce((a, b) => a * b, 1);
      const v = Float32Array.from({ length: n }, (_, k) => Math.fround(Math.sin(k) * 100));
      const dims = shape.map((_, i) => `d${i}`);
      const chunks: Uint8Array[] = [];
      const w = new CsvWriter(shape, dims, (b) => chunks.push(b));
      const row = shape[shape.length - 1];
      // Bands of 1, 2, 3, ... whole rows, then pieces of rows of 1, 2, 3, ... values.
      let at = 0;
      for (let rows = 1; at < n / 2; at += rows * row, rows++) w.write(v.subarray(at, Math.min(n, at + rows * row)));
      for (let k = 1; at < n; at += k, k++) w.write(v.subarray(at, Math.min(n, at + k)));
      w.end();
      expect(Buffer.concat(chunks).toString('utf8'), shape.join('x')).toBe(new TextDecoder().decode(formatCsv(v, shape, dims)));
    }
  });
});
