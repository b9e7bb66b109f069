/**
 * `rankfield unpack` writes band by band (issue 15): CSV text of a field
 * that spans several bands, one .npy per field of a folder output (and none
 * left when a later field fails), and the size of a large output said before
 * it is written. The values are compared with what the library's own
 * Archive.read decodes; the .npy layout with the NumPy format description
 * (NEP 1: magic, version 1.0, little-endian header length, a Python dict
 * literal padded to a multiple of 64 bytes; from memory).
 */
import { closeSync, existsSync, mkdirSync, openSync, readdirSync, readFileSync, readSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { formatCsv } from '../../src/cli/unpack.js';
import { ArchiveBuilder, open, pack } from '../../src/index.js';
import { FileSink } from '../../src/io/file-sink.js';
import { MemorySink } from '../../src/format/container.js';
import { formatNpy } from '../../src/io/npy.js';
import { CLI_TIMEOUT, ensureBuilt, rfIn, tempDir } from './helpers.js';

const { dir, remove } = tempDir();
// A real gridded field: vega-datasets 3.2.1's annual precipitation grid, 168 rows x 360 columns.
const grid = JSON.parse(readFileSync(fileURLToPath(new URL('../../node_modules/vega-datasets/data/annual-precip.json', import.meta.url)), 'utf8')) as { width: number; height: number; values: number[] };
const ROWS = grid.height;
const COLS = grid.width;
const values = Float32Array.from(grid.values);

beforeAll(async () => {
  ensureBuilt();
  // 32 x 32 tiles: 6 tile rows, so two threads read at least four bands.
  writeFileSync(join(dir, 'f.rfz'), pack(values, [ROWS, COLS], { bound: 'abs:0.01', tile: 32 }));
  // Three slices of 56 x 360, packed from an N-D .npy.
  writeFileSync(join(dir, 's.npy'), formatNpy({ data: values, shape: [3, ROWS / 3, COLS], dtype: 'f32' }));
}, CLI_TIMEOUT);
afterAll(remove);

describe('unpack writes band by band', { timeout: CLI_TIMEOUT }, () => {
  it('writes CSV of a field over several bands as the text of the whole field', async () => {
    const r = await rfIn(['unpack', 'f.rfz', '-o', 'f.csv', '--threads', '2'], dir);
    expect(r.code, r.stderr).toBe(0);
    const a = await open(readFileSync(join(dir, 'f.rfz')));
    const whole = await a.read();
    expect(readFileSync(join(dir, 'f.csv'), 'utf8')).toBe(new TextDecoder().decode(formatCsv(whole.values, whole.shape, ['y', 'x'])));
  });

  it('writes CSV of a field of slices with running indexes across bands', async () => {
    const p = await rfIn(['pack', 's.npy', '-o', 's.rfz', '--bound', 'abs:0.01', '--tile', '32'], dir);
    expect(p.code, p.stderr).toBe(0);
    const r = await rfIn(['unpack', 's.rfz', '-o', 's.csv', '--threads', '2'], dir);
    expect(r.code, r.stderr).toBe(0);
    const a = await open(readFileSync(join(dir, 's.rfz')));
    const whole = await a.read();
    const text = readFileSync(join(dir, 's.csv'), 'utf8');
    expect(text).toBe(new TextDecoder().decode(formatCsv(whole.values, whole.shape, ['slice', 'row', 'col'])));
    expect(text.split('\n').at(-2)).toBe(`2,${ROWS / 3 - 1},${COLS - 1},${String(whole.values[whole.values.length - 1])}`);
  });

  it('writes one .npy per field, and leaves none when a later field fails', async () => {
    const good = join(dir, 'two.rfz');
    const sink = FileSink.create(good);
    const b = new ArchiveBuilder(sink);
    b.add(values, [ROWS, COLS], { bound: 'abs:0.01', tile: 32, name: 'a' });
    b.add(values, [ROWS, COLS], { bound: 'abs:0.01', tile: 32, name: 'b' });
    b.finish();
    sink.close();
    mkdirSync(join(dir, 'out-ok'));
    mkdirSync(join(dir, 'out-bad'));
    const r = await rfIn(['unpack', 'two.rfz', '-o', 'out-ok/', '--threads', '2'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(statSync(join(dir, 'out-ok', 'b.npy')).size).toBe(128 + ROWS * COLS * 4);
    // A flipped byte in the last tile of field b: its checksum fails after a.npy was written.
    const bytes = readFileSync(good);
    const a = await open(bytes);
    const last = Math.ceil(ROWS / 32) * Math.ceil(COLS / 32) - 1;
    const e = await a.tileEntry('b', last);
    bytes[e.offset + (e.length >> 1)] ^= 0x40;
    writeFileSync(join(dir, 'bad.rfz'), bytes);
    const f = await rfIn(['unpack', 'bad.rfz', '-o', 'out-bad/', '--threads', '2'], dir);
    expect(f.code).toBe(2);
    expect(f.stderr.trim().split('\n')).toHaveLength(1);
    expect(f.stderr).toMatch(new RegExp(`^rankfield: error: .*tile ${last}\\b`));
    expect(readdirSync(join(dir, 'out-bad'))).toEqual([]);
  });

  // The note starts above ANNOUNCE_BYTES (64 MiB): a 4096 x 4096 field is packed in-process and unpacked
  // twice to 64 MiB files, which takes tens of seconds on a busy machine; hence its own limit.
  it('says how many bytes a large output takes before writing it (a small archive of a constant field)', { timeout: 120_000 }, async () => {
    const side = 4096;
    const sink = FileSink.create(join(dir, 'const.rfz'));
    const b = new ArchiveBuilder(sink);
    b.addBands((_r0, count) => new Float32Array(count * side).fill(1.5), [side, side], 'f32', { bound: 'abs:0.01', tile: 1024 });
    b.finish();
    sink.close();
    expect(statSync(join(dir, 'const.rfz')).size).toBeLessThan(4096);
    const r = await rfIn(['unpack', 'const.rfz', '-o', 'const.npy', '--threads', '2'], dir);
    expect(r.code, r.stderr).toBe(0);
    const size = statSync(join(dir, 'const.npy')).size;
    expect(size).toBe(128 + side * side * 4);
    expect(r.stderr).toBe(`rankfield: note: writing ${size} bytes (4096x4096 f32) to 'const.npy'\n`);
    const head = Buffer.alloc(136);
    const fd = openSync(join(dir, 'const.npy'), 'r');
    readSync(fd, head, 0, 136, 0);
    closeSync(fd);
    expect(head.subarray(0, 6).toString('latin1')).toBe('\x93NUMPY');
    expect(head.toString('latin1', 10, 128)).toMatch(/'shape': \(4096, 4096\)/);
    expect(head.readFloatLE(128)).toBe(1.5);
    const q = await rfIn(['unpack', 'const.rfz', '-o', 'const2.npy', '--quiet', '--threads', '2'], dir);
    expect(q.code, q.stderr).toBe(0);
    expect(q.stderr).toBe('');
  });

  it('refuses NetCDF output beyond 512 MiB of values before decoding any (a small archive of a huge constant field)', async () => {
    // One constant 1024 x 1024 tile encoded for real, then written 9 x 16 times through addCoded (as join
    // copies coded tiles): a valid archive of a 9216 x 16384 float32 field, 603979776 bytes of values, in seconds.
    const one = new MemorySink();
    const b1 = new ArchiveBuilder(one);
    b1.add(new Float32Array(1024 * 1024).fill(1.5), [1024, 1024], { bound: 'abs:0.01', tile: [1024, 1024], name: 'bomb' });
    b1.finish();
    const bytes = one.bytes();
    const a1 = await open(bytes);
    const e = await a1.tileEntry('bomb', 0);
    const tile = { payload: bytes.slice(e.offset, e.offset + e.length), stats: { method: e.method, rank: e.rank, valid: e.valid, maxErr: e.max_err, rmse: e.rmse, valueCrc: e.value_crc, prefix: [] } };
    const [rows, cols] = [9 * 1024, 16 * 1024];
    const sink = FileSink.create(join(dir, 'huge.rfz'));
    const b = new ArchiveBuilder(sink);
    await b.addCoded({ name: 'bomb', dtype: 'f32', rows, cols, tileRows: 1024, tileCols: 1024, bound: { mode: 'abs', value: 0.01 }, fill: null }, {}, [8, 8], (emit) => {
      for (let t = 0; t < 9 * 16; t++) emit(t, tile);
      return { tolerance: 0.01, range: [1.5, 1.5], valid: rows * cols, maxErr: e.max_err, rmse: e.rmse };
    });
    b.finish();
    sink.close();
    expect(statSync(join(dir, 'huge.rfz')).size).toBeLessThan(8192);
    // The archive is valid: a window of it decodes.
    const w = await rfIn(['unpack', 'huge.rfz', '-o', 'corner.npy', '--region', '9000:9002,16000:16002', '--quiet'], dir);
    expect(w.code, w.stderr).toBe(0);
    expect(readFileSync(join(dir, 'corner.npy')).readFloatLE(128)).toBe(1.5);
    const r = await rfIn(['unpack', 'huge.rfz', '-o', 'huge.nc'], dir);
    expect(r.code).toBe(2);
    expect(r.stderr).toBe(`rankfield: error: 'huge.nc' would hold 1 field whole (NetCDF is written from memory) in memory, ${rows * cols * 4} bytes of values, more than the 536870912 this output allows; write .npy or raw (band by band, any size), or a smaller window\n`);
    expect(existsSync(join(dir, 'huge.nc'))).toBe(false);
  });
});
