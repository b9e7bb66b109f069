/** FileSource: random-access reads from a file, checked against the same bytes read whole by Node's fs (the reference here). */
import { mkdtempSync, readFileSync, rmSync, truncateSync, writeFileSync, mkdirSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { FormatCode, FormatError, open, pack } from '../../src/index.js';
import { FileSource } from '../../src/io/file-source.js';

const dir = mkdtempSync(join(tmpdir(), 'rankfield-source-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

const bytes = Uint8Array.from({ length: 10000 }, (_, i) => (i * 7919) % 251);
const file = join(dir, 'bytes.bin');
writeFileSync(file, bytes);

async function expectFormatError(p: Promise<unknown>, code: string, message: RegExp): Promise<void> {
  const e = await p.then(
    () => null,
    (err: unknown) => err,
  );
  expect(e).toBeInstanceOf(FormatError);
  expect((e as FormatError).code).toBe(code);
  expect((e as FormatError).message).toMatch(message);
}

describe('FileSource', () => {
  it('reports the size and reads exact ranges, the same bytes fs.readFileSync gives', async () => {
    const src = await FileSource.open(file);
    try {
      expect(await src.size()).toBe(10000);
      expect(src.label).toBe(file);
      for (const [off, len] of [[0, 1], [0, 10000], [9999, 1], [1234, 4321], [5000, 0]]) {
        expect(await src.read(off, len)).toEqual(bytes.subarray(off, off + len));
      }
    } finally {
      await src.close();
    }
  });

  it('refuses a range beyond the end with FormatError Truncated', async () => {
    const src = await FileSource.open(file, 'label.bin');
    try {
      await expectFormatError(src.read(9990, 11), FormatCode.Truncated, /^label\.bin: bytes 9990\.\.10001 lie beyond its 10000 bytes/);
      await expectFormatError(src.read(-1, 2), FormatCode.Malformed, /not a pair of non-negative integers/);
    } finally {
      await src.close();
    }
  });

  it('reports a file that shrank after opening as Truncated (short read)', async () => {
    const f = join(dir, 'shrinks.bin');
    writeFileSync(f, bytes);
    const src = await FileSource.open(f);
    try {
      truncateSync(f, 6000);
      await expectFormatError(src.read(5000, 2000), FormatCode.Truncated, /file ended at byte 6000 while reading bytes 5000\.\.7000/);
    } finally {
      await src.close();
    }
  });

  it('refuses a directory with EISDIR and a missing file with ENOENT', async () => {
    mkdirSync(join(dir, 'sub'));
    await expect(FileSource.open(join(dir, 'sub'))).rejects.toMatchObject({ code: 'EISDIR' });
    await expect(FileSource.open(join(dir, 'absent'))).rejects.toMatchObject({ code: 'ENOENT' });
  });

  it('refuses reads after close; closing twice is harmless', async () => {
    const src = await FileSource.open(file);
    await src.close();
    await src.close();
    await expect(src.read(0, 1)).rejects.toThrow(/read after the file source was closed/);
  });

  it('serves open(): an archive read from a file equals the one read from memory', async () => {
    const values = Float64Array.from({ length: 30 * 40 }, (_, c) => Math.sin(c / 17) * 10);
    const archive = pack(values, [30, 40], { bound: 'abs:1e-3', tile: 16 });
    const f = join(dir, 'a.rfz');
    writeFileSync(f, archive);
    expect(readFileSync(f)).toEqual(Buffer.from(archive));
    const src = await FileSource.open(f);
    const fromFile = await open(src);
    const fromMemory = await open(archive);
    try {
      expect(fromFile.header).toEqual(fromMemory.header);
      expect((await fromFile.read()).values).toEqual((await fromMemory.read()).values);
    } finally {
      await fromFile.close();
    }
  });
});
