/**
 * Hand-made hostile archives, one per rule of spec/FORMAT.md sections 14-16
 * that the fuzzer found or that its mutations reach only by luck: each is
 * refused with a FormatError whose code and message say what and where, or,
 * for what a reader must accept, reads back unchanged. The archives are
 * seed archives taken apart and put back with every CRC recomputed
 * (./model.ts), so only the rule under test is broken.
 */
import { decode } from '@msgpack/msgpack';
import { deflateSync, inflateSync } from 'fflate';
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { FormatCode, FormatError, InputCode, InputError } from '../../src/errors.js';
import { DEFAULT_LIMITS, resolveLimits } from '../../src/format/schema.js';
import { ArchiveBuilder, pack } from '../../src/pack.js';
import { MemorySink } from '../../src/format/container.js';
import { buildSeeds } from './corpus.js';
import { cloneModel, layout, pageValues, parse, PayloadFlag, readVarint, replaceStream, serialize, setCentre, setLength, setResidualStep, splice, tileDims, varintBytes, walk, type Block, type Model, type PartRef, type PayloadLayout } from './model.js';
import { decodeInts } from '../../src/codec/code-decode.js';
import { encodeClasses, encodeInts } from '../../src/codec/code-encode.js';
import { crc32 } from '../../src/format/crc32.js';
import { Lying, Raw, RawMap, encodeValue } from './msgpack.js';

async function refusal(bytes: Uint8Array, readToo = true): Promise<FormatError> {
  try {
    const a = await open(bytes);
    if (readToo) for (const n of a.names) await a.read(n);
  } catch (e) {
    if (!(e instanceof FormatError)) throw e;
    return e;
  }
  throw new Error('the archive was accepted');
}

async function values(bytes: Uint8Array): Promise<Buffer[]> {
  const a = await open(bytes);
  const out: Buffer[] = [];
  for (const n of a.names) {
    const v = (await a.read(n)).values;
    out.push(Buffer.from(v.buffer, v.byteOffset, v.byteLength));
  }
  return out;
}

function smooth(rows: number, cols: number): Float64Array {
  const v = new Float64Array(rows * cols);
  for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) v[i * cols + j] = Math.sin(i / 3) * Math.cos(j / 4) + 0.3 * Math.cos(i / 2) * Math.sin(j / 5);
  return v;
}

/** 16x16 smooth field, one tile with factors (rank > 0) and a residual. */
const factors = () => pack(smooth(16, 16), [16, 16], { bound: 'abs:1e-3', tile: 16, name: 'factors' });
/** 6x7 field in four tiles with a NaN and a fill cell. */
const masked = () => {
  const v = smooth(6, 7);
  v[4] = NaN;
  v[20] = -999;
  return pack(v, [6, 7], { bound: 'rel:1e-2', tile: [3, 4], fill: -999, name: 'sample' });
};
/** Two fields. */
const twoFields = () => {
  const sink = new MemorySink();
  const b = new ArchiveBuilder(sink);
  b.add(smooth(8, 8), [8, 8], { bound: 'abs:1e-3', tile: 4, name: 'a' });
  b.add(Float32Array.from(smooth(6, 6)), [6, 6], { bound: 'abs:1e-3', tile: 3, name: 'b' });
  b.finish();
  return sink.bytes();
};

function edit(bytes: Uint8Array, change: (m: Model) => void): Uint8Array {
  const m = cloneModel(parse(bytes));
  change(m);
  return serialize(m);
}

describe('MessagePack blocks are scanned before they are decoded', () => {
  it('an array declaring 2^32 - 1 elements in a few bytes is refused without allocating them', async () => {
    const b = edit(masked(), (m) => (m.header.fields[0].attrs = { huge: new Lying('array', 2 ** 32 - 1, [1]) }));
    const e = await refusal(b);
    expect(e.code).toBe(FormatCode.Limit);
    expect(e.message).toMatch(/^archive: header \(at offset \d+\) array of 4294967295 elements at block offset \d+ exceeds the limit of 4194304$/);
    // Within the limit but beyond the bytes there are: malformed, naming the block offset.
    const c = edit(masked(), (m) => (m.header.fields[0].attrs = { huge: new Lying('array', 1 << 20, [1]) }));
    expect((await refusal(c)).message).toMatch(/not valid MessagePack: an array of 1048576 needs 1048576 bytes but only \d+ remain at block offset \d+/);
  });

  it('a key that occurs twice in one map is refused, even with the same value (spec 6: keys MUST NOT repeat)', async () => {
    // The header's maps are attribute maps and a field's nd map (spec 6.2); a field entry and its bound are arrays.
    const b = edit(masked(), (m) => (m.header.fields[0].attrs = new RawMap([['units', 'K'], ['scale', 2], ['units', 'K']])));
    expect((await refusal(b)).message).toMatch(/^archive: header \(at offset \d+\) is not valid MessagePack: the key "units" a second time in one map at block offset \d+$/);
    const c = edit(masked(), (m) => (m.header.attrs = new RawMap([['source', 'a'], ['source', 'b']])));
    expect((await refusal(c)).message).toMatch(/^archive: header .*"source" a second time/);
    const d = edit(masked(), (m) => (m.header.fields[0].nd = new RawMap([['nd_shape', [6, 7]], ['nd_shape', [6, 7]]])));
    expect((await refusal(d)).message).toMatch(/^archive: header .*"nd_shape" a second time/);
  });

  it('non-string keys, extension types, the byte 0xC1, deep nesting and bytes after the value are refused', async () => {
    const cases: [string, (m: Model) => void, RegExp][] = [
      ['integer key', (m) => (m.header.attrs = new RawMap([[1, 'one']])), /a map key of type byte 0x1 \(keys must be strings\)/],
      ['timestamp extension', (m) => (m.header.attrs = { when: new Raw(Uint8Array.of(0xd6, 0xff, 0, 0, 0, 0)) }), /an extension type \(byte 0xd6\)/],
      ['0xC1', (m) => (m.header.attrs = { x: new Raw(Uint8Array.of(0xc1)) }), /the unused type byte 0xc1/],
      ['nesting of 17', (m) => (m.header.future = nest(17)), /nesting deeper than 16/],
      ['bytes after the index', (m) => (m.indexBytes = Uint8Array.of(...encodeValue(m.index), 0xc0)), /1 bytes after the end of the value/],
    ];
    for (const [what, change, message] of cases) {
      const e = await refusal(edit(masked(), change));
      expect(e.code, what).toBe(FormatCode.Malformed);
      expect(e.message, what).toMatch(message);
    }
  });

  it('a header element after the known ones is skipped whatever it holds, within the nesting limit (spec 17)', async () => {
    const want = await values(masked());
    expect(await values(edit(masked(), (m) => (m.header.future = nest(12))))).toEqual(want);
  });

  it('a string longer than the limit is refused with code limit', async () => {
    const b = edit(masked(), (m) => (m.header.attrs = { history: 'x'.repeat(5000) }));
    expect((await values(b)).length).toBe(1);
    let e: unknown = null;
    try {
      await open(b, { limits: { maxStringBytes: 4096 } });
    } catch (x) {
      e = x;
    }
    expect((e as FormatError).code).toBe(FormatCode.Limit);
    expect((e as FormatError).message).toMatch(/string or binary of 5000 bytes at block offset \d+ exceeds the limit of 4096/);
  });
});

function nest(depth: number): unknown {
  let v: unknown = 1;
  for (let i = 1; i < depth; i++) v = [v];
  return v;
}

describe('reader limits', () => {
  it('are positive integers; anything else is refused as bad caller input', () => {
    expect(resolveLimits({ maxRank: 8 }).maxRank).toBe(8);
    expect(resolveLimits(undefined)).toEqual(DEFAULT_LIMITS);
    for (const bad of [{ maxRank: 0 }, { maxTiles: 1.5 }, { maxCells: NaN }, { maxFields: '9' }, { maxTileSize: 4 }]) {
      let e: unknown = null;
      try {
        resolveLimits(bad as never);
      } catch (x) {
        e = x;
      }
      expect(e).toBeInstanceOf(InputError);
      expect((e as InputError).code).toBe(InputCode.Option);
    }
  });

  it('a rank above maxRank is refused when its index page is read, before any tile is decoded', async () => {
    const b = factors();
    const rank = (await (await open(b)).loadIndex()).fields[0].rank[0];
    expect(rank).toBeGreaterThan(1);
    let e: unknown = null;
    // open() reads the index directory only; the page holding tile 0 comes with the first read.
    const a = await open(b, { limits: { maxRank: rank - 1 } });
    try {
      await a.read();
    } catch (x) {
      e = x;
    }
    expect((e as FormatError).code).toBe(FormatCode.Limit);
    expect((e as FormatError).message).toMatch(new RegExp(`tile 0 rank ${rank} exceeds the limit of ${rank - 1}`));
    await open(b, { limits: { maxRank: rank } });
  });

  it('read() refuses more values at once than maxReadCells, and reads a window within it', async () => {
    const a = await open(masked(), { limits: { maxReadCells: 10 } });
    expect((await a.read(undefined, { rows: [0, 2], cols: [0, 5] })).values.length).toBe(10);
    let e: unknown = null;
    try {
      await a.read();
    } catch (x) {
      e = x;
    }
    expect((e as FormatError).code).toBe(FormatCode.Limit);
    expect((e as FormatError).message).toMatch(/^archive field 'sample': reading 42 values at once exceeds the limit of 10/);
  });

  it('a tile larger than its field counts only its cells inside the field (spec 6.2: tiles are cut at the edge)', async () => {
    const b = pack(smooth(3, 5), [3, 5], { bound: 'abs:1e-3', tile: 64 });
    await open(b, { limits: { maxTileCells: 15 } });
    let e: unknown = null;
    try {
      await open(b, { limits: { maxTileCells: 14 } });
    } catch (x) {
      e = x;
    }
    expect((e as FormatError).code).toBe(FormatCode.Limit);
  });
});

describe('the index', () => {
  // Found by `npm run fuzz -- --seed 4242`, case 48926: a prefix length or error of the wrong
  // type was quoted whole (thousands of characters, line breaks and all).
  it('quotes a prefix entry of the wrong type briefly and on one line', async () => {
    const bytes = buildSeeds().find((s) => s.name === 'rough-factors-f64')!.bytes;
    for (const at of [0, 2, 3]) {
      const b = edit(bytes, (m) => (m.index.fields[0].prefix[0][at] = 'line\n'.repeat(500)));
      // Pages are checked when a read needs them (since format 2), so the refusal comes with the read.
      const e = await refusal(b);
      expect(e.code).toBe(FormatCode.Malformed);
      expect(e.message).not.toMatch(/[\n\r]/);
      expect(e.message.length).toBeLessThan(300);
      expect(e.message).toMatch(/^archive index page 0 of field 'rough': tile 0 prefix 0 (length|error) "line\\nline\\n/);
    }
  });

  it('refuses payload lengths that do not fill their page run exactly, naming the page', async () => {
    const base = twoFields();
    const b = edit(base, (m) => {
      serialize(m);
      m.index.fields[1].length[0] += 1;
      m.fixIndex = false;
    });
    // Since version 3 no offset is stored: each index page's payloads fill, back to back, the payload run
    // the directory gives it (runs follow each other from byte 12), so no two tiles can share a byte.
    const e = await refusal(b);
    expect(e.code).toBe(FormatCode.Malformed);
    expect(e.message).toMatch(/index page 0 of field 'b'.*its payloads end at \d+, the directory's payload run at \d+/);
  });

  it('refuses a summary that disagrees with its tiles', async () => {
    const cases: [string, (ix: Block) => void, RegExp][] = [
      ['valid', (ix) => (ix.summary.valid += 1), /summary valid count \d+ is not the sum \d+/],
      ['max_err', (ix) => (ix.summary.max_err *= 2), /summary max_err .* is not the largest tile max_err/],
      ['a tile without valid cells but an error', (ix) => ((ix.valid[0] = 0), (ix.summary.valid = ix.valid.reduce((s: number, v: number) => s + v, 0))), /tile 0 has no valid cell but a max_err of/],
    ];
    for (const [what, change, message] of cases) {
      // The summary is checked against the tiles when the whole index is loaded (loadIndex, check).
      const a = await open(edit(masked(), (m) => change(m.index.fields[0])));
      const e = await a.loadIndex().then(
        () => null,
        (x: unknown) => x,
      );
      expect(e, what).toBeInstanceOf(FormatError);
      expect((e as FormatError).message, what).toMatch(message);
    }
  });
});

describe('the binary columns of an index page (spec/FORMAT.md 7.3)', () => {
  // The masked archive has one page of four 3 x 4 tiles. Its first element holds a widths byte, then the columns
  // length, crc, kind, missing, max_err, rmse, value_crc (0 to 6) back to back; split here as the spec lays them out.
  const TYPES = ['varint', 'u32', 'varint', 'varint', 'error', 'error', 'u32'] as const;
  const split = (bin: Uint8Array, n: number): { widths: number; parts: Uint8Array[] } => {
    const widths = bin[0];
    const parts: Uint8Array[] = [];
    let at = 1;
    TYPES.forEach((type, c) => {
      let len = 4 * n;
      if (type === 'error') len = [0, 4, 8, 2][c === 4 ? widths & 3 : widths >> 2] * n;
      if (type === 'varint') for (let k = 0, e = at; k < n; k++) (e += readVarint(bin, e).bytes), (len = e - at);
      parts.push(bin.subarray(at, at + len));
      at += len;
    });
    return { widths, parts };
  };
  /** Rewrite column c of the page (the widths byte follows an error column's new length when it is 0, 4, 8 or 2 bytes a tile). */
  const withColumn = (c: number, change: (bin: Uint8Array, m: Model) => Uint8Array, also?: (m: Model) => void) =>
    withColumns((bin, m) => {
      const { widths, parts } = split(bin, 4);
      parts[c] = change(parts[c], m);
      const code = [0, 16, 32, 8].indexOf(parts[c].length);
      const w = c === 4 && code >= 0 ? (widths & 0xc) | code : c === 5 && code >= 0 ? (widths & 3) | (code << 2) : widths;
      return Uint8Array.of(w, ...parts.flatMap((x) => [...x]));
    }, also);
  /** Rewrite the page's first element, its binary columns (and, with `also`, anything else of the model in the same edit). */
  const withColumns = (change: (bin: Uint8Array, m: Model) => unknown, also?: (m: Model) => void) =>
    edit(masked(), (m) => {
      const page = [...pageValues(m)[0][0]];
      page[0] = change(page[0], m);
      m.pageBytes = { '0/0': encodeValue(page) };
      also?.(m);
    });
  /** The four payload lengths of the masked archive, in page order. */
  const lengths = (m: Model): number[] => m.payloads[0].map((p) => p.length);
  const cases: [string, () => Uint8Array, RegExp][] = [
    ['columns stored as MessagePack arrays (the version 5 form)', () => withColumns((_b, m) => lengths(m)), /columns are not a binary value$/],
    ['columns one byte short', () => withColumns((b) => b.subarray(0, b.length - 1)), /columns: column 'value_crc' entry 3 needs 4 bytes at columns offset \d+ but only 3 remain$/],
    ['a byte left after the columns', () => withColumns((b) => Uint8Array.of(...b, 0)), /columns have 1 bytes left after the 4 tiles' entries$/],
    ['an error column longer than its width gives', () => withColumn(4, (b) => Uint8Array.of(...b, 0, 0, 0, 0)), /columns have 4 bytes left after the 4 tiles' entries$/],
    ['a widths byte with a bit above bit 3', () => withColumns((b) => Uint8Array.of(b[0] | 0x10, ...b.subarray(1))), /widths byte 0x1[0-9a-f] has bits above bit 3 set$/],
    ['a width code of 3 (shares of the tolerance) in a field whose tolerance is 0', () => withColumn(4, () => Uint8Array.of(1, 0, 1, 0, 1, 0, 1, 0), (m) => (m.header.fields[0].bound.tolerance = 0)), /widths byte 0x[0-9a-f]+ gives column 'max_err' width code 3 \(shares of the tolerance\) in a field whose tolerance is 0$/],
    ['a length varint not in its shortest form', () => withColumn(0, (_b, m) => Uint8Array.of(...varintBytes(lengths(m)[0]).map((x) => x | 0x80), 0, ...lengths(m).slice(1).flatMap(varintBytes))), /columns: column 'length' entry 0 at columns offset 1 is not in its shortest form$/],
    ['a varint of six bytes', () => withColumn(2, (b) => Uint8Array.of(0x80, 0x80, 0x80, 0x80, 0x80, 0x00, ...b.subarray(1))), /columns: column 'kind' entry 0 at columns offset \d+ runs over 5 bytes$/],
    ['a varint of 2^32', () => withColumn(3, (b) => Uint8Array.of(0x80, 0x80, 0x80, 0x80, 0x10, ...b.subarray(1))), /columns: column 'missing' entry 0 at columns offset \d+ holds 4294967296, not a value below 2\^32$/],
    ['a kind whose rank exceeds the tile', () => withColumn(2, (b) => Uint8Array.of(5, ...b.subarray(1))), /tile 0 kind 5 \(rank 4\) is impossible for a 3x4 tile$/],
    ['a missing count above the tile', () => withColumn(3, (b) => Uint8Array.of(13, ...b.subarray(1))), /tile 0 missing count 13 is impossible for a 3x4 tile$/],
    ['a negative error in binary32', () => withColumn(5, () => new Uint8Array(new Float32Array([-1, 0, 0, 0]).buffer)), /tile 0 rmse -1 is not a finite number >= 0$/],
    ['an infinite error in binary64', () => withColumn(4, () => new Uint8Array(new Float64Array([Infinity, 0, 0, 0]).buffer)), /tile 0 max_err Infinity is not a finite number >= 0$/],
  ];
  for (const [what, make, message] of cases) {
    it(`refuses ${what}, naming the page`, async () => {
      const e = await refusal(make());
      expect(e.code).toBe(FormatCode.Malformed);
      expect(e.message).toMatch(/^archive index page 0 of field 'sample': /);
      expect(e.message).toMatch(message);
    });
  }

  it('reads an empty error column as zeros, and the writer writes one where every tile decodes exactly (spec 7.3, 7.5)', async () => {
    const zero = withColumn(5, () => new Uint8Array(0));
    expect((await (await open(zero)).loadIndex()).fields[0].rmse).toEqual([0, 0, 0, 0]);
    // Multiples of 1000 within a bound of 0.1 are stored exactly (spec 19, the lattice candidate, whose codes are far
    // smaller than those of a step of 0.2): both error columns are empty.
    const exact = pack(Float64Array.from({ length: 36 }, (_, k) => ((k * 7) % 11) * 1000), [6, 6], { bound: 'abs:0.1', tile: 3 });
    // The one index page lies between the payloads and the header (spec 3): decode the writer's own bytes.
    const end = 12 + parse(exact).payloads[0].reduce((sum, p) => sum + p.length, 0);
    const page = decode(exact.subarray(end, layout(exact).headerOffset)) as Uint8Array[];
    const { widths, parts } = split(page[0], 4);
    expect(widths).toBe(0);
    expect([parts[4], parts[5]]).toEqual([new Uint8Array(0), new Uint8Array(0)]);
    expect((await (await open(exact)).loadIndex()).fields[0].max_err).toEqual([0, 0, 0, 0]);
  });

  it('reads an error column written in binary64 as the same figures (a writer may; spec 7.3)', async () => {
    // The writer records shares of the tolerance (width code 3) here; the same figures as binary64 entries (code 2).
    const shares = (await (await open(masked())).loadIndex()).fields[0].max_err;
    const bytes = masked();
    const end = 12 + parse(bytes).payloads[0].reduce((sum, p) => sum + p.length, 0);
    expect(split((decode(bytes.subarray(end, layout(bytes).headerOffset)) as Uint8Array[])[0], 4).widths & 3).toBe(3);
    const wide = withColumn(4, () => new Uint8Array(new Float64Array(shares).buffer));
    const [a, b] = [await open(masked()), await open(wide)];
    expect((await b.loadIndex()).fields[0].max_err).toEqual((await a.loadIndex()).fields[0].max_err);
    expect(await values(wide)).toEqual(await values(masked()));
  });
});

describe('the header', () => {
  it('takes the fill value as nil or absent, a number (spec 6.2) or 8 bytes of binary64 (the reference writer)', async () => {
    const want = await values(masked());
    expect(await values(edit(masked(), (m) => (m.header.fields[0].fill = -999)))).toEqual(want);
    // Without a fill key the field has no fill value, so its fill cells are refused where a tile marks one.
    const e = await refusal(edit(masked(), (m) => delete m.header.fields[0].fill));
    expect(e.message).toMatch(/field 'sample' tile \d+: mask .*fill/);
  });

  it('keeps the sign of a fill of -0 written as a float 64 number', async () => {
    const v = new Float64Array([1, -0, 0, 2]);
    const b = pack(v, [2, 2], { bound: 'abs:0.1', tile: 2, fill: -0 });
    const viaNumber = edit(b, (m) => (m.header.fields[0].fill = -0));
    expect(Object.is((await open(viaNumber)).header.fields[0].fill, -0)).toBe(true);
    expect(await values(viaNumber)).toEqual(await values(b));
  });

  it('refuses a tolerance that is not finite, and names the value it got', async () => {
    const e = await refusal(edit(masked(), (m) => (m.header.fields[0].bound.tolerance = Infinity)));
    expect(e.message).toMatch(/bound tolerance must be a finite number >= 0, got Infinity/);
  });

  it('escapes control characters of names in messages, so a message stays one line and sends no terminal escapes', async () => {
    const e = await refusal(edit(masked(), (m) => ((m.header.fields[0].name = 'sst\n\u001b[31mred\u2028'), (m.header.fields[0].dtype = 'f16'))));
    expect(e.message).toBe(`archive field 'sst\\u000a\\u001b[31mred\\u2028': dtype "f16" is not "f32" or "f64"`);
  });

  it('quotes long values and names briefly in messages', async () => {
    const e = await refusal(edit(masked(), (m) => (m.header.fields[0].dtype = 'q'.repeat(10000))));
    expect(e.message.length).toBeLessThan(200);
    expect(e.message).toMatch(/dtype "q{40}"\.\.\. \(10000 characters\) is not "f32" or "f64"/);
  });
});

describe('tile payloads', () => {
  /**
   * A seed archive (the fuzz corpus, which is checked to hold every payload
   * feature) with a low-rank tile that has the named part and passes `also`,
   * whatever the encoder's choices are today.
   */
  function withPart(name: string, also: (w: PayloadLayout) => boolean = () => true): { bytes: Uint8Array; f: number; t: number; field: string; m: number; n: number } {
    for (const seed of buildSeeds()) {
      const md = parse(seed.bytes);
      for (let f = 0; f < md.payloads.length; f++) {
        const t = md.payloads[f].findIndex((p) => {
          const w = walk(p);
          return w.parts.some((x) => x.name === name) && also(w);
        });
        if (t >= 0) {
          const [m, n] = tileDims(md.header.fields[f], t);
          return { bytes: seed.bytes, f, t, field: md.header.fields[f].name, m, n };
        }
      }
    }
    throw new Error(`no seed archive has a ${name} part`);
  }

  /** Rewrite one payload of an archive through `change(payload, layout)`. */
  function editPayload(bytes: Uint8Array, f: number, t: number, change: (p: Uint8Array, w: PayloadLayout) => Uint8Array | void): Uint8Array {
    return edit(bytes, (md) => {
      const p = md.payloads[f][t];
      md.payloads[f][t] = change(p, walk(p)) ?? p;
    });
  }

  /** The named part of a payload. */
  function part(w: PayloadLayout, name: string): PartRef {
    const x = w.parts.find((s) => s.name === name);
    if (!x) throw new Error(`the payload has no ${name} part`);
    return x;
  }

  /** Rewrite one DEFLATE section of tile t of field f through `change` on its raw data. */
  function editSection(bytes: Uint8Array, f: number, t: number, name: string, change: (raw: Uint8Array) => Uint8Array | void): Uint8Array {
    return editPayload(bytes, f, t, (p, w) => {
      const s = part(w, name);
      let raw: Uint8Array = inflateSync(p.subarray(s.streamStart, s.end));
      raw = change(raw) ?? raw;
      const stored = deflateSync(raw);
      return splice(p, s.start, s.end, Uint8Array.of(...varintBytes(raw.length), ...varintBytes(stored.length), ...stored));
    });
  }

  /** Replace the stream of a coded part (its length varint follows) with `stream(old)`. */
  function editStream(bytes: Uint8Array, f: number, t: number, name: string, stream: (old: Uint8Array) => Uint8Array): Uint8Array {
    return editPayload(bytes, f, t, (p, w) => {
      const s = part(w, name);
      return replaceStream(p, s, stream(p.slice(s.streamStart, s.end)));
    });
  }

  /** A masked 6x7 field without a fill value, tiles of 3x4; tile 0 has cell 6 (row 1, column 2) NaN. */
  const noFill = (raw = false) => {
    const v = smooth(6, 7);
    if (raw) new Uint32Array(v.buffer).set([1, 0x7ff00000], 2 * 9); // a signalling NaN: raw NaN class
    else v[9] = NaN;
    return pack(v, [6, 7], { bound: 'rel:1e-2', tile: [3, 4] });
  };

  it('refuses a fill cell in a field without a fill value, naming the cell by row and column', async () => {
    const b = editStream(noFill(), 0, 0, 'mask', () => {
      const classes = new Uint8Array(12);
      classes[6] = 4;
      classes[5] = 1;
      return encodeClasses(classes, 3, 4);
    });
    const e = await refusal(b);
    expect(e.message).toMatch(/^archive field 'field' tile 0: mask cell 5 \(row 1, column 1\) is a fill cell but the field has no fill value$/);
  });

  it('refuses raw NaN bits that are a number', async () => {
    const b = editPayload(noFill(true), 0, 0, (p, w) => {
      expect(w.mask!.rawEnd - w.mask!.rawStart).toBe(8);
      new DataView(p.buffer, p.byteOffset).setFloat64(w.mask!.rawStart, 2.5, true);
    });
    const e = await refusal(b);
    expect(e.message).toMatch(/raw NaN 0 of the mask holds the number 2.5, not a NaN/);
  });

  it('refuses a raw NaN length that does not match the raw NaN cells of the class map', async () => {
    for (const [lie, cut] of [
      [16, false],
      [0, false],
      [0, true],
    ] as const) {
      const b = editPayload(noFill(true), 0, 0, (p, w) => {
        const out = cut ? splice(p, w.mask!.rawStart, w.mask!.rawEnd, new Uint8Array(0)) : p;
        return setLength(out, w.mask!.rawLengthAt, lie);
      });
      const e = await refusal(b);
      expect(e.code).toBe(FormatCode.Malformed);
      expect(e.message).toMatch(new RegExp(`^archive field 'field' tile 0: mask holds ${lie} bytes of raw NaN bits, its 1 raw NaN cells need 8$`));
    }
  });

  it('refuses a class above 5 in a coded class map, and a class map that marks no cell missing', async () => {
    for (const bad of [6, 7, 8]) {
      const b = editStream(noFill(), 0, 0, 'mask', () => {
        const classes = new Uint8Array(12);
        classes[6] = 4;
        // The coder writes class - 1 in three bits (5..7 fit); in the last row, as no cell below takes it as a context.
        classes[10] = bad;
        return encodeClasses(classes, 3, 4);
      });
      const e = await refusal(b);
      expect(e.code).toBe(FormatCode.Malformed);
      expect(e.message).toMatch(new RegExp(`^archive field 'field' tile 0: mask \\(coded stream at (payload|file) offset \\d+, \\d+ bytes\\): cell 10 has class ${bad}, above the largest, 5$`));
    }
    const none = editStream(noFill(), 0, 0, 'mask', () => encodeClasses(new Uint8Array(12), 3, 4));
    expect((await refusal(none)).message).toMatch(/^archive field 'field' tile 0: mask at (payload|file) offset \d+ marks no cell missing$/);
  });

  it('refuses a coded stream whose length runs past the payload, before decoding anything', async () => {
    for (const name of ['residual', 'group 0', 'mask']) {
      const r = withPart(name);
      for (const huge of [2 ** 32 - 1, 2 ** 31]) {
        const b = editPayload(r.bytes, r.f, r.t, (p, w) => setLength(p, part(w, name).lengthAt, huge));
        const e = await refusal(b);
        expect(e.code, name).toBe(FormatCode.Truncated);
        const label = name === 'mask' ? 'mask classes' : `${name === 'group 0' ? 'factor group 0' : name} stream`;
        expect(e.message, name).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: ${label} needs ${huge} bytes at (payload|file) offset \\d+ but only \\d+ remain$`));
      }
    }
  });

  it('refuses a coded stream shorter than its values, or of fewer than 4 bytes', async () => {
    for (const name of ['residual', 'group 0', 'mask']) {
      const r = withPart(name);
      const what = name === 'group 0' ? 'factor group 0' : name;
      for (const cut of [1, 2]) {
        const e = await refusal(editStream(r.bytes, r.f, r.t, name, (old) => old.slice(0, old.length - cut)));
        expect(e.code, name).toBe(FormatCode.Malformed);
        // The decoder reads the first missing byte where it read it before the cut (its decisions up to
        // there depend only on earlier bytes); past it, it reads zeros, so its later decisions and how
        // many more bytes it reads may change: at least one byte is missing, not always `cut`.
        const short = new RegExp(`^archive field '${r.field}' tile ${r.t}: ${what} \\(coded stream at (payload|file) offset \\d+, \\d+ bytes\\): the stream ends (\\d+) byte\\(s\\) before its (values|classes) do$`).exec(e.message);
        expect(short, `${name}: ${e.message}`).not.toBeNull();
        expect(Number(short![2])).toBeGreaterThanOrEqual(1);
      }
      const e = await refusal(editStream(r.bytes, r.f, r.t, name, (old) => old.slice(0, 3)));
      expect(e.message, name).toMatch(/a coded stream is at least 4 bytes, this one 3$/);
    }
  });

  it('refuses bytes after the end of a coded stream, even when the length word counts them', async () => {
    for (const name of ['residual', 'group 0', 'mask']) {
      const r = withPart(name);
      const what = name === 'group 0' ? 'factor group 0' : name;
      for (const extra of [Uint8Array.of(0), Uint8Array.of(0xff, 0x12)]) {
        const e = await refusal(editStream(r.bytes, r.f, r.t, name, (old) => Uint8Array.of(...old, ...extra)));
        expect(e.code, name).toBe(FormatCode.Malformed);
        expect(e.message, name).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: ${what} \\(coded stream at (payload|file) offset \\d+, \\d+ bytes\\): ${extra.length} byte\\(s\\) follow the end of the stream$`));
      }
    }
  });

  it('refuses a coded value above 2^30 in magnitude, and factor differences whose sum leaves 2^30', async () => {
    // A residual without mask: every cell's code is in the stream (a code past 2^30 is refused whatever the predictor).
    const r = withPart('residual', (w) => !(w.flags & PayloadFlag.Mask));
    const big = editStream(r.bytes, r.f, r.t, 'residual', () => {
      const q = new Int32Array(r.m * r.n);
      q[3] = -(2 ** 30 + 1);
      return encodeInts(q, r.m, r.n, null);
    });
    expect((await refusal(big)).message).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: residual \\(coded stream at (payload|file) offset \\d+, \\d+ bytes\\): value 3 exceeds 2\\^30 in magnitude$`));
    // Exactly 2^30 is a valid code.
    const edge = editStream(r.bytes, r.f, r.t, 'residual', () => {
      const q = new Int32Array(r.m * r.n);
      q[3] = 2 ** 30;
      return encodeInts(q, r.m, r.n, null);
    });
    const a = await open(edge);
    for (const name of a.names) await a.read(name);
    // Other values than the seed's: the value CRC says so.
    const report = await a.check();
    expect(report.failures.map((x) => x.what)).toEqual([expect.stringMatching(/value CRC-32 mismatch/)]);

    const d = withPart('group 0', (w) => (w.flags & PayloadFlag.FactorDelta) !== 0);
    expect(d.m).toBeGreaterThan(1);
    const over = editStream(d.bytes, d.f, d.t, 'group 0', (old) => {
      const size = walk(parse(d.bytes).payloads[d.f][d.t]).groups[0].size;
      const row = new Int32Array(size * (d.m + d.n));
      decodeInts(old, 1, row.length, null, row);
      row[0] = 2 ** 30;
      row[1] = 1;
      return encodeInts(row, 1, row.length, null);
    });
    expect((await refusal(over)).message).toMatch(new RegExp(`^archive field '${d.field}' tile ${d.t}: factor group 0: a factor code exceeds 2\\^30 after summing its differences$`));
  });

  it('refuses the factor difference flag on a payload of rank 0', async () => {
    const r = withPart('residual', (w) => w.rank === 0);
    const e = await refusal(editPayload(r.bytes, r.f, r.t, (p) => void (p[1] |= PayloadFlag.FactorDelta)));
    expect(e.message).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: factor difference flag on a payload of rank 0$`));
  });

  it('refuses the reserved flag bits and centre form 3, and a rank varint longer than its shortest form (spec/FORMAT.md 2, 10.6.1)', async () => {
    const g = withPart('group 0', (w) => !(w.flags & PayloadFlag.Residual));
    for (const bit of [0x08, 0x80]) {
      const e = await refusal(editPayload(g.bytes, g.f, g.t, (p) => void (p[1] |= bit)));
      expect(e.message).toMatch(new RegExp(`^archive field '${g.field}' tile ${g.t}: unknown payload flags 0x[0-9a-f]+ at (payload|file) offset \\d+ \\(this reader knows 0x77\\)$`));
    }
    const form3 = await refusal(editPayload(g.bytes, g.f, g.t, (p) => void (p[1] |= 0x60)));
    expect(form3.message).toMatch(new RegExp(`^archive field '${g.field}' tile ${g.t}: centre form 3 \\(flags bits 5-6\\) is not defined$`));
    // Rank r written as two bytes (r | 0x80, 0): the same number, not in its shortest form. The index copy still says r.
    const long = await refusal(editPayload(g.bytes, g.f, g.t, (p, w) => splice(p, 2, w.centreAt, Uint8Array.of(w.rank | 0x80, 0))));
    expect(long.message).toMatch(new RegExp(`^archive field '${g.field}' tile ${g.t}: rank at (payload|file) offset \\d+ is not in its shortest form$`));
  });

  it('refuses a residual byte with reserved bits or predictor 7, an integer step of 0, and the field step where the tolerance gives none; takes the field step from the stored tolerance (spec/FORMAT.md 10.6.5)', async () => {
    const r = withPart('residual', (w) => w.residualStepForm === 0);
    for (const bits of [0x40, 0x80]) {
      const e = await refusal(editPayload(r.bytes, r.f, r.t, (p, w) => void (p[w.residualByteAt!] |= bits)));
      expect(e.message).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: residual byte 0x[0-9a-f]+ at (payload|file) offset \\d+ has bits outside 0x3f set$`));
    }
    // Bit 3 names the symbol coder, which a file without required flag bit 2 may not use (spec/FORMAT.md 4, 10.6.5).
    const coder = await refusal(editPayload(r.bytes, r.f, r.t, (p, w) => void (p[w.residualByteAt!] |= 0x08)));
    expect(coder.message).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: residual byte 0x[0-9a-f]+ at (payload|file) offset \\d+ names the symbol coder \\(bit 3\\), but the file's required flag bit 2 \\(symbols\\) is not set$`));
    const seven = await refusal(editPayload(r.bytes, r.f, r.t, (p, w) => void (p[w.residualByteAt!] |= 7)));
    expect(seven.message).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: residual predictor 7 at (payload|file) offset \\d+ is not one of 0..6$`));
    // Step form 3 with the varint 0 inserted after the residual byte: an integer step must be positive.
    const zero = await refusal(editPayload(r.bytes, r.f, r.t, (p, w) => {
      const out = splice(p, w.residualByteAt! + 1, w.residualByteAt! + 1, Uint8Array.of(0));
      out[w.residualByteAt!] |= 3 << 4;
      return out;
    }));
    expect(zero.message).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: residual step 0 at (payload|file) offset \\d+ is not a positive finite number$`));
    const none = await refusal(edit(r.bytes, (m) => (m.header.fields[r.f].bound.tolerance = 0)));
    expect(none.message).toMatch(new RegExp(`^archive field '${r.field}' tile \\d+: a residual with the field step in a field whose tolerance gives no field step$`));
    // A tolerance half as large names a step half as large: the payload still decodes, to other values, which the
    // value checksum the encoder recorded (spec 12) then catches.
    const halved = edit(r.bytes, (m) => (m.header.fields[r.f].bound.tolerance /= 2));
    const report = await (await open(halved)).check();
    expect(report.failures.map((x) => x.what)).toContainEqual(expect.stringMatching(/value CRC-32 mismatch/));
  });

  it('every centre form and step form is read exactly: the seed payloads that use them decode to the values check() verifies', async () => {
    // Every seed archive passes check() (values CRC-compared with what the encoder verified); here the seed payloads
    // together must hold a binary32 and an integer centre, and a binary32, an integer and the field's step, so all are exercised.
    const centres = new Set<number>();
    const steps = new Set<number>();
    for (const seed of buildSeeds()) {
      for (const ps of parse(seed.bytes).payloads) {
        for (const p of ps) {
          const w = walk(p);
          if (w.method !== 1) continue;
          centres.add(w.centreForm);
          if (w.residualStepForm !== undefined) steps.add(w.residualStepForm);
        }
      }
      expect((await (await open(seed.bytes)).check()).failures).toEqual([]);
    }
    expect([...centres].sort()).toEqual(expect.arrayContaining([0, 2]));
    expect([...steps].sort()).toEqual(expect.arrayContaining([0, 1, 3]));
  });

  it('refuses an exception holding the fill value, or a NaN', async () => {
    const { bytes, f, t, field } = withPart('exceptions');
    const h = parse(bytes).header.fields[f];
    const wide = h.dtype === 'f64';
    const put = (value: number) =>
      editSection(bytes, f, t, 'exceptions', (raw) => {
        const d = new DataView(raw.buffer);
        const at = 4 + 4 * d.getUint32(0, true);
        if (wide) d.setFloat64(at, value, true);
        else d.setFloat32(at, value, true);
      });
    const e = await refusal(put(NaN));
    expect(e.message).toMatch(new RegExp(`^archive field '${field}' tile ${t}: valid cell \\d+ \\(row \\d+, column \\d+\\) decodes to NaN, not a finite value$`));
    // With a fill value set to what the exception holds (the header is checked, not the payload, for fill values).
    const withFill = edit(put(-12345), (m) => {
      const b = new Uint8Array(8);
      new DataView(b.buffer).setFloat64(0, -12345, true);
      m.header.fields[f].fill = b;
    });
    expect((await refusal(withFill)).message).toMatch(/exception 0 at cell \d+ \(row \d+, column \d+\) holds the fill value/);
  });

  it('refuses a residual step of NaN and a centre of Infinity, naming the value and where the centre is', async () => {
    const r = withPart('residual', (w) => w.residualStepAt !== undefined);
    const e1 = await refusal(editPayload(r.bytes, r.f, r.t, (p) => setResidualStep(p, NaN)));
    expect(e1.message).toMatch(/residual step NaN at (payload|file) offset \d+ is not a positive finite number/);
    const e2 = await refusal(edit(r.bytes, (m) => (m.payloads[r.f][r.t] = setCentre(m.payloads[r.f][r.t], Infinity))));
    // Offsets count in the payload, or in the file when the reader passes the payload's offset; the centre follows the rank's varint.
    const at = walk(parse(r.bytes).payloads[r.f][r.t]).centreAt;
    expect(e2.message).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: centre Infinity at (payload offset ${at}|file offset \\d+) is not finite$`));
  });

  it('payload errors name file offsets when the reader knows where the payload is', async () => {
    const r = withPart('residual');
    const b = edit(r.bytes, (m) => (m.payloads[r.f][r.t] = setCentre(m.payloads[r.f][r.t], Infinity)));
    const offset = (await (await open(b)).loadIndex()).fields[r.f].offset[r.t];
    const at = walk(parse(r.bytes).payloads[r.f][r.t]).centreAt;
    expect((await refusal(b)).message).toMatch(new RegExp(`centre Infinity at file offset ${offset + at} is not finite$`));
  });

  it('refuses a recorded prefix that does not end at a factor group, even with a CRC of the bytes it covers', async () => {
    const r = withPart('group 1');
    const base = await open(r.bytes);
    const q = (await base.loadIndex()).fields[r.f].prefix![r.t];
    expect(q.length).toBeGreaterThanOrEqual(4);
    for (const off of [-1, 1]) {
      const b = edit(r.bytes, (m) => {
        const quad = m.index.fields[r.f].prefix[r.t];
        quad[0] += off;
        quad[1] = crc32(m.payloads[r.f][r.t].subarray(0, quad[0]));
      });
      const a = await open(b);
      // The whole payload is untouched: a full read and check() are fine; the progressive read is refused.
      await a.read(r.field);
      let e: unknown = null;
      try {
        await a.read(r.field, { bound: 'abs:1e300' });
      } catch (x) {
        e = x;
      }
      expect(e).toBeInstanceOf(FormatError);
      expect((e as FormatError).message).toMatch(new RegExp(`^archive field '${r.field}' tile ${r.t}: the index lists a prefix of ${q[0] + off} bytes that does not end at a factor group$`));
    }
  });

  it('refuses bytes after a DEFLATE stream inside a section (exact values, exceptions)', async () => {
    for (const [name, what] of [
      ['values', 'exact values'],
      ['exceptions', 'exceptions'],
    ]) {
      const r = withPart(name);
      const b = editPayload(r.bytes, r.f, r.t, (p, w) => {
        const s = part(w, name);
        return setLength(splice(p, s.end, s.end, Uint8Array.of(0)), s.lengthAt, s.end - s.streamStart + 1);
      });
      expect((await refusal(b)).message, name).toMatch(new RegExp(`${what} has 1 bytes after the end of the stream of its DEFLATE data \\(section at (payload|file) offset \\d+\\)`));
    }
  });
});
