/**
 * 100 concurrent window reads on one archive object over HTTP, from a server
 * on 127.0.0.1 that cuts every fifth payload response off mid-body: each read
 * must return exactly the values of the same window of a whole in-memory
 * decode (bit for bit), the cut responses being retried; and a server that
 * always cuts one range off must give a clear error after a bounded number of
 * retries. Data: the vega-datasets annual-precip grid (data/annual-precip.json,
 * open data, 360 x 168).
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { InputError, open, pack } from '../../src/index.js';
import { HttpSource } from '../../src/io/http-source.js';
import { startRangeServer, type RangeServer } from '../io/range-server.js';
import { precip } from './datasets.js';

let server: RangeServer;
const g = precip();
const bytes = pack(Float32Array.from(g.values), g.shape, { bound: 'rel:1e-3', tile: 24, name: 'p' });

beforeAll(async () => {
  server = await startRangeServer();
  server.put('/p.rfz', bytes);
});
afterAll(async () => {
  await server?.close();
});

/** The 32-bit words of a float32 array, for bit-for-bit comparison. */
const bits = (v: ArrayBufferView) => Array.from(new Uint32Array(v.buffer, v.byteOffset, v.byteLength / 4));

describe('100 concurrent window reads over a flaky HTTP server', () => {
  it('all return the right values; cut-off responses are retried', async () => {
    let payloadResponses = 0;
    let cuts = 0;
    // Cut every fifth response that serves payload bytes (not the probe, tail, header or index).
    server.misbehave = (asked, req, res, body) => {
      const r = asked.range;
      if (!r || r[0] < 12 || r[1] >= body.length - 24 - 2048) return false; // after the 12-byte prologue, well before the 24-byte tail
      payloadResponses++;
      if (payloadResponses % 5 !== 0) return false;
      cuts++;
      const [a, b] = r;
      res.writeHead(206, { 'Content-Length': String(b - a + 1), 'Content-Range': `bytes ${a}-${b}/${body.length}` });
      res.write(body.subarray(a, a + Math.max(1, Math.floor((b - a + 1) / 2))), () => req.socket.destroy());
      return true;
    };
    const whole = (await (await open(bytes)).read('p')).values;
    const a = await open(new HttpSource(`${server.url}/p.rfz`, { retryDelay: 1 }));
    const windows = Array.from({ length: 100 }, (_, k) => {
      const r0 = (k * 37) % 160;
      const c0 = (k * 53) % 350;
      return { rows: [r0, Math.min(168, r0 + 1 + ((k * 11) % 30))] as [number, number], cols: [c0, Math.min(360, c0 + 1 + ((k * 17) % 60))] as [number, number] };
    });
    const results = await Promise.all(windows.map((w) => a.read('p', w)));
    results.forEach((got, k) => {
      const { rows, cols } = windows[k];
      const width = cols[1] - cols[0];
      const want = new Float32Array((rows[1] - rows[0]) * width);
      for (let i = rows[0]; i < rows[1]; i++) want.set(whole.subarray(i * 360 + cols[0], i * 360 + cols[1]), (i - rows[0]) * width);
      expect(bits(got.values), `window ${k}`).toEqual(bits(want));
    });
    expect(cuts).toBeGreaterThan(0);
    server.misbehave = null;
  });

  it('a range that is always cut off ends in one clear error after bounded retries', async () => {
    const a = await open(new HttpSource(`${server.url}/p.rfz`, { retryDelay: 1 }));
    server.misbehave = (asked, req, res, body) => {
      const r = asked.range;
      if (!r || r[0] < 12 || r[1] >= body.length - 24 - 2048) return false; // payloads (and pages): after the 12-byte prologue, well before the 24-byte tail
      res.writeHead(206, { 'Content-Length': String(r[1] - r[0] + 1), 'Content-Range': `bytes ${r[0]}-${r[1]}/${body.length}` });
      res.write(body.subarray(r[0], r[0] + 1), () => req.socket.destroy());
      return true;
    };
    const e = await a.read('p', { rows: [0, 10], cols: [0, 10] }).catch((x: unknown) => x);
    server.misbehave = null;
    expect(e).toBeInstanceOf(InputError);
    expect((e as Error).message).toMatch(/gave up after \d+ attempts/);
  });
});
