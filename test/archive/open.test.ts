/**
 * What `open` takes: bytes as a Uint8Array or ArrayBuffer (what a browser's
 * `fetch` response gives, Fetch standard: Body.arrayBuffer()), a ByteSource,
 * a file path or file: URL (Node entry), an http(s) URL; and, property-tested
 * with fast-check, that whatever a caller passes to the public API, the only
 * errors that escape are FormatError and InputError (the contract stated in
 * src/errors.ts). Data: the vega-datasets volcano grid (data/volcano.json).
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import fc from 'fast-check';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { open as openBrowserSafe } from '../../src/decode.js';
import { FormatError, InputError, MemorySource, open, pack } from '../../src/index.js';
import { tempDir } from '../cli/helpers.js';
import { startRangeServer } from '../io/range-server.js';
import { volcano } from './datasets.js';

/** Fixed seed: every run tries the same cases. */
const SEED = 1313;
const g = volcano();
const bytes = pack(g.values, g.shape, { bound: 'abs:1', tile: 16, name: 'height' });
let t: ReturnType<typeof tempDir>;
let path: string;

beforeAll(() => {
  t = tempDir('rankfield-open-');
  path = join(t.dir, 'volcano.rfz');
  writeFileSync(path, bytes);
});
afterAll(() => t?.remove());

/** Resolve to the error `p` rejects with, or to null when it resolves. */
async function rejection(p: () => Promise<unknown> | unknown): Promise<unknown> {
  try {
    const a = await p();
    if (a !== null && typeof a === 'object' && 'close' in a && typeof a.close === 'function') await (a.close as () => Promise<void>)();
    return null;
  } catch (e) {
    return e;
  }
}

function expectOurs(e: unknown): void {
  if (e === null) return;
  expect(e instanceof FormatError || e instanceof InputError, `escaped: ${String(e)}`).toBe(true);
}

describe('open() takes every form of archive input', () => {
  const expectVolcano = async (input: Parameters<typeof open>[0]) => {
    const a = await open(input);
    try {
      expect(a.names).toEqual(['height']);
      const f = await a.read('height', { rows: [0, 2], cols: [0, 2] });
      // abs:1: every value within 1 m of the grid's (the bound's definition).
      for (const [k, v] of [g.values[0], g.values[1], g.values[87], g.values[88]].entries()) expect(Math.abs(f.values[k] - v)).toBeLessThanOrEqual(1);
    } finally {
      await a.close();
    }
  };
  it('a Uint8Array', () => expectVolcano(bytes));
  it('an ArrayBuffer (as fetch gives)', () => expectVolcano(bytes.slice().buffer));
  it('a ByteSource', () => expectVolcano(new MemorySource(bytes)));
  it('a file path (Node entry)', () => expectVolcano(path));
  it('a file: URL, as a URL and as text (Node entry)', async () => {
    await expectVolcano(pathToFileURL(path));
    await expectVolcano(pathToFileURL(path).href);
  });

  it('an http URL, as text and as a URL, in both entries (read with Range requests)', async () => {
    const server = await startRangeServer();
    try {
      server.put('/volcano.rfz', bytes);
      await expectVolcano(`${server.url}/volcano.rfz`);
      await expectVolcano(new URL(`${server.url}/volcano.rfz`));
      const a = await openBrowserSafe(`${server.url}/volcano.rfz`);
      expect(a.names).toEqual(['height']);
      await a.close();
    } finally {
      await server.close();
    }
  });

  it('a missing file is an InputError naming it and the reason', async () => {
    const e = await rejection(() => open(join(t.dir, 'absent.rfz')));
    expect(e).toBeInstanceOf(InputError);
    expect((e as InputError).code).toBe('file');
    expect((e as Error).message).toMatch(/absent\.rfz.*ENOENT/);
  });

  it('bad arguments are InputErrors with what was given', async () => {
    for (const [arg, pattern] of [
      [undefined, /got undefined/],
      [null, /got null/],
      [42, /got number/],
      [{}, /got an object \(Object\)/],
      [new Float32Array(4), /Float32Array.*use pack\(\)/],
      ['', /empty path/],
    ] as const) {
      const e = await rejection(() => open(arg as unknown as Uint8Array));
      expect(e, String(arg)).toBeInstanceOf(InputError);
      expect((e as Error).message).toMatch(pattern);
    }
    expect(await rejection(() => open(bytes, 5 as unknown as object))).toBeInstanceOf(InputError);
    expect(await rejection(() => open(bytes, { limit: {} } as unknown as object))).toBeInstanceOf(InputError);
  });

  it('the browser-safe entry refuses a file path with an InputError', async () => {
    const e = await rejection(() => openBrowserSafe(path));
    expect(e).toBeInstanceOf(InputError);
    expect((e as Error).message).toMatch(/file paths are read by the Node entry/);
  });
});

describe('only FormatError and InputError escape the public API (fast-check)', () => {
  const settings = { seed: SEED, numRuns: 300 };

  it('open(anything, anything)', async () => {
    await fc.assert(
      fc.asyncProperty(fc.anything(), fc.option(fc.anything()), async (input, options) => {
        // Strings are tried as paths relative to a folder that holds only the archive, so they name nothing else.
        const arg = typeof input === 'string' ? join(t.dir, 'sub', input) : input;
        expectOurs(await rejection(() => open(arg as Uint8Array, (options ?? undefined) as object)));
      }),
      settings,
    );
  });

  it('open(random bytes, as Uint8Array or ArrayBuffer)', async () => {
    await fc.assert(
      fc.asyncProperty(fc.uint8Array({ maxLength: 200 }), fc.boolean(), async (b, asBuffer) => {
        const e = await rejection(() => open(asBuffer ? b.slice().buffer : b));
        expect(e).toBeInstanceOf(FormatError);
      }),
      settings,
    );
  });

  it('open(a ByteSource answering anything)', async () => {
    await fc.assert(
      fc.asyncProperty(fc.anything(), fc.anything(), async (size, got) => {
        const src = { label: 'odd', size: async () => size, read: async () => got };
        expectOurs(await rejection(() => open(src as never)));
      }),
      settings,
    );
  });

  it('pack(values, shape) with options of any kind, or none', () => {
    fc.assert(
      fc.property(fc.oneof(fc.anything(), fc.array(fc.double(), { maxLength: 30 })), fc.anything(), fc.option(fc.anything()), (values, shape, options) => {
        let e: unknown = null;
        try {
          if (options === null) (pack as (v: unknown, s: unknown) => Uint8Array)(values, shape);
          else pack(values as number[], shape as number[], options as never);
        } catch (x) {
          e = x;
        }
        expectOurs(e);
      }),
      settings,
    );
  });

  it('archive.read(anything, anything)', async () => {
    const a = await open(bytes);
    await fc.assert(
      fc.asyncProperty(fc.anything(), fc.anything(), async (name, options) => {
        expectOurs(await rejection(() => a.read(name as string, options as never)));
      }),
      settings,
    );
  });

  it('pack(values, shape) without options is an InputError that names the missing bound', () => {
    let e: unknown = null;
    try {
      (pack as (v: unknown, s: unknown) => Uint8Array)(g.values, g.shape);
    } catch (x) {
      e = x;
    }
    expect(e).toBeInstanceOf(InputError);
    expect((e as Error).message).toMatch(/bound/);
  });
});
