/**
 * Parts of a run, joined: for each bound kind, the parts packed apart under
 * one plan and joined give the same bytes as one pack of the whole field
 * (the joined archive copies payloads; nothing is encoded twice). The
 * fields are the vega-datasets grids (data/annual-precip.json, whose land
 * cells are null, read as NaN: a masked field; data/volcano.json), mirror
 * tiled to a few hundred rows (see test/archive/datasets.ts).
 */
import { createHash } from 'node:crypto';
import { describe, expect, it } from 'vitest';
import { ArchiveBuilder, FormatError, InputError, MemorySink, MemorySource, open, type PackOptions } from '../../src/index.js';
import { makePlan, parsePlan, planText, partRange, type RunPlan } from '../../src/parts/plan.js';
import { HEADER_ROOM, maxPartTiles, packPlanned, PART_KEYS, TALLY_BYTES } from '../../src/parts/part.js';
import { joinParts } from '../../src/parts/join.js';
import { memoryBands } from '../../src/codec/tiles.js';
import { mirrored, precip, volcano } from '../archive/datasets.js';
import { layeredArchive, smoothFactors } from '../format/layered.js';
import { rebuild } from '../format/paged.js';

type Case = { values: Float32Array; shape: [number, number]; o: PackOptions & { indexPage?: [number, number] } };

function single({ values, shape, o }: Case): Uint8Array {
  const sink = new MemorySink();
  const b = new ArchiveBuilder(sink);
  b.addBands((r0, count) => values.subarray(r0 * shape[1], (r0 + count) * shape[1]), shape, 'f32', o);
  b.finish();
  return sink.bytes();
}

async function plan({ values, shape, o }: Case): Promise<RunPlan> {
  const tile = o.tile ?? 'auto';
  const t = tile === 'auto' ? [64, 64] : typeof tile === 'number' ? [tile, tile] : tile;
  const bound = typeof o.bound === 'string' ? { mode: o.bound.split(':')[0] as 'abs', value: Number(o.bound.split(':')[1]) } : o.bound;
  const spec = { name: o.name ?? 'field', dtype: 'f32' as const, rows: shape[0], cols: shape[1], tileRows: t[0], tileCols: t[1], bound, fill: o.fill ?? null, autoTile: tile === 'auto', progressive: o.progressive === true };
  const p = await makePlan(memoryBands(values, shape[1]), { spec, page: o.indexPage ?? [8, 8], file: 'test' });
  // The plan goes through its JSON form, as it does between machines.
  return parsePlan(planText(p), 'plan.json');
}

async function part(c: Case, p: RunPlan, k: number, n: number): Promise<Uint8Array> {
  const sink = new MemorySink();
  await packPlanned(sink, memoryBands(c.values, c.shape[1]), p, { part: [k, n] });
  return sink.bytes();
}

async function joined(parts: Uint8Array[]): Promise<Uint8Array> {
  const sink = new MemorySink();
  await joinParts(parts.map((b, i) => new MemorySource(b, `part-${i}.rfz`)), sink);
  return sink.bytes();
}

const precipField = (rows: number, cols: number): Case['values'] => mirrored(precip(), cols, 0, rows);

describe('join of parts', () => {
  const cases: [string, Case, number[]][] = [
    ['rel:1e-3 on a masked field (annual-precip land is NaN)', { values: precipField(256, 192), shape: [256, 192], o: { bound: 'rel:1e-3', tile: 32, indexPage: [2, 8], name: 'precip' } }, [4]],
    ['psnr:60 on the masked field (the L2 budget shared over the field)', { values: precipField(256, 192), shape: [256, 192], o: { bound: 'psnr:60', tile: 32, indexPage: [2, 8], name: 'precip' } }, [3]],
    ['rmse with a fill value and progressive layout', { values: withFill(mirrored(volcano(), 120, 0, 200)), shape: [200, 120], o: { bound: 'rmse:0.5', tile: [16, 40], indexPage: [2, 3], fill: -9999, progressive: true } }, [5]],
    ['abs with the tile shape chosen by trial', { values: mirrored(volcano(), 150, 0, 400), shape: [400, 150], o: { bound: 'abs:0.05', indexPage: [1, 8] } }, [3]],
  ];
  for (const [what, c, counts] of cases) {
    it(`is byte-identical to a single pack: ${what}`, async () => {
      const want = single(c);
      const p = await plan(c);
      // Packing the whole field under the plan is the single pack too.
      const whole = new MemorySink();
      await packPlanned(whole, memoryBands(c.values, c.shape[1]), p);
      expect(Buffer.from(whole.bytes()).equals(Buffer.from(want))).toBe(true);
      // The tile shape chosen by trial sets the bands, hence how many parts the field splits into.
      expect(partRange(p, 1, 1).bands[1]).toBeGreaterThanOrEqual(Math.max(...counts));
      for (const n of counts) {
        const parts: Uint8Array[] = [];
        for (let k = 1; k <= n; k++) parts.push(await part(c, p, k, n));
        // Given in any order.
        const got = await joined(parts.reverse());
        expect(got.length).toBe(want.length);
        expect(Buffer.from(got).equals(Buffer.from(want))).toBe(true);
      }
      // Every part is an archive of its own rows that decodes to the joined archive's values there.
      const halves = await Promise.all([1, 2].map((k) => part(c, p, k, 2)));
      const a = await open(await joined(halves));
      const part2 = await open(halves[1]);
      const r = partRange(p, 2, 2).rows;
      const w = await a.read(undefined, { rows: r });
      expect(Buffer.from((await part2.read()).values.buffer).equals(Buffer.from(w.values.buffer))).toBe(true);
    }, 120_000);
  }
});

/** Volcano heights with a block of cells set to the fill value -9999 (a hole in the grid). */
function withFill(v: Float32Array): Float32Array {
  for (let i = 40; i < 90; i++) for (let j = 20; j < 70; j++) v[i * 120 + j] = -9999;
  return v;
}

describe('join refuses', () => {
  const c: Case = { values: precipField(256, 64), shape: [256, 64], o: { bound: 'rel:1e-2', tile: 16, indexPage: [2, 4], name: 'precip' } };
  it('a missing part, a part given twice, and parts of another run, each in one line', async () => {
    const p = await plan(c);
    const parts = await Promise.all([1, 2, 3, 4].map((k) => part(c, p, k, 4)));
    await expect(joined([parts[0], parts[1], parts[3]])).rejects.toThrow(/run 'precip-[0-9a-f]{12}' has 4 parts; part 3 is missing/);
    await expect(joined([parts[0], parts[1], parts[1], parts[2], parts[3]])).rejects.toThrow(/part 2\/4 of run .* is given twice: 'part-1.rfz' and 'part-2.rfz'/);
    const other = await plan({ ...c, o: { ...c.o, bound: 'rel:2e-2' } });
    const stranger = await part(c, other, 3, 4);
    const e = await joined([parts[0], parts[1], stranger, parts[3]]).catch((x: unknown) => x);
    expect(e).toBeInstanceOf(InputError);
    expect((e as Error).message).toMatch(/'part-2.rfz' is part 3\/4 of run 'precip-[0-9a-f]{12}' \(plan [0-9a-f]{12}\), 'part-0.rfz' of run/);
    // A whole archive is not a part.
    await expect(joined([single(c)])).rejects.toThrow(/not a part of a run/);
    // A damaged payload is found by its CRC-32, without decoding.
    const bad = parts[1].slice();
    bad[20] ^= 0xff;
    await expect(joined([parts[0], bad, parts[2], parts[3]])).rejects.toBeInstanceOf(FormatError);
  }, 60_000);

  it('an archive with a field layer is refused in one line, even with the attributes of a part', async () => {
    const { left, right } = smoothFactors(12, 10, 2);
    const made = layeredArchive({ values: new Float64Array(120).map((_, c) => Math.cos(c / 7)), shape: [12, 10], tile: [6, 5], tol: 1e-2, rank: 2, left, right });
    const asPart = rebuild(made.bytes, { header: (h) => (h.attrs = { [PART_KEYS.run]: 'r', [PART_KEYS.plan]: 'p', [PART_KEYS.part]: [1, 1], [PART_KEYS.rows]: [0, 12, 12], [PART_KEYS.tally]: [] }) });
    const e = await joinParts([new MemorySource(asPart, 'layered.rfz')], new MemorySink()).catch((x: unknown) => x);
    expect(e).toBeInstanceOf(FormatError);
    expect((e as Error).message).toBe("layered.rfz: part 1/1 of run 'r': field 'field' has a field layer, which a part never has: the parts of a run are packed without one");
  });

  it('a part of more tiles than its readers\' header limit allows, before encoding; one at the limit is read', async () => {
    // Part 2 of 2 holds 128 rows in tiles of 16: 8 tile rows of 4 tiles, 32 tiles (4 bands of 8).
    const p = await plan(c);
    const tiles = partRange(p, 2, 2).tiles[1] - partRange(p, 2, 2).tiles[0];
    expect(tiles).toBe(32);
    const limit = HEADER_ROOM + TALLY_BYTES * tiles;
    expect(maxPartTiles(limit)).toBe(tiles);
    const e = await packPlanned(new MemorySink(), memoryBands(c.values, 64), p, { part: [2, 2], maxHeaderBytes: limit - 1 }).catch((x: unknown) => x);
    expect(e).toBeInstanceOf(InputError);
    expect((e as Error).message).toBe(`part 2/2 holds 32 tiles; a part records 18 bytes of error tally per tile in its header, which readers limit to ${limit - 1} bytes, so a part holds at most 31 tiles: split the field into at least 3 parts`);
    // At the limit the part is written, and readers holding to that limit join it.
    const parts = [await part(c, p, 1, 2), await (async () => {
      const sink = new MemorySink();
      await packPlanned(sink, memoryBands(c.values, 64), p, { part: [2, 2], maxHeaderBytes: limit });
      return sink.bytes();
    })()];
    const sink = new MemorySink();
    await joinParts(parts.map((b, i) => new MemorySource(b, `part-${i}.rfz`)), sink, { limits: { maxHeaderBytes: limit } });
    expect(Buffer.from(sink.bytes()).equals(Buffer.from(single(c)))).toBe(true);
    // The default: 16 MiB, less the room kept for the rest of the header, at 18 bytes a tile.
    expect(maxPartTiles()).toBe(Math.floor(((16 << 20) - (64 << 10)) / 18));
  }, 60_000);

  it('a plan edited after it was written, a part count above the bands, and other input rows', async () => {
    const p = await plan(c);
    const text = planText(p).replace('"keep":false', '"keep":true');
    expect(() => parsePlan(text, 'plan.json')).toThrow(/plan.json: the plan was changed after 'rankfield plan' wrote it/);
    expect(() => parsePlan('{"a":1}', 'plan.json')).toThrow(/plan.json: not a plan written by 'rankfield plan'/);
    // A plan of another program version, with a hash of its own that matches: refused, since its parts' payloads could differ.
    const o = JSON.parse(planText(p)) as Record<string, unknown>;
    o.writer = 'rankfield 0.0.1';
    o.hash = createHash('sha256').update(JSON.stringify({ writer: o.writer, source: o.source, field: o.field, l2: o.l2, keep: o.keep })).digest('hex');
    expect(() => parsePlan(JSON.stringify(o), 'old.json')).toThrow(/old.json: the plan was made by rankfield 0.0.1, this is rankfield \S+; the parts of a run are packed by the program that made its plan/);
    // 256 rows in bands of 2 x 16 rows: 8 bands.
    expect(() => partRange(p, 1, 9)).toThrow(/8 bands of 32 rows .* at most 8 parts/);
    const changed = c.values.slice();
    changed[100 * 64 + 5] += 1;
    const sink = new MemorySink();
    await expect(packPlanned(sink, memoryBands(changed, 64), p, { part: [4, 8] })).rejects.toThrow(/rows 96..127 differ from those plan .* was made from/);
    // Other parts read other rows, and pass; a part reads its own rows only.
    const asked: [number, number][] = [];
    const counting = { band: (r0: number, count: number) => (asked.push([r0, r0 + count]), changed.subarray(r0 * 64, (r0 + count) * 64)) };
    const range = await packPlanned(new MemorySink(), counting, p, { part: [3, 8] });
    expect(range.rows).toEqual([64, 96]);
    expect(asked.length).toBeGreaterThan(0);
    for (const [a, b] of asked) expect(a >= 64 && b <= 96, `rows ${a}..${b}`).toBe(true);
  }, 60_000);
});
