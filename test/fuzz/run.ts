/**
 * The long fuzz run: `npm run fuzz -- --cases 1000000 [--seed S] [--start K]
 * [--replay I] [--out DIR]`. Cases run in a worker thread watched by this
 * process: a case that takes longer than the hang limit is stopped and
 * recorded, as is one that crashes the worker (out of memory included); the
 * run then resumes with the next case. Findings are written to DIR
 * (default bench/out/fuzz) as the case's bytes plus a text note, and the
 * totals are printed at the end: cases, findings, slowest case, cases over
 * 1 s, peak memory.
 */
import { mkdirSync, writeFileSync } from 'node:fs';
import { isMainThread, parentPort, Worker, workerData } from 'node:worker_threads';
import { corpus, makeCase, runOne, Tally, type CaseResult } from './fuzz.js';
import { caseMs } from './harness.js';

/** A case slower than this ({@link caseMs}: the smaller of wall and CPU time) is a finding (the promise: each case under 1 s). */
const SLOW_MS = 1000;
/** A case that has not finished after this long is stopped as a hang. */
const HANG_MS = 20_000;
/** Heap plus array buffers above this after any stage of a case is a finding. */
const MEMORY_CEILING = 1024 * 2 ** 20;

interface Options {
  seed: number;
  cases: number;
  start: number;
  replay: number | null;
  out: string;
}

function options(argv: string[]): Options {
  const o: Options = { seed: 0x5eed, cases: 10_000, start: 0, replay: null, out: 'bench/out/fuzz' };
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i];
    const v = argv[i + 1];
    const int = () => {
      const n = Number(v);
      if (!Number.isSafeInteger(n) || n < 0) throw new Error(`${a} needs a non-negative integer, got ${v}`);
      i++;
      return n;
    };
    if (a === '--cases') o.cases = int();
    else if (a === '--seed') o.seed = int();
    else if (a === '--start') o.start = int();
    else if (a === '--replay') o.replay = int();
    else if (a === '--out') (o.out = v), i++;
    else throw new Error(`unknown option ${a} (known: --cases, --seed, --start, --replay, --out)`);
  }
  return o;
}

/** What a worker reports per case (no bytes: the parent can remake any case). */
type Report = Omit<CaseResult, 'bytes'>;

async function worker(): Promise<void> {
  const { seed, from, to } = workerData as { seed: number; from: number; to: number };
  const c = await corpus();
  for (let i = from; i < to; i++) {
    parentPort!.postMessage({ kind: 'start', index: i });
    const r = await runOne(c, seed, i);
    const { bytes: _bytes, ...report } = r;
    parentPort!.postMessage({ kind: 'done', report });
  }
  parentPort!.postMessage({ kind: 'end' });
}

async function main(): Promise<void> {
  const o = options(process.argv.slice(2));
  const c = await corpus();
  const save = (index: number, note: string) => {
    mkdirSync(o.out, { recursive: true });
    const { bytes, ops } = makeCase(c, o.seed, index);
    const base = `${o.out}/case-${o.seed}-${index}`;
    writeFileSync(`${base}.rfz`, bytes);
    writeFileSync(`${base}.txt`, `seed ${o.seed} case ${index}\nops: ${ops.join('; ')}\n${note}\n`);
    return base;
  };
  if (o.replay !== null) {
    const r = await runOne(c, o.seed, o.replay);
    console.log(`case ${o.replay} (seed archive ${r.seed}): ${r.ops.join('; ')}`);
    console.log(`  ${r.stage} ${r.result}, ${r.ms.toFixed(1)} ms (${r.cpuMs.toFixed(1)} ms of CPU), must ${{ any: 'only raise typed errors', same: 'read back unchanged', refuse: 'be refused', detect: 'have check() report changed values' }[r.expect]}`);
    for (const f of r.findings) console.log(`  FINDING ${f}`);
    console.log(`  saved as ${save(o.replay, r.findings.join('\n'))}.rfz`);
    return;
  }
  const tally = new Tally();
  const extra: string[] = [];
  let peakRss = 0;
  const t0 = Date.now();
  const end = o.start + o.cases;
  let next = o.start;
  console.log(`fuzzing ${o.cases} cases from ${o.start}, seed ${o.seed}, ${c.seeds.length} seed archives`);
  while (next < end) {
    next = await new Promise<number>((resolve) => {
      const w = new Worker(new URL(import.meta.url), { workerData: { seed: o.seed, from: next, to: end }, resourceLimits: { maxOldGenerationSizeMb: 3072 } });
      let current = next;
      let started = Date.now();
      let settled = false;
      const finish = (resume: number) => {
        if (settled) return;
        settled = true;
        clearInterval(watch);
        void w.terminate();
        resolve(resume);
      };
      const watch = setInterval(() => {
        peakRss = Math.max(peakRss, process.memoryUsage().rss);
        if (Date.now() - started > HANG_MS) {
          const note = `hang: no result after ${HANG_MS} ms`;
          extra.push(`case ${current}: ${note} (${save(current, note)}.rfz)`);
          finish(current + 1);
        }
      }, 250);
      w.on('message', (m: { kind: string; index?: number; report?: Report }) => {
        if (m.kind === 'start') {
          current = m.index!;
          started = Date.now();
        } else if (m.kind === 'done') {
          const r = m.report!;
          tally.add({ ...r, bytes: new Uint8Array(0) });
          if (caseMs(r) > SLOW_MS) extra.push(`case ${r.index}: ${r.ms.toFixed(0)} ms, ${r.cpuMs.toFixed(0)} ms of CPU (${r.seed}: ${r.ops.join('; ')})`);
          if (r.memory > MEMORY_CEILING) extra.push(`case ${r.index}: ${(r.memory / 2 ** 20).toFixed(0)} MiB of heap and buffers`);
          if (r.findings.length > 0) save(r.index, r.findings.join('\n'));
          if (tally.cases % 20_000 === 0) {
            const rate = tally.cases / ((Date.now() - t0) / 1000);
            console.log(`  ${tally.cases} cases, ${tally.findings.length + extra.length} findings, ${rate.toFixed(0)} cases/s`);
          }
        } else if (m.kind === 'end') finish(end);
      });
      w.on('error', (e) => {
        const note = `worker crashed: ${e.stack ?? e.message}`;
        extra.push(`case ${current}: ${note.split('\n')[0]} (${save(current, note)}.rfz)`);
        finish(current + 1);
      });
      w.on('exit', (code) => {
        if (!settled && code !== 0) {
          const note = `worker exited with code ${code}`;
          extra.push(`case ${current}: ${note} (${save(current, note)}.rfz)`);
          finish(current + 1);
        } else finish(end);
      });
    });
  }
  const seconds = (Date.now() - t0) / 1000;
  console.log(`done in ${seconds.toFixed(0)} s (${(tally.cases / seconds).toFixed(0)} cases/s)`);
  for (const line of tally.summary()) console.log(line);
  console.log(`peak resident memory of the runner ${(peakRss / 2 ** 20).toFixed(0)} MiB (the worker's heap and buffers: above)`);
  for (const f of tally.findings) console.log(`FINDING case ${f.index} (${f.seed}: ${f.ops.join('; ')}): ${f.finding.split('\n')[0]}`);
  for (const x of extra) console.log(`FINDING ${x}`);
  if (tally.findings.length + extra.length > 0) {
    console.log(`cases saved in ${o.out}; replay one with --replay N --seed ${o.seed}`);
    process.exitCode = 1;
  }
}

if (isMainThread) {
  main().catch((e) => {
    console.error(`fuzz: error: ${(e as Error).message}`);
    process.exitCode = 2;
  });
} else void worker();
