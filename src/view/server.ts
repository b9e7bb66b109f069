/**
 * The viewer's HTTP server, on 127.0.0.1 only: the page, its two modules,
 * a little JSON about the archive, and the archive's bytes at /archive with
 * byte ranges as RFC 9110 section 14 describes them (one range: 206 with
 * Content-Range; several: 206 multipart/byteranges, section 14.6; beyond the
 * end: 416; none: 200 with the whole file, streamed in chunks).
 *
 * The archive's bytes come from a {@link ByteSource}: the open file, or for
 * an archive at an http(s) URL the library's HttpSource, so the server
 * proxies each range the page asks for to the remote server (the page never
 * needs the remote server to allow cross-origin reads, and talks to nothing
 * but 127.0.0.1).
 *
 * Requests whose Host is not this server's own address are refused (403), so
 * a web page elsewhere cannot reach the archive through DNS rebinding.
 */
import { randomBytes } from 'node:crypto';
import { createServer, type IncomingMessage, type Server, type ServerResponse } from 'node:http';
import type { AddressInfo } from 'node:net';
import type { ByteSource } from '../io/source.js';

/** What the server serves. */
export interface ViewServerOptions {
  /** The archive's bytes. */
  source: ByteSource;
  /** The page (HTML). */
  page: string;
  /** The page's modules, by file name (rankfield-view.mjs, rankfield-decode.mjs). */
  modules: Record<string, Uint8Array>;
  /** Served as /info.json. */
  info: object;
  /** Port to listen on; 0 (default): one the system chooses. */
  port?: number;
  /** Called with one line per request answered (method, path, ranges, status, body bytes). */
  log?: (line: string) => void;
}

/** A running viewer server. */
export interface ViewServer {
  url: string;
  port: number;
  close(): Promise<void>;
}

/** Most ranges one request may ask for. */
const MAX_RANGES = 1024;
/** Most bytes one ranged answer may carry (the page's reads ask for at most 16 MiB at a time). */
const MAX_RANGED_BYTES = 64 << 20;
/** Chunk of a whole-file answer. */
const CHUNK = 1 << 20;

/** A byte range [start, end], inclusive. */
type Span = [number, number];

/**
 * The ranges of a `Range` header against a file of `size` bytes (RFC 9110
 * section 14.1.2): null when the header is absent or not a bytes range set
 * (the whole file is sent, as the RFC allows), 'unsatisfiable' when no range
 * overlaps the file, else the satisfiable ranges in the order asked.
 */
export function parseRangeHeader(header: string | undefined, size: number): Span[] | 'unsatisfiable' | null {
  if (header === undefined) return null;
  const m = /^\s*bytes\s*=\s*(.+)$/i.exec(header);
  if (m === null) return null;
  const items = m[1].split(',').map((x) => x.trim());
  if (items.length > MAX_RANGES) return null;
  const out: Span[] = [];
  for (const item of items) {
    const r = /^(\d*)-(\d*)$/.exec(item);
    if (r === null || (r[1] === '' && r[2] === '')) return null;
    if (r[1] === '') {
      const n = Number(r[2]);
      if (n > 0 && size > 0) out.push([Math.max(0, size - n), size - 1]);
      continue;
    }
    const start = Number(r[1]);
    const end = r[2] === '' ? size - 1 : Math.min(Number(r[2]), size - 1);
    if (r[2] !== '' && Number(r[2]) < start) return null;
    if (start < size) out.push([start, end]);
  }
  return out.length === 0 ? 'unsatisfiable' : out;
}

const TYPES: Record<string, string> = { '.mjs': 'text/javascript; charset=utf-8', '.json': 'application/json' };

/** Start the server; resolves once it listens. */
export async function startViewServer(o: ViewServerOptions): Promise<ViewServer> {
  const size = await o.source.size();
  const etag = `"rf-${size.toString(36)}-${randomBytes(6).toString('hex')}"`;
  const boundary = `rankfield-${randomBytes(12).toString('hex')}`;
  const info = JSON.stringify(o.info);
  let origin = '';

  const note = (req: IncomingMessage, status: number, bytes: number, ranges?: Span[]) => {
    o.log?.(`${req.method} ${req.url} ${ranges ? `bytes=${ranges.map(([a, b]) => `${a}-${b}`).join(',')} ` : ''}${status} ${bytes}`);
  };
  const plain = (req: IncomingMessage, res: ServerResponse, status: number, text: string, headers: Record<string, string> = {}) => {
    const body = Buffer.from(`${text}\n`);
    res.writeHead(status, { 'Content-Type': 'text/plain; charset=utf-8', 'Content-Length': String(body.length), ...headers });
    res.end(req.method === 'HEAD' ? undefined : body);
    note(req, status, body.length);
  };

  const archive = async (req: IncomingMessage, res: ServerResponse) => {
    const common = { 'Accept-Ranges': 'bytes', ETag: etag, 'Cache-Control': 'no-cache', 'Content-Type': 'application/octet-stream' };
    const ifRange = req.headers['if-range'];
    const ranges = ifRange !== undefined && ifRange !== etag ? null : parseRangeHeader(req.headers.range, size);
    if (ranges === 'unsatisfiable') return plain(req, res, 416, 'range not satisfiable', { 'Content-Range': `bytes */${size}` });
    if (ranges === null) {
      res.writeHead(200, { ...common, 'Content-Length': String(size) });
      if (req.method === 'HEAD') return void res.end();
      for (let at = 0; at < size && !res.destroyed; at += CHUNK) {
        const chunk = await o.source.read(at, Math.min(CHUNK, size - at));
        if (!res.write(chunk)) await new Promise((resolve) => res.once('drain', resolve));
      }
      res.end();
      return note(req, 200, size);
    }
    const total = ranges.reduce((n, [a, b]) => n + b - a + 1, 0);
    if (total > MAX_RANGED_BYTES) return plain(req, res, 416, `at most ${MAX_RANGED_BYTES} bytes per request`, { 'Content-Range': `bytes */${size}` });
    const wanted = ranges.map(([a, b]) => ({ offset: a, length: b - a + 1 }));
    const parts = req.method === 'HEAD' ? [] : o.source.readMany && wanted.length > 1 ? await o.source.readMany(wanted) : await Promise.all(wanted.map((w) => o.source.read(w.offset, w.length)));
    if (ranges.length === 1) {
      const [a, b] = ranges[0];
      res.writeHead(206, { ...common, 'Content-Range': `bytes ${a}-${b}/${size}`, 'Content-Length': String(b - a + 1) });
      res.end(parts[0]);
      return note(req, 206, b - a + 1, ranges);
    }
    const chunks: Buffer[] = [];
    ranges.forEach(([a, b], i) => {
      chunks.push(Buffer.from(`--${boundary}\r\nContent-Type: application/octet-stream\r\nContent-Range: bytes ${a}-${b}/${size}\r\n\r\n`, 'latin1'));
      if (parts[i]) chunks.push(Buffer.from(parts[i].buffer, parts[i].byteOffset, parts[i].byteLength));
      chunks.push(Buffer.from('\r\n', 'latin1'));
    });
    chunks.push(Buffer.from(`--${boundary}--\r\n`, 'latin1'));
    const body = Buffer.concat(chunks);
    res.writeHead(206, { ...common, 'Content-Type': `multipart/byteranges; boundary=${boundary}`, 'Content-Length': String(body.length) });
    res.end(req.method === 'HEAD' ? undefined : body);
    note(req, 206, total, ranges);
  };

  const handle = async (req: IncomingMessage, res: ServerResponse) => {
    if (req.headers.host !== origin && req.headers.host !== origin.replace('127.0.0.1', 'localhost')) return plain(req, res, 403, 'this server answers requests for its own address only');
    if (req.method !== 'GET' && req.method !== 'HEAD') return plain(req, res, 405, 'only GET and HEAD', { Allow: 'GET, HEAD' });
    const path = (req.url ?? '/').split('?')[0];
    if (path === '/archive') return archive(req, res);
    let body: Uint8Array | undefined;
    let type = 'text/html; charset=utf-8';
    if (path === '/' || path === '/index.html') body = Buffer.from(o.page);
    else if (path === '/info.json') {
      body = Buffer.from(info);
      type = TYPES['.json'];
    } else if (Object.hasOwn(o.modules, path.slice(1))) {
      body = o.modules[path.slice(1)];
      type = TYPES['.mjs'];
    }
    if (body === undefined) return plain(req, res, 404, 'not found');
    res.writeHead(200, { 'Content-Type': type, 'Content-Length': String(body.length), 'Cache-Control': 'no-cache', 'X-Content-Type-Options': 'nosniff' });
    res.end(req.method === 'HEAD' ? undefined : body);
    note(req, 200, body.length);
  };

  const server: Server = createServer((req, res) => {
    handle(req, res).catch((e: unknown) => {
      const why = e instanceof Error ? e.message : String(e);
      if (!res.headersSent) plain(req, res, 502, `cannot read the archive: ${why}`);
      else res.destroy();
    });
  });
  await new Promise<void>((resolve, reject) => {
    server.once('error', reject);
    server.listen(o.port ?? 0, '127.0.0.1', () => {
      server.off('error', reject);
      resolve();
    });
  });
  const port = (server.address() as AddressInfo).port;
  origin = `127.0.0.1:${port}`;
  return {
    url: `http://${origin}/`,
    port,
    close: () =>
      new Promise<void>((resolve) => {
        server.close(() => resolve());
        server.closeAllConnections();
      }),
  };
}
