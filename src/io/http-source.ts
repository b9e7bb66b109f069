/**
 * A {@link ByteSource} over an http(s) URL, read with HTTP Range requests
 * (RFC 9110, section 14). It uses only `fetch`, so it runs in Node 20,
 * browsers, workers and other runtimes alike.
 *
 * What it guarantees: every read returns exactly the bytes asked for, or
 * throws. A 206 answer must carry a Content-Range that names exactly the
 * asked range and the size learnt when the source was opened, and a body
 * of exactly that length; a changed ETag or size means the file changed on
 * the server while it was being read. Dropped connections, time-outs and
 * 5xx answers are retried a bounded number of times. Time is bounded three
 * ways: a wait with nothing arriving (`timeout`), one request from sending
 * it to the last byte of its answer (`requestDeadline`, so a server that
 * drips bytes cannot hold a read forever), and, when set, all reads of the
 * source together (`deadline`). A server that ignores
 * Range (answers 200 with the whole body) is used as a whole-file fallback
 * held in memory when the file is small; otherwise it is refused.
 *
 * Several ranges ({@link HttpSource.readMany}) go in one request with a
 * multi-range `Range` header, answered as `multipart/byteranges` (RFC 9110,
 * section 14.6). A server that answers such a request otherwise (200, one
 * range not covering them all, no answer) is asked one range per request
 * from then on.
 */
import { FormatCode, FormatError, InputCode, InputError } from '../errors.js';
import type { ByteRange, ByteSource } from './source.js';

/** Options of {@link HttpSource}. */
export interface HttpSourceOptions {
  /** The fetch to use; default `globalThis.fetch`. */
  fetch?: typeof fetch;
  /** Extra request headers (e.g. authorization). */
  headers?: Record<string, string>;
  /** Retries after a failed attempt (dropped connection, time-out, 408, 429, 5xx, short body). Default 3. */
  retries?: number;
  /** Wait before the first retry in milliseconds, doubled for each further one. Default 250. */
  retryDelay?: number;
  /** Longest wait in milliseconds for an answer, or for more of its body, before the attempt counts as failed. Default 30000; 0: none. */
  timeout?: number;
  /**
   * Longest time in milliseconds for one request, from sending it to the
   * last byte of its answer, however steadily the bytes come; past it the
   * attempt counts as failed (and is retried like a dropped connection).
   * Default 300000 (5 minutes); 0: none.
   */
  requestDeadline?: number;
  /**
   * Longest time in milliseconds for all reads of this source together,
   * retries and waits between them included, counted from its creation.
   * Past it every read fails with InputError (code `file`), and a request
   * in flight is aborted. Default 0: none.
   */
  deadline?: number;
  /**
   * Largest file held in memory when the server ignores Range requests and
   * sends the whole file. Default 64 MiB; 0 refuses such servers outright.
   */
  maxWholeFile?: number;
  /** Name of the source in messages; default the URL. */
  label?: string;
  /**
   * Ask for several ranges in one request (multipart/byteranges answer)
   * when a read needs several. Default true; a server found not to support
   * it is asked one range per request.
   */
  multiRange?: boolean;
}

/** Default {@link HttpSourceOptions.maxWholeFile}: 64 MiB. */
export const DEFAULT_MAX_WHOLE_FILE = 64 << 20;

/** What was learnt about the file when it was first reached. */
interface Remote {
  size: number;
  etag: string | null;
  lastModified: string | null;
}

/** A failure worth another attempt. */
class Transient extends Error {}

/** The source's overall deadline passed: no further attempt. */
class DeadlinePassed extends Error {}

/** A whole response body, or bytes of a range. */
interface Body {
  bytes: Uint8Array;
  /** False when the body ended before the expected length. */
  complete: boolean;
}

const RETRY_STATUS = new Set([408, 425, 429, 500, 502, 503, 504]);

function sleep(ms: number): Promise<void> {
  return new Promise((resolve) => setTimeout(resolve, ms));
}

function describe(e: unknown): string {
  if (!(e instanceof Error)) return String(e);
  const cause = (e as Error & { cause?: unknown }).cause;
  const inner = cause instanceof Error ? ` (${cause.message})` : '';
  return `${e.message}${inner}`;
}

/** A read-only byte source over an http(s) URL. */
export class HttpSource implements ByteSource {
  readonly url: string;
  readonly label: string;
  /** Body bytes received so far, over all requests (failed attempts included). */
  bytesFetched = 0;
  /** Requests sent so far (retries included). */
  requests = 0;
  private readonly fetcher: typeof fetch;
  private readonly headers: Record<string, string>;
  private readonly retries: number;
  private readonly retryDelay: number;
  private readonly timeout: number;
  private readonly requestDeadline: number;
  private readonly deadline: number;
  /** When the overall deadline passes (Date.now() time), or Infinity. */
  private readonly deadlineAt: number;
  private readonly maxWholeFile: number;
  private remote: Promise<Remote> | null = null;
  /** The whole file, when the server ignores Range and the file is small. */
  private whole: Uint8Array | null = null;
  /** Whether several ranges may go in one request (false once the server is seen not to support it). */
  multiRange: boolean;
  /** Multi-range requests that failed in a row without an answer. */
  private multiFailures = 0;
  /** Per response in flight: restarts its time limit when body bytes arrive. */
  private readonly progress = new WeakMap<Response, () => void>();

  constructor(url: string | URL, options: HttpSourceOptions = {}) {
    const text = String(url);
    let parsed: URL;
    try {
      parsed = new URL(text);
    } catch {
      throw new InputError(InputCode.Option, `'${text}' is not a URL`);
    }
    if (parsed.protocol !== 'http:' && parsed.protocol !== 'https:') {
      throw new InputError(InputCode.Option, `'${text}' is not an http or https URL`);
    }
    this.url = parsed.href;
    this.label = options.label ?? text;
    const f = options.fetch ?? (globalThis.fetch as typeof fetch | undefined);
    if (typeof f !== 'function') throw new InputError(InputCode.Option, `${this.label}: this runtime has no fetch; pass options.fetch`);
    // Called as a plain function: browsers refuse a fetch invoked with another `this`.
    this.fetcher = (input, init) => f.call(globalThis, input, init);
    this.headers = { ...options.headers };
    const count = (v: number | undefined, dflt: number, what: string): number => {
      const x = v ?? dflt;
      if (typeof x !== 'number' || !(x >= 0) || !Number.isFinite(x)) throw new InputError(InputCode.Option, `${what} must be a finite number >= 0, got ${String(x)}`);
      return x;
    };
    this.retries = Math.floor(count(options.retries, 3, 'retries'));
    this.retryDelay = count(options.retryDelay, 250, 'retryDelay');
    this.timeout = count(options.timeout, 30_000, 'timeout');
    this.requestDeadline = count(options.requestDeadline, 300_000, 'requestDeadline');
    this.deadline = count(options.deadline, 0, 'deadline');
    this.deadlineAt = this.deadline > 0 ? Date.now() + this.deadline : Infinity;
    this.maxWholeFile = count(options.maxWholeFile, DEFAULT_MAX_WHOLE_FILE, 'maxWholeFile');
    if (options.multiRange !== undefined && typeof options.multiRange !== 'boolean') throw new InputError(InputCode.Option, `multiRange must be true or false, got ${String(options.multiRange)}`);
    this.multiRange = options.multiRange ?? true;
  }

  /** Size of the file, learnt by the first request (a ranged GET of byte 0). */
  size(): Promise<number> {
    if (this.remote === null) {
      this.remote = this.attempts('reach', () => this.probe());
      // A failed probe may be tried again by a later call.
      this.remote.catch(() => (this.remote = null));
    }
    return this.remote.then((r) => r.size);
  }

  /** Exactly `length` bytes from `offset`. */
  async read(offset: number, length: number): Promise<Uint8Array> {
    if (!Number.isSafeInteger(offset) || !Number.isSafeInteger(length) || offset < 0 || length < 0) {
      throw new FormatError(FormatCode.Malformed, `${this.label}: byte range ${offset}+${length} is not a pair of non-negative integers`);
    }
    const size = await this.size();
    if (offset + length > size) {
      throw new FormatError(FormatCode.Truncated, `${this.label}: bytes ${offset}..${offset + length} lie beyond its ${size} bytes`);
    }
    if (this.whole !== null) return this.whole.subarray(offset, offset + length);
    if (length === 0) return new Uint8Array(0);
    return this.attempts(`read bytes ${offset}..${offset + length} of`, () => this.fetchRange(offset, length));
  }

  /**
   * The bytes of several ranges, asked for in one request when the server
   * answers multi-range requests; otherwise (or when that request fails in
   * any way other than showing the file changed) one request per range,
   * each with its own retries.
   */
  async readMany(ranges: readonly ByteRange[]): Promise<Uint8Array[]> {
    for (const { offset, length } of ranges) {
      if (!Number.isSafeInteger(offset) || !Number.isSafeInteger(length) || offset < 0 || length < 0) {
        throw new FormatError(FormatCode.Malformed, `${this.label}: byte range ${offset}+${length} is not a pair of non-negative integers`);
      }
    }
    const size = await this.size();
    for (const { offset, length } of ranges) {
      if (offset + length > size) throw new FormatError(FormatCode.Truncated, `${this.label}: bytes ${offset}..${offset + length} lie beyond its ${size} bytes`);
    }
    const one = () => Promise.all(ranges.map((r) => this.read(r.offset, r.length)));
    if (this.whole !== null || !this.multiRange || ranges.filter((r) => r.length > 0).length < 2) return one();
    const changed: { error: FormatError | null } = { error: null };
    try {
      const got = await this.fetchRanges(ranges, changed);
      if (got !== null) {
        this.multiFailures = 0;
        return got;
      }
      this.multiRange = false;
    } catch (e) {
      if (changed.error !== null) throw changed.error;
      // An answer that breaks the multipart syntax: this server is asked one range per request from now on.
      if (e instanceof FormatError) this.multiRange = false;
      // Otherwise (a dropped connection, a time-out, a browser refusing the request across origins)
      // these ranges go one by one, and after a second such failure in a row all later ones too.
      else if (++this.multiFailures >= 2) this.multiRange = false;
    }
    return one();
  }

  /**
   * One GET for several ranges. Returns their bytes, or null when the server
   * does not answer multi-range requests usefully (200, another status, or
   * parts that do not cover every range). Sets `changed.error` (and throws
   * it) when the answer shows the file changed since it was opened.
   */
  private async fetchRanges(ranges: readonly ByteRange[], changed: { error: FormatError | null }): Promise<Uint8Array[] | null> {
    const remote = await this.size().then(() => this.remote!);
    const asked = ranges.filter((r) => r.length > 0);
    const header = `bytes=${asked.map((r) => `${r.offset}-${r.offset + r.length - 1}`).join(',')}`;
    const wanted = asked.reduce((a, r) => a + r.length, 0);
    // Room for the part headers (about 100 bytes each) and the delimiters.
    const limit = wanted + 512 * asked.length + 4096;
    let parts: { start: number; bytes: Uint8Array }[] | null = null;
    // As for one range: a changed size is `truncated`, a changed ETag or Last-Modified `malformed`.
    const changedNow = (message: string, code: FormatCode = FormatCode.Truncated): never => {
      changed.error = new FormatError(code, `${this.label}: ${message}`);
      throw changed.error;
    };
    await this.request('GET', header, async (r) => {
      if (r.status !== 206) {
        await r.body?.cancel().catch(() => undefined);
        return;
      }
      this.identity(r);
      const etag = r.headers.get('etag');
      const modified = r.headers.get('last-modified');
      if ((remote.etag !== null && etag !== null && etag !== remote.etag) || (remote.lastModified !== null && modified !== null && modified !== remote.lastModified)) {
        await r.body?.cancel().catch(() => undefined);
        changedNow('the file changed on the server while being read (ETag or Last-Modified differ from when it was opened)', FormatCode.Malformed);
      }
      const type = r.headers.get('content-type') ?? '';
      const m = /^\s*multipart\/byteranges\s*;(?:.*;)?\s*boundary=(?:"([^"]{1,70})"|([^\s;"]{1,70}))/i.exec(type);
      if (m) {
        const declared = r.headers.get('content-length');
        const n = declared !== null && /^\s*\d+\s*$/.test(declared) ? Number(declared) : null;
        if (n !== null && n > limit) {
          await r.body?.cancel().catch(() => undefined);
          return;
        }
        const { bytes, complete } = await this.collect(r, n, limit);
        if (!complete) throw new Transient(`short body: ${bytes.length} of ${n} bytes of a multi-range answer arrived`);
        parts = parseByteranges(bytes, m[1] ?? m[2], this.label);
      } else {
        const cr = this.contentRange(r);
        const length = cr.end - cr.start + 1;
        if (cr.end < cr.start || length > limit) {
          await r.body?.cancel().catch(() => undefined);
          return;
        }
        parts = [{ start: cr.start, total: cr.total, bytes: await this.body(r, length) }].map((p) => {
          if (p.total !== null && p.total !== remote.size) changedNow(`the file is now ${p.total} bytes, it was ${remote.size} when opened (changed on the server while being read)`);
          return p;
        });
      }
    });
    if (parts === null) return null;
    const got: { start: number; bytes: Uint8Array }[] = parts;
    for (const p of got as { start: number; bytes: Uint8Array; total?: number | null }[]) {
      if (p.total !== undefined && p.total !== null && p.total !== remote.size) changedNow(`the file is now ${p.total} bytes, it was ${remote.size} when opened (changed on the server while being read)`);
    }
    const out: Uint8Array[] = [];
    for (const r of ranges) {
      if (r.length === 0) {
        out.push(new Uint8Array(0));
        continue;
      }
      const part = got.find((p) => p.start <= r.offset && r.offset + r.length <= p.start + p.bytes.length);
      if (part === undefined) return null;
      out.push(part.bytes.subarray(r.offset - part.start, r.offset - part.start + r.length));
    }
    return out;
  }

  /** Run `once` with retries on transient failures; other errors pass at once. The overall deadline ends the attempts. */
  private async attempts<T>(what: string, once: () => Promise<T>): Promise<T> {
    let last: unknown;
    let tried = 0;
    const tries = () => `${tried} attempt${tried === 1 ? '' : 's'}`;
    const overdue = () =>
      new InputError(
        InputCode.File,
        `cannot ${what} '${this.label}': the deadline of ${this.deadline} ms for all reads passed${last === undefined ? '' : ` (last failure: ${describe(last)}, after ${tries()})`}`,
      );
    for (let attempt = 0; attempt <= this.retries; attempt++) {
      if (attempt > 0) {
        const wait = this.retryDelay * 2 ** (attempt - 1);
        if (Date.now() + wait >= this.deadlineAt) throw overdue();
        await sleep(wait);
      }
      if (Date.now() >= this.deadlineAt) throw overdue();
      tried++;
      try {
        return await once();
      } catch (e) {
        if (e instanceof FormatError || e instanceof InputError) throw e;
        if (e instanceof DeadlinePassed) throw overdue();
        last = e;
      }
    }
    if (last instanceof Transient && /^short body/.test(last.message)) {
      throw new FormatError(FormatCode.Truncated, `${this.label}: could not ${what} it: ${last.message}, ${tries()}`);
    }
    throw new InputError(InputCode.File, `cannot ${what} '${this.label}': ${describe(last)} (gave up after ${tries()})`);
  }

  /**
   * One request. The idle time limit applies to the wait for the answer and
   * to every wait for more of its body (so a long read that keeps coming is
   * not cut off, but one that stalls is); the request deadline, and the
   * overall one, to the whole of it (so one that keeps coming too slowly is
   * cut off too).
   */
  private async request(method: 'GET', range: string, use: (r: Response) => Promise<unknown>): Promise<void> {
    const controller = typeof AbortController === 'function' ? new AbortController() : null;
    let ended: 'idle' | 'request' | 'overall' | null = null;
    let timer: ReturnType<typeof setTimeout> | null = null;
    const stop = (why: 'idle' | 'request' | 'overall') => {
      ended ??= why;
      controller?.abort();
    };
    const arm = () => {
      if (timer !== null) clearTimeout(timer);
      if (this.timeout > 0 && controller) timer = setTimeout(() => stop('idle'), this.timeout);
    };
    // One timer for the whole request: the request deadline or the overall one, whichever comes first.
    const left = this.deadlineAt - Date.now();
    const whole = this.requestDeadline > 0 && this.requestDeadline <= left ? { ms: this.requestDeadline, why: 'request' as const } : Number.isFinite(left) ? { ms: Math.max(0, left), why: 'overall' as const } : null;
    const deadline = whole && controller ? setTimeout(() => stop(whole.why), whole.ms) : null;
    arm();
    const headers: Record<string, string> = { ...this.headers };
    // Range offsets count the bytes as stored; a compressed transfer would count others.
    // (Browsers set Accept-Encoding themselves and ignore this.)
    headers['Accept-Encoding'] = 'identity';
    headers['Range'] = range;
    this.requests++;
    let response: Response | null = null;
    try {
      response = await this.fetcher(this.url, { method, headers, signal: controller?.signal, cache: 'no-store', redirect: 'follow' });
      this.progress.set(response, arm);
      arm();
      await use(response);
    } catch (e) {
      // Release a body left unread, so its connection is not held open.
      if (response !== null && response.body !== null && !response.bodyUsed) await response.body.cancel().catch(() => undefined);
      if (ended === 'overall') throw new DeadlinePassed('overall deadline');
      if (ended === 'request') throw new Transient(`the answer did not complete within ${this.requestDeadline} ms`);
      if (ended === 'idle') throw new Transient(`no answer for ${this.timeout} ms`);
      if (e instanceof FormatError || e instanceof InputError || e instanceof Transient) throw e;
      // fetch and body streams fail with TypeError (network) or AbortError; either may pass on retry.
      throw new Transient(describe(e));
    } finally {
      if (timer !== null) clearTimeout(timer);
      if (deadline !== null) clearTimeout(deadline);
    }
  }

  /** Refuse statuses that no retry will mend; mark the rest transient. */
  private status(r: Response, what: string): void {
    if (RETRY_STATUS.has(r.status)) throw new Transient(`HTTP ${r.status} ${r.statusText}`.trim());
    throw new InputError(InputCode.File, `cannot ${what} '${this.label}': HTTP ${r.status} ${r.statusText}`.trim());
  }

  /** Refuse a content coding: Range offsets would then count other bytes than the file's. */
  private identity(r: Response): void {
    const coding = r.headers.get('content-encoding');
    if (coding !== null && coding.trim().toLowerCase() !== 'identity' && coding.trim() !== '') {
      throw new FormatError(FormatCode.Malformed, `${this.label}: the server sent it with Content-Encoding '${coding}'; ranged reads need the file as stored (identity)`);
    }
  }

  /**
   * Learn the size, and whether the server honours Range, with a ranged GET
   * of byte 0: 206 gives the size in Content-Range; 200 is a server that
   * ignores Range, whose whole file is kept when small; 416 an empty file.
   */
  private async probe(): Promise<Remote> {
    let found: Remote | null = null;
    await this.request('GET', 'bytes=0-0', async (r) => {
      const etag = r.headers.get('etag');
      const lastModified = r.headers.get('last-modified');
      if (r.status === 416) {
        found = { size: 0, etag, lastModified };
        return;
      }
      if (r.status === 200) {
        found = await this.acceptWhole(r, null);
        return;
      }
      if (r.status !== 206) this.status(r, 'reach');
      this.identity(r);
      const cr = this.contentRange(r);
      if (cr.start !== 0 || cr.end !== 0) {
        throw new FormatError(FormatCode.Malformed, `${this.label}: asked for byte 0, the server answered Content-Range '${r.headers.get('content-range')}'`);
      }
      if (cr.total === null) throw new FormatError(FormatCode.Malformed, `${this.label}: the server does not say the file's size (Content-Range '${r.headers.get('content-range')}')`);
      await this.body(r, 1);
      found = { size: cr.total, etag, lastModified };
    });
    return found!;
  }

  private noRanges(size: number): InputError {
    return new InputError(
      InputCode.File,
      `${this.label}: the server does not honour Range requests and the file is ${size} bytes, more than the ${this.maxWholeFile} bytes ` +
        'this reader holds in memory; serve it from a server that supports Range requests',
    );
  }

  /** A 200 answer with the whole file: keep it when small and of the known size, else refuse. */
  private async acceptWhole(r: Response, expected: number | null): Promise<Remote> {
    this.identity(r);
    const declared = r.headers.get('content-length');
    const n = declared !== null && /^\s*\d+\s*$/.test(declared) ? Number(declared) : null;
    if (n !== null && n > this.maxWholeFile) {
      await r.body?.cancel();
      throw this.noRanges(n);
    }
    if (expected !== null && n !== null && n !== expected) {
      await r.body?.cancel();
      throw new FormatError(FormatCode.Truncated, `${this.label}: the server ignored the Range request and sent ${n} bytes, but the file was ${expected} bytes when opened (changed on the server?)`);
    }
    const { bytes, complete } = await this.collect(r, n, this.maxWholeFile);
    if (!complete) throw new Transient(`short body: ${bytes.length} of ${n} bytes of the whole file arrived`);
    if (expected !== null && bytes.length !== expected) {
      throw new FormatError(FormatCode.Truncated, `${this.label}: the server ignored the Range request and sent ${bytes.length} bytes, but the file was ${expected} bytes when opened (changed on the server?)`);
    }
    this.whole = bytes;
    return { size: bytes.length, etag: r.headers.get('etag'), lastModified: r.headers.get('last-modified') };
  }

  /** Parse Content-Range: `bytes START-END/TOTAL` (TOTAL may be `*`). */
  private contentRange(r: Response): { start: number; end: number; total: number | null } {
    const text = r.headers.get('content-range');
    if (text === null) {
      throw new FormatError(
        FormatCode.Malformed,
        `${this.label}: a 206 answer without Content-Range, so its bytes cannot be placed (a server on another origin must list it in Access-Control-Expose-Headers)`,
      );
    }
    const m = /^\s*bytes\s+(\d+)-(\d+)\/(\d+|\*)\s*$/i.exec(text);
    if (!m) throw new FormatError(FormatCode.Malformed, `${this.label}: cannot parse Content-Range '${text}'`);
    return { start: Number(m[1]), end: Number(m[2]), total: m[3] === '*' ? null : Number(m[3]) };
  }

  /** Read a body of exactly `length` bytes; a short one is transient, a long one an error. */
  private async body(r: Response, length: number): Promise<Uint8Array> {
    const { bytes, complete } = await this.collect(r, length, length);
    if (!complete) throw new Transient(`short body: ${bytes.length} of ${length} bytes arrived`);
    return bytes;
  }

  /**
   * Collect a body into one buffer, refusing more than `limit` bytes.
   * `expected` (when known) sizes the buffer; `complete` says whether that
   * many bytes arrived.
   */
  private async collect(r: Response, expected: number | null, limit: number): Promise<Body> {
    const tooLong = (n: number) => {
      if (expected !== null) return new FormatError(FormatCode.Malformed, `${this.label}: the server sent more than the ${expected} bytes asked for`);
      return this.noRanges(n);
    };
    if (r.body === null) {
      const buf = new Uint8Array(await r.arrayBuffer());
      this.bytesFetched += buf.length;
      if (buf.length > limit) throw tooLong(buf.length);
      return { bytes: buf, complete: expected === null || buf.length === expected };
    }
    const reader = r.body.getReader();
    let buf = new Uint8Array(expected ?? Math.min(limit, 1 << 16));
    let at = 0;
    for (;;) {
      const { done, value } = await reader.read();
      if (done) break;
      this.progress.get(r)?.();
      this.bytesFetched += value.length;
      if (at + value.length > limit) {
        await reader.cancel().catch(() => undefined);
        throw tooLong(at + value.length);
      }
      if (at + value.length > buf.length) {
        // Unknown length: grow by doubling, up to the limit.
        const grown = new Uint8Array(Math.min(limit, Math.max(buf.length * 2, at + value.length)));
        grown.set(buf.subarray(0, at));
        buf = grown;
      }
      buf.set(value, at);
      at += value.length;
    }
    const bytes = at === buf.length ? buf : buf.slice(0, at);
    return { bytes, complete: expected === null || at === expected };
  }

  /** One ranged GET of `length` bytes at `offset`. */
  private async fetchRange(offset: number, length: number): Promise<Uint8Array> {
    const remote = await this.size().then(() => this.remote!);
    let out: Uint8Array | null = null;
    const end = offset + length - 1;
    await this.request('GET', `bytes=${offset}-${end}`, async (r) => {
      if (r.status === 200) {
        await this.acceptWhole(r, remote.size);
        out = this.whole!.subarray(offset, offset + length);
        return;
      }
      if (r.status === 416) {
        await r.body?.cancel();
        throw new FormatError(FormatCode.Truncated, `${this.label}: the server says bytes ${offset}..${offset + length} are beyond the file, which was ${remote.size} bytes when opened (changed on the server?)`);
      }
      if (r.status !== 206) this.status(r, `read bytes ${offset}..${offset + length} of`);
      this.identity(r);
      const cr = this.contentRange(r);
      if (cr.total !== null && cr.total !== remote.size) {
        await r.body?.cancel();
        throw new FormatError(FormatCode.Truncated, `${this.label}: the file is now ${cr.total} bytes, it was ${remote.size} when opened (changed on the server while being read)`);
      }
      const etag = r.headers.get('etag');
      const modified = r.headers.get('last-modified');
      if ((remote.etag !== null && etag !== null && etag !== remote.etag) || (remote.lastModified !== null && modified !== null && modified !== remote.lastModified)) {
        await r.body?.cancel();
        throw new FormatError(FormatCode.Malformed, `${this.label}: the file changed on the server while being read (ETag or Last-Modified differ from when it was opened)`);
      }
      if (cr.start !== offset || cr.end !== end) {
        await r.body?.cancel();
        throw new FormatError(FormatCode.Malformed, `${this.label}: asked for bytes ${offset}-${end}, the server answered Content-Range '${r.headers.get('content-range')}'`);
      }
      out = await this.body(r, length);
    });
    return out!;
  }

  /** Nothing to release: each request finishes on its own. Drops the whole-file fallback, if any. */
  async close(): Promise<void> {
    this.whole = null;
  }
}

const latin1 = new TextDecoder('latin1');

/**
 * The parts of a multipart/byteranges body (RFC 9110 section 14.6, with the
 * delimiter syntax of RFC 2046 section 5.1.1): each part's start and bytes,
 * taken by the length its Content-Range states (so part bytes that happen
 * to look like a delimiter do no harm). Throws a FormatError on a body that
 * does not follow the syntax.
 */
export function parseByteranges(body: Uint8Array, boundary: string, label: string): { start: number; total: number | null; bytes: Uint8Array }[] {
  const bad = (what: string): never => {
    throw new FormatError(FormatCode.Malformed, `${label}: a multipart/byteranges answer ${what}`);
  };
  const delim = new TextEncoder().encode(`--${boundary}`);
  const at = (pos: number, pattern: Uint8Array) => pos + pattern.length <= body.length && pattern.every((b, i) => body[pos + i] === b);
  const find = (from: number, pattern: Uint8Array): number => {
    for (let i = from; i + pattern.length <= body.length; i++) if (at(i, pattern)) return i;
    return -1;
  };
  const crlf = Uint8Array.of(13, 10);
  const blank = Uint8Array.of(13, 10, 13, 10);
  const out: { start: number; total: number | null; bytes: Uint8Array }[] = [];
  // The preamble (usually empty) ends at the first delimiter.
  let pos = find(0, delim);
  if (pos < 0) bad('has no delimiter');
  for (;;) {
    pos += delim.length;
    if (at(pos, Uint8Array.of(45, 45))) break; // the close delimiter
    // Transport padding (spaces, tabs), then CRLF.
    while (body[pos] === 32 || body[pos] === 9) pos++;
    if (!at(pos, crlf)) bad('has a delimiter not followed by a line end');
    const headEnd = find(pos, blank);
    if (headEnd < 0 || headEnd - pos > 8192) bad('has a part whose headers do not end');
    const lines = latin1.decode(body.subarray(pos + 2, headEnd)).split('\r\n');
    const range = lines.map((l) => /^content-range\s*:\s*bytes\s+(\d+)-(\d+)\/(\d+|\*)\s*$/i.exec(l)).find((x) => x !== null);
    if (!range) bad('has a part without a usable Content-Range');
    const start = Number(range![1]);
    const end = Number(range![2]);
    if (!Number.isSafeInteger(start) || !Number.isSafeInteger(end) || end < start) bad(`has a part with Content-Range bytes ${range![1]}-${range![2]}`);
    const from = headEnd + 4;
    const to = from + (end - start + 1);
    if (to > body.length) bad(`ends inside the part of bytes ${start}-${end}`);
    out.push({ start, total: range![3] === '*' ? null : Number(range![3]), bytes: body.subarray(from, to) });
    // CRLF, then the next delimiter.
    if (!at(to, crlf) || !at(to + 2, delim)) bad(`has no delimiter after the part of bytes ${start}-${end}`);
    pos = to + 2;
    if (out.length > 100_000) bad('has too many parts');
  }
  return out;
}
