/**
 * The fuzz loop shared by the CI test (test/fuzz/fuzz.test.ts) and the long
 * run (`npm run fuzz -- --cases N`): case i of a run with seed s mutates a
 * seed archive with Rng(s, i), so any case is replayed from (s, i) alone.
 */
import { buildSeeds, type Seed } from './corpus.js';
import { caseMs, LOOSE_BOUND, runCase, type Outcome } from './harness.js';
import type { FloatArray } from '../../src/types.js';
import { parse, type Model } from './model.js';
import { mutate, type Expectation, type MutationKind } from './mutate.js';
import { open } from '../../src/archive.js';
import { Rng } from './rng.js';

/** Seeds, parsed once, with their decoded values. */
export interface Corpus {
  seeds: Seed[];
  models: Model[];
  values: Map<string, Uint8Array>[];
  /** Values read at the harness's loose bound (progressive prefixes). */
  loose: Map<string, Uint8Array>[];
}

export async function corpus(): Promise<Corpus> {
  const seeds = buildSeeds();
  const values: Map<string, Uint8Array>[] = [];
  const loose: Map<string, Uint8Array>[] = [];
  const copy = (got: FloatArray) => new Uint8Array(got.buffer.slice(got.byteOffset, got.byteOffset + got.byteLength));
  for (const s of seeds) {
    const a = await open(s.bytes);
    const v = new Map<string, Uint8Array>();
    const l = new Map<string, Uint8Array>();
    for (const name of a.names) {
      v.set(name, copy((await a.read(name)).values));
      l.set(name, copy((await a.read(name, { bound: LOOSE_BOUND })).values));
    }
    if (!(await a.check()).ok) throw new Error(`seed ${s.name} does not check clean`);
    values.push(v);
    loose.push(l);
  }
  return { seeds, models: seeds.map((s) => parse(s.bytes)), values, loose };
}

/** One case, made and run. */
export interface CaseResult extends Outcome {
  index: number;
  expect: Expectation;
  seed: string;
  ops: string[];
  kinds: MutationKind[];
  bytes: Uint8Array;
}

/** Make case `i` of run `seed` (no running). */
export function makeCase(c: Corpus, seed: number, i: number): { rng: Rng; k: number; bytes: Uint8Array; ops: string[]; kinds: MutationKind[]; expect: Expectation } {
  const rng = new Rng(seed, i);
  const k = rng.int(c.seeds.length);
  const others = c.seeds.filter((_, j) => j !== k).map((s) => s.bytes);
  const { bytes, ops, kinds, expect } = mutate(c.models[k], others, rng);
  return { rng, k, bytes, ops, kinds, expect };
}

export async function runOne(c: Corpus, seed: number, i: number): Promise<CaseResult> {
  const { rng, k, bytes, ops, kinds, expect } = makeCase(c, seed, i);
  const outcome = await runCase(bytes, rng, 'fuzz-case', { expect, values: c.values[k], loose: c.loose[k] });
  return { ...outcome, index: i, seed: c.seeds[k].name, ops, kinds, bytes, expect };
}

/** Running totals of a fuzz run. */
export class Tally {
  cases = 0;
  results = new Map<string, number>();
  expectations = new Map<string, number>();
  /** Cases each kind of mutation was applied to. */
  kinds = new Map<string, number>();
  findings: { index: number; seed: string; ops: string[]; finding: string }[] = [];
  slowest: { index: number; ms: number; seed: string; ops: string[] } = { index: -1, ms: 0, seed: '', ops: [] };
  over1s = 0;
  maxWork = 0;
  peakMemory = 0;
  totalMs = 0;

  add(r: CaseResult): void {
    this.cases++;
    this.expectations.set(r.expect, (this.expectations.get(r.expect) ?? 0) + 1);
    for (const kind of new Set(r.kinds)) this.kinds.set(kind, (this.kinds.get(kind) ?? 0) + 1);
    this.results.set(`${r.stage} ${r.result}`, (this.results.get(`${r.stage} ${r.result}`) ?? 0) + 1);
    for (const finding of r.findings) this.findings.push({ index: r.index, seed: r.seed, ops: r.ops, finding });
    const ms = caseMs(r);
    if (ms > this.slowest.ms) this.slowest = { index: r.index, ms, seed: r.seed, ops: r.ops };
    if (ms > 1000) this.over1s++;
    this.maxWork = Math.max(this.maxWork, r.work);
    this.peakMemory = Math.max(this.peakMemory, r.memory);
    this.totalMs += ms;
  }

  /** Share of cases that reached each stage/result, as lines. */
  summary(): string[] {
    const lines = [...this.results.entries()].sort((a, b) => b[1] - a[1]).map(([k, n]) => `  ${String(n).padStart(8)}  ${k}`);
    return [
      `cases ${this.cases}, findings ${this.findings.length}, cases over 1 s ${this.over1s}`,
      `slowest case ${this.slowest.index} (${this.slowest.ms.toFixed(1)} ms, seed ${this.slowest.seed}: ${this.slowest.ops.join('; ')})`,
      `mean ${(this.totalMs / Math.max(1, this.cases)).toFixed(2)} ms per case, largest declared decode work ${this.maxWork}, peak heap+buffers ${(this.peakMemory / 2 ** 20).toFixed(0)} MiB`,
      `cases that must read back unchanged ${this.expectations.get('same') ?? 0}, that must be refused ${this.expectations.get('refuse') ?? 0}, whose changed values check() must catch ${this.expectations.get('detect') ?? 0}`,
      `cases per kind of mutation: ${[...this.kinds.entries()].map(([k, n]) => `${k} ${n}`).join(', ')}`,
      'outcomes (stage result):',
      ...lines,
    ];
  }
}
