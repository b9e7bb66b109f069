/**
 * ArchiveBuilder's life cycle: once finish() has written the header, index
 * and tail, the archive is complete (spec/FORMAT.md section 3: the tail is
 * the last 24 bytes of the file), so a later field or a second finish()
 * must be refused with an InputError rather than appended after the tail,
 * which would leave a file that no reader opens.
 */
import { describe, expect, it } from 'vitest';
import { ArchiveBuilder, InputCode, MemorySink, open } from '../../src/index.js';
import { refusal } from '../refusal.js';

const values = Float64Array.from({ length: 8 * 9 }, (_, i) => Math.sin(i / 5));

function finished(): { sink: MemorySink; builder: ArchiveBuilder; bytes: Uint8Array } {
  const sink = new MemorySink();
  const builder = new ArchiveBuilder(sink);
  builder.add(values, [8, 9], { bound: 'abs:1e-3', tile: 4, name: 'first' });
  builder.finish();
  return { sink, builder, bytes: sink.bytes() };
}


describe('ArchiveBuilder after finish()', () => {
  it('add() is refused, writes nothing, and the archive still opens with its one field', async () => {
    const { sink, builder, bytes } = finished();
    const e = refusal(() => builder.add(values, [8, 9], { bound: 'abs:1e-3', name: 'second' }));
    expect(e.code).toBe(InputCode.Option);
    expect(e.message).toMatch(/field 'second' cannot be added: finish\(\) has already written/);
    expect(sink.bytes()).toEqual(bytes);
    const a = await open(sink.bytes());
    expect(a.header.fields.map((f) => f.name)).toEqual(['first']);
    expect((await a.check()).ok).toBe(true);
  });

  it('addBands() is refused the same way, without calling the band callback', () => {
    const { sink, builder, bytes } = finished();
    let calls = 0;
    const band = (r0: number, count: number) => {
      calls++;
      return values.slice(r0 * 9, (r0 + count) * 9);
    };
    const e = refusal(() => builder.addBands(band, [8, 9], 'f64', { bound: 'abs:1e-3', name: 'banded' }));
    expect(e.code).toBe(InputCode.Option);
    expect(e.message).toMatch(/field 'banded' cannot be added/);
    expect(calls).toBe(0);
    expect(sink.bytes()).toEqual(bytes);
  });

  it('a second finish() is refused and leaves the bytes as they were', async () => {
    const { sink, builder, bytes } = finished();
    const e = refusal(() => builder.finish());
    expect(e.code).toBe(InputCode.Option);
    expect(e.message).toMatch(/finish\(\) was already called/);
    expect(sink.bytes()).toEqual(bytes);
    expect((await (await open(sink.bytes())).check()).ok).toBe(true);
  });
});

describe('MemorySink.patch', () => {
  it('refuses a patch outside the bytes written with an InputError', () => {
    const sink = new MemorySink();
    sink.write(new Uint8Array([1, 2, 3, 4]));
    for (const [offset, n] of [
      [-1, 1],
      [3, 2],
      [5, 0],
    ]) {
      const e = refusal(() => sink.patch(offset, new Uint8Array(n)));
      expect(e.code).toBe(InputCode.Option);
      expect(e.message).toMatch(/lies outside the 4 bytes written/);
    }
    sink.patch(2, new Uint8Array([9, 9]));
    expect(sink.bytes()).toEqual(new Uint8Array([1, 2, 9, 9]));
  });
});
