/**
 * The CI fuzz run: 2000 mutated archives with a fixed seed, in which every
 * kind of mutation is applied to at least 10 cases (the long run is
 * `npm run fuzz -- --cases N`). For each case, open, show, read (whole, a
 * few tiles, a window) and check may only raise FormatError or InputError,
 * with a known code and a one-line message naming the source; check() never
 * throws and reports every tile that failed to decode; valid re-encodings
 * (another DEFLATE stream, other MessagePack number widths) read back bit
 * for bit; mutations that break a rule of
 * spec/FORMAT.md section 15 are refused (coded streams cut short, followed
 * by bytes or with a wrong length word included; blocks out of order or
 * with a gap between them); payload
 * edits that decode to other values are reported by check(). Time per case is
 * measured and printed, not asserted; instead the decode work an opened case
 * declares and the memory it uses are held under fixed ceilings.
 */
import { describe, expect, it } from 'vitest';
import { fieldStep, Flag, payloadShares, prefixLengths } from '../../src/codec/payload.js';
import { corpus, makeCase, runOne, Tally } from './fuzz.js';
import { cloneModel, getCentre, PayloadFlag, serialize, setCentre, tileDims, walk } from './model.js';
import { runCase } from './harness.js';
import { Rng } from './rng.js';
import { open } from '../../src/archive.js';
import { crc32 } from '../../src/format/crc32.js';
import { classesOf, MUTATION_KINDS } from './mutate.js';
import { FLAG_SYMBOLS } from '../../src/format/container.js';
import { decodeTile } from '../../src/codec/tile-decode.js';
import { fillWords } from '../../src/codec/mask.js';
import { FormatError } from '../../src/errors.js';

const SEED = 20261201;
const CASES = 2000;

describe('fuzzing', () => {
  it('the seed archives hold every payload feature the format has', async () => {
    const c = await corpus();
    const seen = new Set<string>();
    c.models.forEach((m) => {
      m.payloads.forEach((field, f) => {
        const h = m.header.fields[f];
        field.forEach((p, t) => {
          seen.add(`method ${p[0]}`);
          const w = walk(p);
          if (p[0] !== 1) return;
          if (w.rank > 0) seen.add(w.flags & PayloadFlag.FactorDelta ? 'rank > 0 as differences' : 'rank > 0 as values');
          if (w.groups.length > 1) seen.add('several factor groups');
          if (w.rank > 0 && w.flags & PayloadFlag.Residual) seen.add('factors and a residual');
          if (w.residualPredictor !== undefined) seen.add(w.residualPredictor === 0 ? 'residual not predicted' : 'residual predicted');
          // Residual byte bit 3: the binary coder or the symbol coder (spec/FORMAT.md 10.3.8, 10.6.5).
          if (w.residualByteAt !== undefined) seen.add(p[w.residualByteAt] & 0x08 ? 'residual symbol-coded' : 'residual binary-coded');
          for (const [bit, name] of Object.entries(Flag)) if (p[1] & name) seen.add(`flag ${bit}`);
          seen.add(`centre form ${w.centreForm}`);
          if (w.residualStepForm !== undefined) seen.add(`step form ${w.residualStepForm}`);
          if (w.mask && w.mask.rawEnd > w.mask.rawStart) seen.add(`raw NaN bits ${h.dtype}`);
          // The class map through the library's decoder: a wrong decoder would fail the seeds' own round trip first.
          const [rows, cols] = tileDims(h, t);
          for (const code of classesOf(p, w, rows, cols) ?? []) seen.add(`class ${code}`);
        });
      });
      if (m.payloads.length > 1) seen.add('several fields');
      if (m.header.fields.some((h: { nd_shape?: number[] }) => h.nd_shape)) seen.add('an N-D field');
      if (m.header.fields.some((h: { layer?: unknown }) => h.layer)) seen.add('a field layer');
      seen.add(m.header.fields[0].dtype);
    });
    // Cell classes 0..5 of the mask (valid, fill, +Inf, -Inf, NaN, raw NaN): spec/FORMAT.md 10.6.3.
    const want = ['method 0', 'method 1', 'rank > 0 as values', 'rank > 0 as differences', 'several factor groups', 'factors and a residual'];
    // Centre form 1 and step form 2 (binary64): the tiny-f64, tiny-psnr-f64 and huge-f64 seeds' centres and steps lie beyond
    // binary32's normal range; centre form 2 and step form 3 (integers): seeds of integer-valued fields (their lattice).
    want.push('residual symbol-coded', 'residual binary-coded');
    want.push('flag Mask', 'flag Residual', 'flag Exceptions', 'flag FactorDelta', 'residual predicted', 'residual not predicted', 'raw NaN bits f32', 'raw NaN bits f64');
    want.push('centre form 0', 'centre form 1', 'centre form 2', 'step form 0', 'step form 1', 'step form 2', 'step form 3');
    want.push('class 0', 'class 1', 'class 2', 'class 3', 'class 4', 'class 5', 'several fields', 'an N-D field', 'a field layer', 'f32', 'f64');
    for (const x of want) expect(seen, `no seed has ${x}`).toContain(x);
  });

  it('the test-side payload walker and the library walkers (prefixLengths, payloadShares) agree on every seed payload', async () => {
    const c = await corpus();
    // The walker's flag bits are its own copy of the layout: they must be the library's.
    expect(PayloadFlag).toEqual(Flag);
    let lowRank = 0;
    for (const m of c.models) {
      for (const field of m.payloads) {
        for (const p of field) {
          const w = walk(p);
          expect(w.end).toBe(p.length);
          const length = (name: string) => {
            const x = w.parts.find((s) => s.name === name);
            return x ? x.end - x.start : 0;
          };
          const shares = payloadShares(p);
          if (p[0] === 0) {
            // Method, flags and the section's two length varints (spec/FORMAT.md, 10.5 and 10.2).
            const values = w.parts[0];
            expect(shares).toEqual({ factors: 0, residual: 0, exceptions: p.length, framing: values.streamStart });
            continue;
          }
          lowRank++;
          const groups = w.parts.filter((s) => s.name.startsWith('group '));
          expect(prefixLengths(p)).toEqual([w.groupsEnd, ...groups.map((s) => s.end)]);
          // Framing: per group its step-code varints and length varint (10.6.4); the residual's step (4 or 8 bytes), predictor and length varint (10.6.5); the exceptions section's length varints (10.2).
          const head = (name: string) => w.parts.filter((s) => s.name === name).reduce((sum, s) => sum + s.streamStart - s.start, 0);
          const framing = groups.reduce((sum, g) => sum + g.streamStart - g.start, 0) + head('residual') + head('exceptions');
          expect(shares).toEqual({ factors: groups.reduce((sum, s) => sum + s.end - s.start, 0), residual: length('residual'), exceptions: length('exceptions'), framing });
        }
      }
    }
    expect(lowRank).toBeGreaterThan(20);
  });

  it('every single-bit flip in a coded stream of a seed tile is refused with a FormatError or decodes', async () => {
    // The payload CRC is bypassed (decodeTile directly): this is what the value CRC stands behind.
    const c = await corpus();
    const outcomes = { refused: 0, same: 0, other: 0 };
    c.models.forEach((m) => {
      m.payloads.forEach((field, f) => {
        const h = m.header.fields[f];
        // The first low-rank tile of each field that has a coded stream.
        const t = field.findIndex((p) => p[0] === 1 && walk(p).parts.some((x) => x.kind === 'coded'));
        if (t < 0) return;
        const p = field[t];
        const [rows, cols] = tileDims(h, t);
        const fill = h.fill instanceof Uint8Array ? new DataView(h.fill.buffer, h.fill.byteOffset, 8).getFloat64(0, true) : h.fill;
        const ctx = { m: rows, n: cols, dtype: h.dtype, fill: fillWords(fill, h.dtype), where: `${h.name} tile ${t}`, fieldStep: fieldStep(h.bound.tolerance), symbols: (m.flags & FLAG_SYMBOLS) !== 0 };
        const seedValues = Buffer.from(decodeTile(p, ctx).buffer);
        for (const part of walk(p).parts) {
          if (part.kind !== 'coded') continue;
          for (let b = part.streamStart; b < part.end; b++) {
            for (let bit = 0; bit < 8; bit++) {
              const q = p.slice();
              q[b] ^= 1 << bit;
              let got: Buffer;
              try {
                got = Buffer.from(decodeTile(q, ctx).buffer);
              } catch (e) {
                if (!(e instanceof FormatError)) throw new Error(`${h.name} tile ${t} ${part.name} byte ${b} bit ${bit}: ${(e as Error).stack}`);
                outcomes.refused++;
                continue;
              }
              if (got.equals(seedValues)) outcomes.same++;
              else outcomes.other++;
            }
          }
        }
      });
    });
    console.log(`coded stream bit flips: ${JSON.stringify(outcomes)}`);
    // Both outcomes occur: most flips break the exact stream length, some decode to other values.
    expect(outcomes.refused).toBeGreaterThan(outcomes.same + outcomes.other);
    expect(outcomes.other).toBeGreaterThan(0);
  });

  it('the detect obligation flags a payload edit whose changed values check() does not report', async () => {
    const c = await corpus();
    const k = c.seeds.findIndex((s) => s.name === 'residual-f64');
    const m = cloneModel(c.models[k]);
    const p = m.payloads[0][0];
    m.payloads[0][0] = setCentre(p, getCentre(p) + 1e-3); // the centre moved: other values, a valid payload
    const caught = await runCase(serialize(m), new Rng(1), 'fuzz-case', { expect: 'detect', values: c.values[k], loose: c.loose[k] });
    expect(caught.findings).toEqual([]);
    expect(caught.result).toBe('check-failed');
    // With the value CRC recomputed for the new values, check() cannot tell: the harness must.
    const values = await (await open(serialize(m))).tile('noisy', 0);
    m.index.fields[0].value_crc[0] = crc32(new Uint8Array(values.buffer, values.byteOffset, values.byteLength));
    const missed = await runCase(serialize(m), new Rng(1), 'fuzz-case', { expect: 'detect', values: c.values[k], loose: c.loose[k] });
    expect(missed.findings).toEqual([`check: field 'noisy' reads back other values than the seed's, but check() reports no failure for it`]);
  });

  it('a case is made the same way every time (replayable from seed and number)', async () => {
    const c = await corpus();
    for (const i of [0, 17, 4242]) {
      const a = makeCase(c, SEED, i);
      const b = makeCase(c, SEED, i);
      expect(a.ops).toEqual(b.ops);
      expect(Buffer.from(a.bytes).equals(Buffer.from(b.bytes))).toBe(true);
    }
  });

  it(`${CASES} mutated archives: only typed errors, every obligation met`, async () => {
    const c = await corpus();
    const tally = new Tally();
    let deep = 0;
    for (let i = 0; i < CASES; i++) {
      const r = await runOne(c, SEED, i);
      tally.add(r);
      // Cases that opened and then failed in the tile decoder proper (past the payload CRC).
      if (r.stage !== 'open' && r.result === 'FormatError:malformed') deep++;
    }
    console.log(tally.summary().join('\n'));
    const findings = tally.findings.map((f) => `case ${f.index} (${f.seed}: ${f.ops.join('; ')}): ${f.finding}`);
    expect(findings).toEqual([]);
    // The mix reaches every layer: refusals at open, in the tile decoder, and obligations of both kinds.
    expect(tally.results.get('open FormatError:malformed') ?? 0).toBeGreaterThan(CASES / 10);
    expect(deep).toBeGreaterThan(CASES / 20);
    expect(tally.results.get('done ok') ?? 0).toBeGreaterThan(CASES / 20);
    expect(tally.expectations.get('same') ?? 0).toBeGreaterThan(CASES / 20);
    expect(tally.expectations.get('refuse') ?? 0).toBeGreaterThan(CASES / 40);
    expect(tally.expectations.get('detect') ?? 0).toBeGreaterThan(CASES / 20);
    // The run's reach: every kind of mutation is applied to 10 cases or more (the rarest, 'prefix', has
    // 1/91 of the weight: about 27 expected in 2000 cases, 20 with this seed).
    for (const [, kind] of MUTATION_KINDS) expect(tally.kinds.get(kind) ?? 0, `cases of kind '${kind}'`).toBeGreaterThanOrEqual(10);
    // Ceilings instead of timing: the largest decode work an accepted case declares
    // (sum of m*n*(rank+1) over its tiles), and heap plus array buffers between stages.
    expect(tally.maxWork).toBeLessThan(2 ** 26);
    expect(tally.peakMemory).toBeLessThan(1024 * 2 ** 20);
    // Explicit limit: about 2-5 s for 2000 cases on this 2-core machine, several times that when it is busy.
  }, 120_000);
});
