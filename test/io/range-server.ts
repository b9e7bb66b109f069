/**
 * A small HTTP file server on 127.0.0.1 for the tests: byte ranges as RFC
 * 9110 section 14 describes them (206 with Content-Range, 416 beyond the
 * end; several ranges in one request answered as multipart/byteranges,
 * section 14.6, unless `multiRange` is off, when the whole file is sent as
 * servers without that support do), ETag and Last-Modified, and a count of
 * the body bytes it sends.
 * A `misbehave` hook lets a test make it answer the way faulty servers do.
 */
import { createServer, type IncomingMessage, type ServerResponse } from 'node:http';
import type { AddressInfo } from 'node:net';
import { existsSync, readFileSync, statSync } from 'node:fs';
import { extname, join, normalize } from 'node:path';

/** What a request asked for, as the server parsed it. */
export interface Asked {
  method: string;
  path: string;
  /** [start, end] inclusive, or null for the whole file (or several ranges). */
  range: [number, number] | null;
  /** Every range of a request for several, [start, end] inclusive each; null otherwise. */
  ranges: [number, number][] | null;
  /** Requests served so far, this one included. */
  count: number;
}

/**
 * A faulty behaviour: return true when the hook answered the request
 * itself, false to let the server answer normally.
 */
export type Misbehave = (asked: Asked, req: IncomingMessage, res: ServerResponse, body: Uint8Array) => boolean;

export interface RangeServer {
  /** Base URL, e.g. http://127.0.0.1:PORT */
  url: string;
  /** Serve bytes (or a file from disk, read at each request) at a path such as '/a.rfz'. */
  put(path: string, content: Uint8Array | { file: string }): void;
  /** Serve the files under folder `dir` at URL paths starting with `prefix` (e.g. '/dist/'). */
  mount(prefix: string, dir: string): void;
  /** Body bytes sent (all requests). */
  bytesSent: number;
  /** Requests received. */
  requests: number;
  /** Every request, in order. */
  log: Asked[];
  /** Set or clear the faulty behaviour. */
  misbehave: Misbehave | null;
  /** Answer requests for several ranges with multipart/byteranges (default true); when false, with the whole file (200). */
  multiRange: boolean;
  /** Zero the counters and the log. */
  reset(): void;
  close(): Promise<void>;
}

const TYPES: Record<string, string> = {
  '.js': 'text/javascript',
  '.mjs': 'text/javascript',
  '.html': 'text/html; charset=utf-8',
  '.json': 'application/json',
};

/** Parse a single-range `bytes=a-b`, `bytes=a-` or `bytes=-n` header against a size; null when unusable. */
function parseRange(header: string | undefined, size: number): [number, number] | 'unsatisfiable' | null {
  if (header === undefined) return null;
  const m = /^bytes=(\d*)-(\d*)$/.exec(header.trim());
  if (!m || (m[1] === '' && m[2] === '')) return null;
  if (m[1] === '') {
    const n = Number(m[2]);
    if (n === 0) return 'unsatisfiable';
    return [Math.max(0, size - n), size - 1];
  }
  const start = Number(m[1]);
  const end = m[2] === '' ? size - 1 : Math.min(Number(m[2]), size - 1);
  if (start >= size || start > end) return 'unsatisfiable';
  return [start, end];
}

/** Parse a `bytes=a-b,c-d,...` header of two or more ranges; null when it is not one (RFC 9110 section 14.1.2 syntax, spaces allowed around commas). */
function parseRanges(header: string | undefined, size: number): [number, number][] | null {
  if (header === undefined || !/^bytes=/.test(header.trim())) return null;
  const items = header.trim().slice(6).split(',').map((x) => x.trim());
  if (items.length < 2) return null;
  const out: [number, number][] = [];
  for (const item of items) {
    const r = parseRange(`bytes=${item}`, size);
    if (r === null) return null;
    if (r !== 'unsatisfiable') out.push(r);
  }
  return out;
}

/**
 * A faulty behaviour: answer ranged reads (not the probe of byte 0) with
 * the right headers, then one body byte every `every` ms, as a server that
 * drips bytes does: never a pause long enough for an idle limit, yet a read
 * of n bytes takes n x `every` ms.
 */
export function drip(every: number): Misbehave {
  return (asked, _req, res, body) => {
    if (asked.range === null || asked.range[1] === 0) return false;
    const [a, b] = asked.range;
    res.writeHead(206, { 'Content-Length': String(b - a + 1), 'Content-Range': `bytes ${a}-${b}/${body.length}` });
    let at = a;
    const timer = setInterval(() => {
      if (res.destroyed || at > b) return clearInterval(timer);
      res.write(body.subarray(at, at + 1));
      at++;
      if (at > b) res.end();
    }, every);
    res.on('close', () => clearInterval(timer));
    return true;
  };
}

/** Start a server on 127.0.0.1 with an OS-chosen port. */
export async function startRangeServer(): Promise<RangeServer> {
  const files = new Map<string, Uint8Array | { file: string }>();
  const mounts: [string, string][] = [];
  const lookup = (path: string): Uint8Array | { file: string } | undefined => {
    const direct = files.get(path);
    if (direct !== undefined) return direct;
    for (const [prefix, dir] of mounts) {
      if (!path.startsWith(prefix)) continue;
      const rest = normalize(path.slice(prefix.length));
      if (rest.startsWith('..')) return undefined;
      const file = join(dir, rest);
      if (existsSync(file) && statSync(file).isFile()) return { file };
    }
    return undefined;
  };
  const state: RangeServer = {
    url: '',
    bytesSent: 0,
    requests: 0,
    log: [],
    misbehave: null,
    multiRange: true,
    put: (path, content) => void files.set(path, content),
    mount: (prefix, dir) => void mounts.push([prefix, dir]),
    reset() {
      state.bytesSent = 0;
      state.requests = 0;
      state.log = [];
    },
    close: async () => {
      server.closeAllConnections();
      await new Promise<void>((resolve) => server.close(() => resolve()));
    },
  };
  const send = (res: ServerResponse, body: Uint8Array) => {
    state.bytesSent += body.length;
    res.end(body);
  };
  const server = createServer((req, res) => {
    state.requests++;
    const path = decodeURIComponent(new URL(req.url ?? '/', 'http://x').pathname);
    const entry = lookup(path);
    if (entry === undefined) {
      res.writeHead(404, { 'Content-Type': 'text/plain' });
      res.end('not found');
      return;
    }
    const body = entry instanceof Uint8Array ? entry : new Uint8Array(readFileSync(entry.file));
    const several = parseRanges(req.headers.range, body.length);
    const parsed = several !== null ? (state.multiRange ? 'several' : null) : parseRange(req.headers.range, body.length);
    const asked: Asked = { method: req.method ?? 'GET', path, range: parsed === null || parsed === 'unsatisfiable' || parsed === 'several' ? null : parsed, ranges: several, count: state.requests };
    state.log.push(asked);
    if (state.misbehave?.(asked, req, res, body)) return;
    const common = {
      'Accept-Ranges': 'bytes',
      'Content-Type': TYPES[extname(path)] ?? 'application/octet-stream',
      ETag: `"${body.length.toString(16)}-${entry instanceof Uint8Array ? 'mem' : 'file'}"`,
      'Last-Modified': 'Tue, 01 Dec 2026 12:00:00 GMT',
      'Cache-Control': 'no-store',
    };
    if (parsed === 'several' && several !== null && several.length === 0) {
      res.writeHead(416, { ...common, 'Content-Range': `bytes */${body.length}` });
      res.end();
      return;
    }
    if (parsed === 'several' && several !== null) {
      // RFC 9110 section 14.6: one part per range, in the order asked, each with its Content-Range.
      const boundary = `rankfield-test-${state.requests}`;
      const enc = new TextEncoder();
      const chunks: Uint8Array[] = [];
      for (const [a, b] of several) {
        chunks.push(enc.encode(`\r\n--${boundary}\r\nContent-Type: ${common['Content-Type']}\r\nContent-Range: bytes ${a}-${b}/${body.length}\r\n\r\n`));
        chunks.push(body.subarray(a, b + 1));
      }
      chunks.push(enc.encode(`\r\n--${boundary}--\r\n`));
      const total = chunks.reduce((n, c) => n + c.length, 0);
      const out = new Uint8Array(total);
      let at = 0;
      for (const c of chunks) {
        out.set(c, at);
        at += c.length;
      }
      res.writeHead(206, { ...common, 'Content-Type': `multipart/byteranges; boundary=${boundary}`, 'Content-Length': String(total) });
      if (req.method === 'HEAD') res.end();
      else send(res, out);
      return;
    }
    if (parsed === 'unsatisfiable') {
      res.writeHead(416, { ...common, 'Content-Range': `bytes */${body.length}` });
      res.end();
      return;
    }
    if (parsed === null) {
      res.writeHead(200, { ...common, 'Content-Length': String(body.length) });
      if (req.method === 'HEAD') res.end();
      else send(res, body);
      return;
    }
    if (parsed === 'several') throw new Error('unreachable: several ranges were answered above');
    const [a, b] = parsed;
    res.writeHead(206, { ...common, 'Content-Length': String(b - a + 1), 'Content-Range': `bytes ${a}-${b}/${body.length}` });
    if (req.method === 'HEAD') res.end();
    else send(res, body.subarray(a, b + 1));
  });
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', () => resolve()));
  state.url = `http://127.0.0.1:${(server.address() as AddressInfo).port}`;
  return state;
}
