/**
 * HttpSource against a real HTTP server on 127.0.0.1 (test/io/range-server.ts),
 * well-behaved and faulty. The bytes it returns are compared with the bytes
 * served; the protocol rules are those of RFC 9110 section 14 (Range,
 * Content-Range, 206 and 416), from memory.
 */
import { afterAll, beforeAll, beforeEach, describe, expect, it } from 'vitest';
import { FormatCode, FormatError, InputCode, InputError, open, pack } from '../../src/index.js';
import { volcano } from '../archive/datasets.js';
import { HttpSource } from '../../src/io/http-source.js';
import { drip, startRangeServer, type RangeServer } from './range-server.js';

const bytes = Uint8Array.from({ length: 100_000 }, (_, i) => (i * 7919 + (i >> 8)) % 251);
let server: RangeServer;

beforeAll(async () => {
  server = await startRangeServer();
  server.put('/data.bin', bytes);
});
afterAll(async () => server.close());
beforeEach(() => {
  server.misbehave = null;
  server.reset();
});

/** Fast retries for tests. */
const quick = { retryDelay: 1, timeout: 2000 };

async function failure(p: Promise<unknown>): Promise<Error> {
  const e = await p.then(
    () => null,
    (err: unknown) => err,
  );
  expect(e, 'expected a rejection').toBeInstanceOf(Error);
  return e as Error;
}

describe('HttpSource with a server that honours Range', () => {
  it('learns the size and returns exactly the asked bytes', async () => {
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    expect(await src.size()).toBe(bytes.length);
    for (const [off, len] of [[0, 1], [0, 100_000], [99_999, 1], [1234, 4321], [50_000, 0]]) {
      expect(await src.read(off, len)).toEqual(bytes.subarray(off, off + len));
    }
    // One probe of byte 0, then one ranged GET per non-empty read.
    expect(server.requests).toBe(5);
    expect(src.requests).toBe(5);
    expect(server.log.slice(1).map((a) => a.range)).toEqual([[0, 0], [0, 99_999], [99_999, 99_999], [1234, 5554]]);
    expect(server.bytesSent).toBe(1 + 1 + 100_000 + 1 + 4321);
    expect(src.bytesFetched).toBe(server.bytesSent);
  });

  it('refuses ranges beyond the end without asking the server', async () => {
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    const e = await failure(src.read(99_990, 11));
    expect(e).toBeInstanceOf(FormatError);
    expect((e as FormatError).code).toBe(FormatCode.Truncated);
    expect(e.message).toMatch(/bytes 99990\.\.100001 lie beyond its 100000 bytes/);
    expect(server.requests).toBe(1);
  });

  it('reports a missing file (404) at once, without retries', async () => {
    const src = new HttpSource(`${server.url}/nothing.rfz`, quick);
    const e = await failure(src.size());
    expect(e).toBeInstanceOf(InputError);
    expect((e as InputError).code).toBe(InputCode.File);
    expect(e.message).toMatch(/cannot reach '.*nothing\.rfz': HTTP 404/);
    expect(server.requests).toBe(1);
  });

  it('refuses URLs that are not http(s)', () => {
    expect(() => new HttpSource('ftp://127.0.0.1/x')).toThrow(/not an http or https URL/);
    expect(() => new HttpSource('not a url')).toThrow(/is not a URL/);
  });
});

describe('HttpSource with faulty servers', () => {
  it('uses the whole body as an in-memory fallback when the server ignores Range and the file is small', async () => {
    server.misbehave = (_a, _req, res, body) => {
      res.writeHead(200, { 'Content-Length': String(body.length) });
      server.bytesSent += body.length;
      res.end(body);
      return true;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    expect(await src.size()).toBe(bytes.length);
    expect(await src.read(777, 3000)).toEqual(bytes.subarray(777, 3777));
    expect(await src.read(0, 100_000)).toEqual(bytes);
    // The whole file came once, with the probe; later reads are served from memory.
    expect(server.requests).toBe(1);
  });

  it('refuses a server that ignores Range when the file is beyond the whole-file limit, without downloading it', async () => {
    server.misbehave = (_a, _req, res, body) => {
      res.writeHead(200, { 'Content-Length': String(body.length) });
      res.end(body);
      return true;
    };
    const src = new HttpSource(`${server.url}/data.bin`, { ...quick, maxWholeFile: 10_000 });
    const e = await failure(src.size());
    expect(e).toBeInstanceOf(InputError);
    expect(e.message).toMatch(/does not honour Range requests and the file is 100000 bytes, more than the 10000 bytes/);
    expect(src.bytesFetched).toBe(0);
  });

  it('refuses a server that ignores Range and sends no length once the body passes the limit', async () => {
    server.misbehave = (_a, _req, res, body) => {
      res.writeHead(200, {}); // chunked, no Content-Length
      res.write(body.subarray(0, 50_000));
      res.end(body.subarray(50_000));
      return true;
    };
    const src = new HttpSource(`${server.url}/data.bin`, { ...quick, maxWholeFile: 10_000 });
    const e = await failure(src.size());
    expect(e.message).toMatch(/does not honour Range requests/);
  });

  it('retries dropped connections and then succeeds', async () => {
    let drops = 2;
    server.misbehave = (asked, req) => {
      if (asked.range?.[0] === 1000 && drops > 0) {
        drops--;
        req.socket.destroy();
        return true;
      }
      return false;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    expect(await src.read(1000, 5000)).toEqual(bytes.subarray(1000, 6000));
    expect(drops).toBe(0);
    expect(src.requests).toBe(1 + 3);
  });

  it('gives up after 3 retries on a connection that always drops, with a clear error', async () => {
    server.misbehave = (asked, req) => {
      if (asked.range?.[0] === 1000) {
        req.socket.destroy();
        return true;
      }
      return false;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    const e = await failure(src.read(1000, 5000));
    expect(e).toBeInstanceOf(InputError);
    expect(e.message).toMatch(/cannot read bytes 1000\.\.6000 of '.*data\.bin': .*gave up after 4 attempts/);
    expect(src.requests).toBe(1 + 4);
  });

  it('retries a body cut off mid-way (the connection drops after part of it)', async () => {
    let cuts = 1;
    server.misbehave = (asked, req, res, body) => {
      if (asked.range?.[0] === 2000 && cuts > 0) {
        cuts--;
        res.writeHead(206, { 'Content-Length': '8000', 'Content-Range': `bytes 2000-9999/${body.length}` });
        res.write(body.subarray(2000, 5000), () => req.socket.destroy());
        return true;
      }
      return false;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    expect(await src.read(2000, 8000)).toEqual(bytes.subarray(2000, 10_000));
  });

  it('reports a short body that the server frames as complete as Truncated, after retries', async () => {
    server.misbehave = (asked, _req, res, body) => {
      if (asked.range?.[0] === 2000) {
        res.writeHead(206, { 'Content-Length': '100', 'Content-Range': `bytes 2000-9999/${body.length}` });
        res.end(body.subarray(2000, 2100));
        return true;
      }
      return false;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    const e = await failure(src.read(2000, 8000));
    expect(e).toBeInstanceOf(FormatError);
    expect((e as FormatError).code).toBe(FormatCode.Truncated);
    expect(e.message).toMatch(/short body: 100 of 8000 bytes/);
  });

  it('refuses a Content-Range other than the one asked for', async () => {
    server.misbehave = (asked, _req, res, body) => {
      if (asked.range?.[0] === 3000) {
        res.writeHead(206, { 'Content-Length': '10', 'Content-Range': `bytes 3001-3010/${body.length}` });
        res.end(body.subarray(3001, 3011));
        return true;
      }
      return false;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    const e = await failure(src.read(3000, 10));
    expect(e).toBeInstanceOf(FormatError);
    expect(e.message).toMatch(/asked for bytes 3000-3009, the server answered Content-Range 'bytes 3001-3010\/100000'/);
  });

  it('reports a file whose size changed on the server while being read', async () => {
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    expect(await src.size()).toBe(100_000);
    const longer = new Uint8Array(120_000);
    longer.set(bytes);
    server.put('/data.bin', longer);
    try {
      const e = await failure(src.read(10, 10));
      expect(e).toBeInstanceOf(FormatError);
      expect(e.message).toMatch(/the file is now 120000 bytes, it was 100000 when opened/);
    } finally {
      server.put('/data.bin', bytes);
    }
  });

  it('reports a file rewritten on the server (another ETag) while being read', async () => {
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    await src.size();
    server.misbehave = (asked, _req, res, body) => {
      const [a, b] = asked.range!;
      res.writeHead(206, { ETag: '"other"', 'Content-Length': String(b - a + 1), 'Content-Range': `bytes ${a}-${b}/${body.length}` });
      res.end(body.subarray(a, b + 1));
      return true;
    };
    const e = await failure(src.read(10, 10));
    expect(e.message).toMatch(/changed on the server while being read/);
  });

  it('refuses a 206 without Content-Range, and a compressed body', async () => {
    server.misbehave = (asked, _req, res, body) => {
      if (asked.range?.[0] !== 0 || asked.range[1] !== 0) return false;
      res.writeHead(206, { 'Content-Length': '1' });
      res.end(body.subarray(0, 1));
      return true;
    };
    let e = await failure(new HttpSource(`${server.url}/data.bin`, quick).size());
    expect(e.message).toMatch(/206 answer without Content-Range/);
    server.misbehave = (_asked, _req, res) => {
      res.writeHead(206, { 'Content-Encoding': 'gzip', 'Content-Range': 'bytes 0-0/100000', 'Content-Length': '1' });
      res.end(Uint8Array.of(0));
      return true;
    };
    e = await failure(new HttpSource(`${server.url}/data.bin`, quick).size());
    expect(e.message).toMatch(/Content-Encoding 'gzip'; ranged reads need the file as stored/);
  });

  it('retries 503 answers', async () => {
    let busy = 2;
    server.misbehave = (_a, _req, res) => {
      if (busy-- > 0) {
        res.writeHead(503);
        res.end();
        return true;
      }
      return false;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    expect(await src.size()).toBe(100_000);
    expect(src.requests).toBe(3);
  });

  it('times out a server that never answers, and says so', async () => {
    server.misbehave = () => true; // never answers
    const src = new HttpSource(`${server.url}/data.bin`, { retryDelay: 1, timeout: 150, retries: 1 });
    const e = await failure(src.size());
    expect(e).toBeInstanceOf(InputError);
    expect(e.message).toMatch(/no answer for 150 ms \(gave up after 2 attempts\)/);
  });
});

describe('HttpSource time limits', () => {
  it('lets a slow body that keeps coming finish, and fails one that stalls', async () => {
    const slow = (stallAfter: number) => (asked: { range: [number, number] | null }, _req: unknown, res: import('node:http').ServerResponse, body: Uint8Array) => {
      if (asked.range?.[0] !== 0 || asked.range[1] === 0) return false;
      const [a, b] = asked.range;
      res.writeHead(206, { 'Content-Length': String(b - a + 1), 'Content-Range': `bytes ${a}-${b}/${body.length}` });
      let at = a;
      let chunks = 0;
      const step = () => {
        if (chunks++ === stallAfter) return; // stop sending, keep the connection open
        const end = Math.min(b + 1, at + 1000);
        res.write(body.subarray(at, end));
        at = end;
        if (at > b) res.end();
        else setTimeout(step, 60);
      };
      step();
      return true;
    };
    server.misbehave = slow(Infinity);
    const src = new HttpSource(`${server.url}/data.bin`, { retryDelay: 1, timeout: 300, retries: 0 });
    // 8 chunks 60 ms apart: about 420 ms in all, more than the 300 ms limit, but never a 300 ms pause (five times
    // the spacing, so a loaded machine's late timer does not make one).
    expect(await src.read(0, 8000)).toEqual(bytes.subarray(0, 8000));
    server.misbehave = slow(3);
    const stalled = new HttpSource(`${server.url}/data.bin`, { retryDelay: 1, timeout: 300, retries: 0 });
    const e = await failure(stalled.read(0, 8000));
    expect(e.message).toMatch(/no answer for 300 ms \(gave up after 1 attempt\)/);
  });
});

describe('HttpSource deadlines (a server that drips bytes)', () => {
  // One body byte every 20 ms: a 1000-byte read would take 20 s, with no pause reaching the idle limit.
  const dripping = drip(20);

  it('ends one request at its deadline however steadily the bytes come, and retries it', async () => {
    server.misbehave = dripping;
    // The idle limit far above the deadline: on a loaded machine the drip's 20 ms can stretch past a few hundred
    // (a run of the suite with a load average of 6 saw a 200 ms limit fire first), and the deadline is what is tested.
    const src = new HttpSource(`${server.url}/data.bin`, { retryDelay: 1, timeout: 2000, requestDeadline: 300, retries: 1 });
    const e = await failure(src.read(0, 1000));
    expect(e).toBeInstanceOf(InputError);
    expect((e as InputError).code).toBe(InputCode.File);
    expect(e.message).toMatch(/cannot read bytes 0\.\.1000 of '.*data\.bin': the answer did not complete within 300 ms \(gave up after 2 attempts\)/);
    // The probe, then the read and its retry.
    expect(server.requests).toBe(3);
  });

  it('ends all reads at the overall deadline, retries and waits included, and refuses reads after it', async () => {
    server.misbehave = dripping;
    const src = new HttpSource(`${server.url}/data.bin`, { retryDelay: 1, timeout: 200, requestDeadline: 10_000, deadline: 400, retries: 5 });
    const e = await failure(src.read(0, 1000));
    expect(e).toBeInstanceOf(InputError);
    expect(e.message).toMatch(/cannot read bytes 0\.\.1000 of '.*data\.bin': the deadline of 400 ms for all reads passed/);
    const requests = server.requests;
    server.misbehave = null;
    const again = await failure(src.read(0, 10));
    expect(again.message).toMatch(/the deadline of 400 ms for all reads passed/);
    expect(server.requests).toBe(requests); // no request was sent
  });

  it('refuses deadlines that are not finite numbers >= 0', () => {
    expect(() => new HttpSource(`${server.url}/data.bin`, { requestDeadline: -1 })).toThrow(/requestDeadline must be a finite number >= 0, got -1/);
    expect(() => new HttpSource(`${server.url}/data.bin`, { deadline: Infinity })).toThrow(/deadline must be a finite number >= 0, got Infinity/);
  });
});

describe('an archive over HTTP', () => {
  it('opens with one probe plus the prologue, the tail, and one read of header and index directory', async () => {
    const g = volcano();
    const archiveBytes = pack(g.values, g.shape, { bound: 'abs:0.5', tile: 16 });
    server.put('/a.rfz', archiveBytes);
    const src = new HttpSource(`${server.url}/a.rfz`, quick);
    const a = await open(src);
    // The header and the directory lie back to back before the tail (spec/FORMAT.md 3.5): one read fetches both.
    expect(server.requests).toBe(4);
    const whole = await (await open(archiveBytes)).read();
    expect(new Uint32Array((await a.read()).values.buffer)).toEqual(new Uint32Array(whole.values.buffer));
  });
});

describe('several ranges in one request (RFC 9110 section 14.6, multipart/byteranges, from memory)', () => {
  const ranges = [
    { offset: 10, length: 5 },
    { offset: 4000, length: 1 },
    { offset: 0, length: 0 },
    { offset: 99_000, length: 1000 },
  ];
  const want = ranges.map((r) => bytes.subarray(r.offset, r.offset + r.length));

  it('asks for them in one request and returns exactly the asked bytes', async () => {
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    await src.size();
    server.reset();
    expect(await src.readMany(ranges)).toEqual(want);
    expect(server.requests).toBe(1);
    expect(server.log[0].ranges).toEqual([[10, 14], [4000, 4000], [99_000, 99_999]]);
    expect(src.bytesFetched).toBe(1 + server.bytesSent);
  });

  it('places parts by their Content-Range: bytes that look like a delimiter inside a part do no harm', async () => {
    // A file whose bytes hold the server's delimiter text for this very request.
    const trap = new TextEncoder().encode(`\r\n--rankfield-test-3--\r\n`.repeat(20));
    server.put('/trap.bin', trap);
    const src = new HttpSource(`${server.url}/trap.bin`, quick);
    await src.size(); // request 1
    await src.read(0, 1); // request 2
    const got = await src.readMany([{ offset: 0, length: 40 }, { offset: 100, length: 60 }]); // request 3
    expect(got).toEqual([trap.subarray(0, 40), trap.subarray(100, 160)]);
  });

  it('a server that sends the whole file (200) instead is asked one range per request from then on', async () => {
    server.multiRange = false;
    try {
      const src = new HttpSource(`${server.url}/data.bin`, quick);
      await src.size();
      server.reset();
      expect(await src.readMany(ranges)).toEqual(want);
      expect(src.multiRange).toBe(false);
      // The multi-range request, then one request per non-empty range.
      expect(server.log.map((a) => (a.ranges ? 'several' : a.range))).toEqual(['several', [10, 14], [4000, 4000], [99_000, 99_999]]);
      server.reset();
      expect(await src.readMany(ranges)).toEqual(want);
      expect(server.requests).toBe(3);
    } finally {
      server.multiRange = true;
    }
  });

  it('a server that answers one range covering them all is used, within the size allowed', async () => {
    server.misbehave = (asked, _req, res, body) => {
      if (asked.ranges === null) return false;
      const a = Math.min(...asked.ranges.map((r) => r[0]));
      const b = Math.max(...asked.ranges.map((r) => r[1]));
      res.writeHead(206, { 'Content-Range': `bytes ${a}-${b}/${body.length}`, 'Content-Length': String(b - a + 1) });
      res.end(body.subarray(a, b + 1));
      return true;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    const near = [
      { offset: 100, length: 10 },
      { offset: 120, length: 10 },
    ];
    expect(await src.readMany(near)).toEqual(near.map((r) => bytes.subarray(r.offset, r.offset + r.length)));
    expect(src.multiRange).toBe(true);
    // Covering 10 and 99 000 would take about the whole file: more than asked allows, so one range per request.
    server.reset();
    expect(await src.readMany(ranges)).toEqual(want);
    expect(src.multiRange).toBe(false);
    expect(server.requests).toBe(4);
  });

  it('a multipart answer that breaks the syntax is not used: one range per request', async () => {
    server.misbehave = (asked, _req, res) => {
      if (asked.ranges === null) return false;
      res.writeHead(206, { 'Content-Type': 'multipart/byteranges; boundary=XYZ' });
      res.end('--XYZ\r\nContent-Range: bytes 10-14/100000\r\n\r\nabc');
      return true;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    expect(await src.readMany(ranges)).toEqual(want);
    expect(src.multiRange).toBe(false);
  });

  it('multi-range requests that get no answer twice in a row are not tried again', async () => {
    server.misbehave = (asked, req) => {
      if (asked.ranges === null) return false;
      req.socket.destroy();
      return true;
    };
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    expect(await src.readMany(ranges)).toEqual(want);
    expect(src.multiRange).toBe(true);
    expect(await src.readMany(ranges)).toEqual(want);
    expect(src.multiRange).toBe(false);
    server.reset();
    expect(await src.readMany(ranges)).toEqual(want);
    expect(server.log.every((a) => a.ranges === null)).toBe(true);
  });

  it('a multi-range answer showing the file changed is refused, not retried one by one', async () => {
    const src = new HttpSource(`${server.url}/data.bin`, quick);
    await src.size();
    server.misbehave = (asked, _req, res) => {
      if (asked.ranges === null) return false;
      res.writeHead(206, { 'Content-Type': 'multipart/byteranges; boundary=XYZ', ETag: '"other"' });
      res.end('--XYZ--\r\n');
      return true;
    };
    const e = await failure(src.readMany(ranges));
    expect(e).toBeInstanceOf(FormatError);
    expect(e.message).toMatch(/changed on the server while being read/);
  });
});
