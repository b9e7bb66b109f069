/**
 * FileSink.patch: bytes handed over before are overwritten in place, whether
 * they were written out already, are still buffered, or straddle the two
 * (the archive writer sets a required flag in the prologue this way).
 * Expected bytes are worked out by hand in each case.
 */
import { mkdtempSync, openSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { FileSink } from '../../src/io/file-sink.js';

const dir = mkdtempSync(join(tmpdir(), 'rf-sink-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

describe('FileSink.patch', () => {
  it('overwrites written, buffered and straddling bytes, and later writes still append', () => {
    // Buffer of 4: after writing 3 + 3 bytes, bytes 0..2 are in the file and 3..5 in the buffer.
    const path = join(dir, 'a.bin');
    const sink = new FileSink(openSync(path, 'wx'), path, 4);
    sink.write(Uint8Array.of(1, 2, 3));
    sink.write(Uint8Array.of(4, 5, 6));
    sink.patch(0, Uint8Array.of(9));
    sink.patch(2, Uint8Array.of(7, 8));
    sink.patch(5, Uint8Array.of(0));
    sink.write(Uint8Array.of(10));
    sink.close(false);
    expect([...readFileSync(path)]).toEqual([9, 2, 7, 8, 5, 0, 10]);
  });

  it('refuses a patch beyond the bytes handed over', () => {
    const path = join(dir, 'b.bin');
    const sink = new FileSink(openSync(path, 'wx'), path, 4);
    sink.write(Uint8Array.of(1, 2));
    expect(() => sink.patch(1, Uint8Array.of(5, 6))).toThrow(/outside the 2 written/);
    sink.abandon();
  });
});
