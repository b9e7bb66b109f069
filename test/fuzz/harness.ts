/**
 * Run one fuzz case the way users touch an archive: open it, show it (the
 * CLI's facts, from header and index), read every field whole and at a
 * loose bound (progressive prefixes), read a few tiles and a window, and
 * check it. What may escape is a FormatError (or an
 * InputError) with a known code and a one-line message naming the source;
 * anything else, a check() that throws, or a read() failure that check()
 * does not report, is a finding. Obligations (./mutate.ts) add: read back
 * the seed's values bit for bit ('same'), be refused somewhere ('refuse'),
 * or have check() report a field that reads back other values ('detect').
 */
import { open, type Archive } from '../../src/archive.js';
import { archiveFacts, factsText } from '../../src/cli/show.js';
import { FormatCode, FormatError, InputCode, InputError } from '../../src/errors.js';
import { MemorySource } from '../../src/io/source.js';
import { quoteName, type ArchiveIndex } from '../../src/format/schema.js';
import { tileCount } from '../../src/geometry.js';
import type { FloatArray } from '../../src/types.js';
import type { Rng } from './rng.js';

const FORMAT_CODES = new Set<string>(Object.values(FormatCode));
const INPUT_CODES = new Set<string>(Object.values(InputCode));

/** What happened to one case. */
export interface Outcome {
  /** 'ok' when everything read back; else the first typed error's class and code. */
  result: string;
  /** The stage of the first typed error (open, read, tile, window, check). */
  stage: string;
  /** Findings: anything that breaks the contract, with the stage and the error. */
  findings: string[];
  /** Decode work the opened archive declares: sum over tiles of m*n*(rank+1) multiply-adds, per pass. */
  work: number;
  /** Largest heapUsed + arrayBuffers seen between stages, in bytes. */
  memory: number;
  /** Wall time of the case (ms). */
  ms: number;
  /**
   * CPU time of the process over the case (ms, process.cpuUsage: every
   * thread, so the runner's idle main thread and the collector's helpers
   * too). Unlike the wall time it does not grow when other processes take
   * the cores; see {@link caseMs}.
   */
  cpuMs: number;
}

/**
 * The time a case is judged by: the smaller of its wall time and its
 * process's CPU time. On a busy machine the wall time grows with other
 * processes' load (case 3383 once took 1010 ms of wall time there); on an
 * idle one the CPU time can exceed the wall time (the collector's helper
 * threads). A case that really does over a second of work exceeds both.
 */
export function caseMs(o: Pick<Outcome, 'ms' | 'cpuMs'>): number {
  return Math.min(o.ms, o.cpuMs);
}

/** Is `e` a typed error as promised (class, code, one line naming the source)? Returns the problem, or null. */
export function typedErrorProblem(e: unknown, label: string): string | null {
  if (e instanceof FormatError) {
    if (!FORMAT_CODES.has(e.code)) return `FormatError with unknown code ${String(e.code)}`;
  } else if (e instanceof InputError) {
    if (!INPUT_CODES.has(e.code)) return `InputError with unknown code ${String(e.code)}`;
  } else {
    return `untyped ${(e as Error)?.name ?? typeof e}: ${(e as Error)?.stack ?? String(e)}`;
  }
  const msg = e.message;
  if (typeof msg !== 'string' || msg.length === 0) return `${e.name} with an empty message`;
  if (/[\n\r]/.test(msg)) return `${e.name} message of several lines: ${JSON.stringify(msg.slice(0, 300))}`;
  // Field names may be 1024 characters long and appear in messages; anything longer is a value dumped whole.
  if (msg.length > 1600) return `${e.name} message of ${msg.length} characters: ${msg.slice(0, 200)}...`;
  if (!msg.startsWith(label)) return `${e.name} message does not name the source: ${msg}`;
  return null;
}

function memoryNow(): number {
  const m = process.memoryUsage();
  return m.heapUsed + m.arrayBuffers;
}

/** A random window of a field. */
function pickWindow(a: Archive, name: string, rng: Rng): { rows: [number, number]; cols: [number, number] } {
  const [rows, cols] = a.field(name).header.shape;
  const r0 = rng.int(rows);
  const c0 = rng.int(cols);
  const hh = 1 + rng.int(Math.min(rows - r0, 64));
  const ww = 1 + rng.int(Math.min(cols - c0, 64));
  return { rows: [r0, r0 + hh], cols: [c0, c0 + ww] };
}

/** The same window assembled from single tiles, through the tile API (every slice of a field of slices, as read() gives them). */
async function windowFromTiles(a: Archive, name: string, w: { rows: [number, number]; cols: [number, number] }): Promise<FloatArray> {
  const { header: h } = a.field(name);
  const [r0, r1] = w.rows;
  const [c0, c1] = w.cols;
  const ww = c1 - c0;
  const slices = h.slices ?? 1;
  const plane = (r1 - r0) * ww;
  const out = h.dtype === 'f32' ? new Float32Array(slices * plane) : new Float64Array(slices * plane);
  const [tr, tc] = h.tile;
  const gc = Math.ceil(h.shape[1] / tc);
  const gr = Math.ceil(h.shape[0] / tr);
  for (let s = 0; s < slices; s++) {
    for (let ti = Math.floor(r0 / tr); ti * tr < r1; ti++) {
      for (let tj = Math.floor(c0 / tc); tj * tc < c1; tj++) {
        const tile = await a.tile(name, s * gr * gc + ti * gc + tj);
        const n = Math.min(tc, h.shape[1] - tj * tc);
        const j0 = Math.max(c0, tj * tc);
        const j1 = Math.min(c1, (tj + 1) * tc);
        for (let i = Math.max(r0, ti * tr); i < Math.min(r1, (ti + 1) * tr); i++) {
          // Row segments copied as typed arrays: element by element, a signalling NaN could be quieted.
          const from = (i - ti * tr) * n + (j0 - tj * tc);
          out.set(tile.subarray(from, from + (j1 - j0)), s * plane + (i - r0) * ww + (j0 - c0));
        }
      }
    }
  }
  return out;
}

/** Declared decode work of an opened archive: sum over tiles of m*n*(rank+1), and m*n*k more for a tile of a field with a layer of rank k. */
export function declaredWork(a: Archive, index: ArchiveIndex): number {
  let w = 0;
  a.header.fields.forEach((h, f) => {
    const ix = index.fields[f];
    const gc = Math.ceil(h.shape[1] / h.tile[1]);
    const gr = Math.ceil(h.shape[0] / h.tile[0]);
    for (let t = 0; t < ix.offset.length; t++) {
      const local = t % (gr * gc);
      const m = Math.min(h.tile[0], h.shape[0] - Math.floor(local / gc) * h.tile[0]);
      const n = Math.min(h.tile[1], h.shape[1] - (local % gc) * h.tile[1]);
      w += m * n * (ix.rank[t] + 1 + (h.layer?.rank ?? 0));
    }
  });
  return w;
}

/** What a case must do beyond the typed-error contract (see expectationOf in ./mutate.ts). */
export interface Obligation {
  expect: 'same' | 'refuse' | 'detect' | 'any';
  /** The seed's decoded values per field name (compared bit for bit when expect is 'same' or 'detect'). */
  values: Map<string, Uint8Array>;
  /** The seed's values per field name read at {@link LOOSE_BOUND} (progressive prefixes where the index lists them). */
  loose?: Map<string, Uint8Array>;
}

/** A bound every recorded prefix meets: a read at it takes each tile's shortest prefix (spec/FORMAT.md 18.4). */
export const LOOSE_BOUND = 'abs:1e300';

/** `s` as a regular expression matching itself. */
function escaped(s: string): string {
  return s.replace(/[.*+?^${}()|[\]\\]/g, '\\$&');
}

function sameBytes(a: Uint8Array, b: Uint8Array): boolean {
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return false;
  return true;
}

export async function runCase(bytes: Uint8Array, rng: Rng, label = 'fuzz-case', duty?: Obligation): Promise<Outcome> {
  const t0 = performance.now();
  const cpu0 = process.cpuUsage();
  const out: Outcome = { result: 'ok', stage: 'done', findings: [], work: 0, memory: 0, ms: 0, cpuMs: 0 };
  const sample = () => {
    out.memory = Math.max(out.memory, memoryNow());
  };
  /** Record a typed error (first one wins) or a finding. */
  const caught = (e: unknown, stage: string): void => {
    const problem = typedErrorProblem(e, label);
    if (problem) out.findings.push(`${stage}: ${problem}`);
    else if (out.result === 'ok') {
      out.result = `${(e as Error).name}:${(e as FormatError).code}`;
      out.stage = stage;
    }
  };
  const finish = (): Outcome => {
    out.ms = performance.now() - t0;
    const cpu = process.cpuUsage(cpu0);
    out.cpuMs = (cpu.user + cpu.system) / 1000;
    if (duty?.expect === 'refuse' && out.result === 'ok') out.findings.push('accepted: this mutation must be refused');
    if (duty?.expect === 'same' && out.result !== 'ok') out.findings.push(`refused (${out.stage} ${out.result}): this mutation must read back unchanged`);
    return out;
  };
  let a: Archive;
  try {
    a = await open(new MemorySource(bytes, label));
  } catch (e) {
    caught(e, 'open');
    return finish();
  }
  sample();
  // Since version 2, open() reads the index directory only; the pages come with the reads, or all at once here.
  let index: ArchiveIndex | null = null;
  try {
    index = await a.loadIndex();
  } catch (e) {
    caught(e, 'index');
  }
  out.work = index === null ? 0 : declaredWork(a, index);
  if (index !== null) {
    try {
      factsText(archiveFacts(a, label));
    } catch (e) {
      out.findings.push(`show: ${typedErrorProblem(e, label) ?? `show threw ${(e as Error).message} on an archive that opened`}`);
    }
  }
  const failedTiles = new Map<string, Set<number>>();
  const failedPages = new Map<string, Set<number>>();
  const failed = (read: string, e: unknown): void => {
    const text = e instanceof FormatError ? e.message.slice(label.length) : '';
    // A read of a layered field fails with the error of a factor field's tile or page when one does:
    // check() reports that tile or page under the factor field's name.
    const name = a.names.find((n) => n !== read && new RegExp(`(field ${escaped(quoteName(n))} tile|index page \\d+ of field ${escaped(quoteName(n))})`).test(text)) ?? read;
    if (!failedTiles.has(read)) failedTiles.set(read, new Set());
    // A failed index page is reported by check() as one failure naming the page (tile -1).
    const page = /index page (\d+) of field/.exec(text);
    const m = page ? null : /tile (\d+)/.exec(text);
    if (!failedTiles.has(name)) failedTiles.set(name, new Set());
    if (!failedPages.has(name)) failedPages.set(name, new Set());
    if (page) failedPages.get(name)!.add(Number(page[1]));
    if (m) failedTiles.get(name)!.add(Number(m[1]));
  };
  /** Fields that read back without error but with values other than the seed's (for 'detect'). */
  const changed = new Set<string>();
  for (const name of a.names) {
    try {
      const got = await a.read(name);
      const want = duty?.expect === 'same' || duty?.expect === 'detect' ? duty.values.get(name) : undefined;
      const same = want !== undefined && sameBytes(new Uint8Array(got.values.buffer, got.values.byteOffset, got.values.byteLength), want);
      if (duty?.expect === 'same' && !same) {
        out.findings.push(`read: field '${name}' does not read back as the seed's (this mutation must not change values)`);
      }
      if (duty?.expect === 'detect' && !same) changed.add(name);
    } catch (e) {
      caught(e, 'read');
      if (e instanceof FormatError && e.code !== FormatCode.Limit) failed(name, e);
    }
    // A progressive read: prefixes are checked by their own CRCs (the seed's, as the mutations leave the
    // prefix column alone), so a prefix read back differs from the seed's only through whole tiles, whose
    // value CRCs check() verifies. A failure here is not a decoding failure check() must report.
    try {
      const got = await a.read(name, { bound: LOOSE_BOUND });
      const want = duty?.loose?.get(name);
      if (want !== undefined && (duty?.expect === 'same' || duty?.expect === 'detect')) {
        const same = sameBytes(new Uint8Array(got.values.buffer, got.values.byteOffset, got.values.byteLength), want);
        if (duty.expect === 'same' && !same) out.findings.push(`progressive: field '${name}' at ${LOOSE_BOUND} does not read back as the seed's (this mutation must not change values)`);
        if (duty.expect === 'detect' && !same) changed.add(name);
      }
    } catch (e) {
      caught(e, 'progressive');
    }
    sample();
    const tiles = tileCount(a.field(name).header);
    for (let k = 0; k < 2 && tiles > 0; k++) {
      const t = rng.int(tiles);
      try {
        await a.tile(name, t);
      } catch (e) {
        caught(e, 'tile');
        if (e instanceof FormatError) failed(name, e);
      }
    }
    // A window through the read API, and the same window from single tiles: both fail, or both give the same bits.
    const w = pickWindow(a, name, rng);
    let viaRead: FloatArray | null = null;
    let viaTiles: FloatArray | null = null;
    try {
      viaRead = (await a.read(name, w)).values;
    } catch (e) {
      caught(e, 'window');
      if (e instanceof FormatError) failed(name, e);
    }
    try {
      viaTiles = await windowFromTiles(a, name, w);
    } catch (e) {
      caught(e, 'window');
    }
    if ((viaRead === null) !== (viaTiles === null)) out.findings.push(`window: read(${JSON.stringify(w)}) ${viaRead ? 'succeeds' : 'fails'} but the same tiles one by one ${viaTiles ? 'succeed' : 'fail'}`);
    else if (viaRead && viaTiles && !sameBytes(new Uint8Array(viaRead.buffer, viaRead.byteOffset, viaRead.byteLength), new Uint8Array(viaTiles.buffer, viaTiles.byteOffset, viaTiles.byteLength))) {
      out.findings.push(`window: read(${JSON.stringify(w)}) differs from the same tiles read one by one`);
    }
    sample();
  }
  try {
    const report = await a.check();
    sample();
    // Every tile that failed to decode above must be reported by check().
    for (const [name, tiles] of failedTiles) {
      if (report.ok) out.findings.push(`check: reports ok, but reading field '${name}' failed`);
      for (const t of tiles) {
        if (!report.failures.some((f) => f.field === name && f.tile === t)) out.findings.push(`check: does not report field '${name}' tile ${t}, which failed to decode`);
      }
      for (const p of failedPages.get(name) ?? []) {
        if (!report.failures.some((f) => f.field === name && f.tile === -1 && new RegExp(`index page ${p} `).test(f.what))) out.findings.push(`check: does not report field '${name}' index page ${p}, which failed to load`);
      }
    }
    // Payload edits under the seed's index: values that changed must fail the value CRC of their tile.
    for (const name of changed) {
      if (!report.failures.some((f) => f.field === name)) out.findings.push(`check: field '${name}' reads back other values than the seed's, but check() reports no failure for it`);
    }
    if (!report.ok && out.result === 'ok') {
      out.result = 'check-failed';
      out.stage = 'check';
    }
  } catch (e) {
    out.findings.push(`check: threw ${typedErrorProblem(e, label) ?? `${(e as Error).name}: ${(e as Error).message}`}`);
  }
  return finish();
}
