/**
 * The CI fuzz run: 6000 mutated archives with a fixed seed (the long run is
 * `npm run fuzz -- --cases N`). For each case, open, show, read (whole, a
 * few tiles, a window) and check may only raise FormatError or InputError,
 * with a known code and a one-line message naming the source; check() never
 * throws and reports every tile that failed to decode; valid re-encodings
 * (another DEFLATE stream, other MessagePack number widths, block order, an
 * unreferenced gap, the reserved word) read back bit for bit; mutations that
 * break a rule of spec/FORMAT.md section 15 are refused. Time per case is
 * measured and printed, not asserted; instead the decode work an opened case
 * declares and the memory it uses are held under fixed ceilings.
 */
import { describe, expect, it } from 'vitest';
import { Flag } from '../../src/codec/payload.js';
import { inflateSync } from 'fflate';
import { corpus, makeCase, runOne, Tally } from './fuzz.js';
import { sections } from './model.js';

const SEED = 20261201;
const CASES = 6000;

describe('fuzzing', () => {
  it('the seed archives hold every payload feature the format has', async () => {
    const c = await corpus();
    const seen = new Set<string>();
    c.models.forEach((m) => {
      for (const field of m.payloads) {
        for (const p of field) {
          seen.add(`method ${p[0]}`);
          if (p[0] !== 1) continue;
          if (p[2] | (p[3] << 8)) seen.add('rank > 0');
          for (const [bit, name] of Object.entries(Flag)) if (p[1] & name) seen.add(`flag ${bit}`);
          const mask = sections(p).sections.find((s) => s.name === 'mask');
          if (mask) for (const code of inflateSync(p.subarray(mask.start + 8, mask.end))) if (code <= 5) seen.add(`class ${code}`);
        }
      }
      if (m.payloads.length > 1) seen.add('several fields');
      seen.add(m.header.fields[0].dtype);
    });
    // Cell classes 0..5 of the mask (valid, fill, +Inf, -Inf, NaN, raw NaN): spec/FORMAT.md 10.6.3.
    for (const want of ['method 0', 'method 1', 'rank > 0', 'flag Mask', 'flag Residual', 'flag Exceptions', 'flag Lorenzo', 'class 0', 'class 1', 'class 2', 'class 3', 'class 4', 'class 5', 'several fields', 'f32', 'f64']) {
      expect(seen, `no seed has ${want}`).toContain(want);
    }
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
    // Ceilings instead of timing: the largest decode work an accepted case declares
    // (sum of m*n*(rank+1) over its tiles), and heap plus array buffers between stages.
    expect(tally.maxWork).toBeLessThan(2 ** 26);
    expect(tally.peakMemory).toBeLessThan(1024 * 2 ** 20);
    // Explicit limit: the case count is what gives the fuzzer its reach (about 3-6 s for
    // 6000 cases on this 2-core machine, several times that when it is busy).
  }, 120_000);
});
