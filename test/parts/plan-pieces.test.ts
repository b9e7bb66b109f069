/**
 * A plan made in parts (range pass, merge, spectra pass, merge) is the plan
 * one process makes, byte for byte, for abs, rel, rmse and psnr bounds, on
 * fields with and without missing cells. The fields are the vega-datasets
 * grids (data/annual-precip.json, whose land cells are null, read as NaN:
 * a masked field; data/volcano.json), mirror tiled (test/archive/datasets.ts).
 */
import { describe, expect, it } from 'vitest';
import { InputError } from '../../src/index.js';
import { memoryBands, type FieldSpec } from '../../src/codec/tiles.js';
import { crc32, crc32Combiner } from '../../src/format/crc32.js';
import { makePlan, planText, type PlanRequest } from '../../src/parts/plan.js';
import { mergeRange, mergeSpectra, rangePiece, spectraPiece, type PlanPiece } from '../../src/parts/plan-pieces.js';
import { parsePiece, pieceText } from '../../src/parts/piece-text.js';
import { mirrored, precip, volcano } from '../archive/datasets.js';
import { refusal } from '../refusal.js';

type Case = { values: Float32Array; req: PlanRequest };

function request(shape: [number, number], bound: string, o: { tile?: [number, number]; fill?: number | null; page?: [number, number]; name?: string } = {}): PlanRequest {
  const [mode, value] = bound.split(':');
  const spec: FieldSpec = { name: o.name ?? 'field', dtype: 'f32', rows: shape[0], cols: shape[1], tileRows: o.tile?.[0] ?? 64, tileCols: o.tile?.[1] ?? 64, bound: { mode: mode as 'abs', value: Number(value) }, fill: o.fill ?? null, autoTile: o.tile === undefined, guardFill: true };
  return { spec, page: o.page ?? [2, 4], file: 'field.npy' };
}

/** Pieces go through their JSON text, as they do between machines. */
const viaText = (p: PlanPiece, label: string) => ({ label, piece: parsePiece(pieceText(p), label) });

/** The plan made in parts: n1 range pieces, merged; for L2 bounds n2 spectra pieces, merged. */
function splitPlan(c: Case, n1: number, n2: number): string {
  const src = memoryBands(c.values, c.req.spec.cols);
  const ranges = Array.from({ length: n1 }, (_, i) => viaText(rangePiece(src, c.req, i + 1, n1), `r-${i + 1}.json`));
  const { plan, base } = mergeRange(src, ranges.reverse(), { file: 'field.npy' });
  if (!base) return planText(plan);
  const spectra = Array.from({ length: n2 }, (_, i) => viaText(spectraPiece(src, plan, i + 1, n2), `s-${i + 1}.json`));
  return planText(mergeSpectra(src, spectra));
}

/** Volcano heights with a block of cells set to the fill value -9999 (a hole in the grid). */
function withFill(v: Float32Array, cols: number): Float32Array {
  for (let i = 40; i < 90; i++) for (let j = 20; j < 70; j++) v[i * cols + j] = -9999;
  return v;
}

describe('a plan made in parts', () => {
  const masked = mirrored(precip(), 192, 0, 256);
  const whole = mirrored(volcano(), 150, 0, 320);
  const holed = withFill(mirrored(volcano(), 120, 0, 200), 120);
  const cases: [string, Case, number, number][] = [
    ['abs, tile chosen by trial, no missing cells', { values: whole, req: request([320, 150], 'abs:0.05') }, 3, 0],
    ['rel on a masked field (annual-precip land is NaN)', { values: masked, req: request([256, 192], 'rel:1e-3', { tile: [32, 32], name: 'precip' }) }, 5, 0],
    ['rmse with a fill value', { values: holed, req: request([200, 120], 'rmse:0.5', { tile: [16, 40], page: [2, 3], fill: -9999 }) }, 4, 3],
    ['psnr on the masked field', { values: masked, req: request([256, 192], 'psnr:60', { tile: [32, 32], name: 'precip' }) }, 2, 4],
    // The trial picks the whole 160 x 120 field as one tile here: one band, so one spectra piece.
    ['psnr, tile chosen by trial, no missing cells', { values: mirrored(volcano(), 120, 0, 160), req: request([160, 120], 'psnr:50') }, 7, 1],
  ];
  for (const [what, c, n1, n2] of cases) {
    it(`is byte-identical to the plan of one process: ${what}`, async () => {
      const one = planText(await makePlan(memoryBands(c.values, c.req.spec.cols), c.req));
      const split = splitPlan(c, n1, n2);
      expect(split).toBe(one);
      // L2 bounds get an L2 plan; the others none.
      expect(JSON.parse(split).l2 === null).toBe(c.req.spec.bound.mode === 'abs' || c.req.spec.bound.mode === 'rel');
    }, 60_000); // the tile trial encodes a sample at each candidate shape: several seconds on a loaded 2-core machine
  }

  it('refuses pieces of another request, repeated or missing parts, and other input, each in one line', () => {
    const c: Case = { values: masked, req: request([256, 192], 'psnr:60', { tile: [32, 32] }) };
    const src = memoryBands(c.values, 192);
    const r = [1, 2, 3].map((k) => viaText(rangePiece(src, c.req, k, 3), `r-${k}.json`));
    expect(refusal(() => mergeRange(src, [r[0], r[2]])).message).toBe('the range pass has 3 parts; part 2 is missing');
    expect(refusal(() => mergeRange(src, [r[0], r[1], r[1], r[2]])).message).toBe("part 2/3 of the range pass is given twice: 'r-2.json' and 'r-2.json'");
    const other = viaText(rangePiece(src, request([256, 192], 'psnr:50', { tile: [32, 32] }), 2, 3), 'other.json');
    expect(refusal(() => mergeRange(src, [r[0], other, r[2]])).message).toBe("'other.json' and 'r-1.json' are pieces of different requests (their field or options differ): merge the pieces of one");
    const { plan } = mergeRange(src, r);
    const s = [1, 2].map((k) => viaText(spectraPiece(src, plan, k, 2), `s-${k}.json`));
    expect(refusal(() => mergeSpectra(src, [s[0], r[1]])).message).toMatch(/is a piece of the range pass, 's-1.json' of the spectra pass/);
    expect(refusal(() => mergeRange(src, s)).message).toBe("'s-1.json' is a piece of the spectra pass, not the range pass");
    // A piece edited after it was written.
    const text = pieceText(s[1].piece).replace('"part":[2,2]', '"part":[1,2]');
    expect(refusal(() => parsePiece(text, 's-2.json')).message).toMatch(/^s-2.json: the piece was changed after/);
    // Not a piece at all, another version, a piece cut short: one line each.
    expect(refusal(() => parsePiece('{"a":1}', 'x.json')).message).toBe("x.json: not a piece written by 'rankfield plan --part' (no rankfield_plan_piece key)");
    expect(refusal(() => parsePiece('{"rankfield_plan_piece":', 'x.json')).message).toBe("x.json: not a piece written by 'rankfield plan --part' (not JSON)");
    expect(refusal(() => parsePiece('{"rankfield_plan_piece":9}', 'x.json')).message).toMatch(/piece version 9; this program reads version 1/);
    expect(refusal(() => parsePiece(pieceText(s[0].piece).slice(0, 200), 's-1.json')).message).toMatch(/^s-1.json: not a piece written by 'rankfield plan --part' \(not JSON\)$/);
    // A spectra pass over other input rows: refused by the base's band CRC-32.
    const changed = c.values.slice();
    changed[200 * 192 + 7] += 1;
    expect(refusal(() => spectraPiece(memoryBands(changed, 192), plan, 2, 2)).message).toMatch(/rows 192..255 differ from those plan .* was made from/);
    // The merge reads the sampled tiles again: other input there is refused by their CRC-32.
    const e = refusal(() => mergeSpectra(memoryBands(changed, 192), s));
    expect(e).toBeInstanceOf(InputError);
    expect(e.message).toMatch(/tile \d+ differs from the one the spectra pass read/);
  }, 60_000);
});

describe('crc32Combiner', () => {
  it('gives the CRC-32 of the bytes one after another', () => {
    // Check against crc32 over the concatenation (the CRC-32 of ISO 3309 / ITU-T V.42; its check value is tested in test/format/crc32.test.ts).
    const bytes = Uint8Array.from({ length: 1000 }, (_, i) => (i * 37 + 11) & 0xff);
    for (const cut of [0, 1, 7, 500, 999, 1000]) {
      const a = bytes.subarray(0, cut);
      const b = bytes.subarray(cut);
      expect(crc32Combiner(b.length)(crc32(a), crc32(b))).toBe(crc32(bytes));
    }
    // "123456789" split in two: 0xCBF43926 (the check value of CRC-32, from memory).
    const ascii = (s: string) => new TextEncoder().encode(s);
    expect(crc32Combiner(5)(crc32(ascii('1234')), crc32(ascii('56789')))).toBe(0xcbf43926);
  });
});
