/**
 * The paged index at the size: a 256x256 window of a SIDE x SIDE
 * archive (default 16384 x 16384, 65,536 tiles of 64x64) read over HTTP from
 * the test server of test/io/range-server.ts on 127.0.0.1, which counts the
 * requests and the body bytes it sends. Reports what open() fetches (probe,
 * prologue, tail, header, index directory) and what the window read fetches
 * after it (index pages and payloads), against the requirement of issue 11:
 * at most 1.5 x the payload bytes of the touched tiles + 16 KiB, in at most
 * 4 requests. The field is constant (every tile a 13-byte rank-0 payload), so
 * the index is most of the archive; packing it takes about 45 s, which is
 * why the test (test/archive/paged-window.test.ts) uses 4096 x 4096.
 *
 *   npx tsc -p tsconfig.bench.json && nice node bench/dist/bench/paged-window.js [--side 16384]
 */
import { ArchiveBuilder, MemorySink, open } from '../src/index.js';
import { HttpSource } from '../src/io/http-source.js';
import { startRangeServer } from '../test/io/range-server.js';

function arg(name: string, fallback: string): string {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && i + 1 < process.argv.length ? process.argv[i + 1] : fallback;
}

async function run(): Promise<void> {
  const side = Number(arg('side', '16384'));
  const tile = 64;
  const t0 = performance.now();
  const sink = new MemorySink();
  const b = new ArchiveBuilder(sink);
  const band = new Float32Array(tile * side).fill(1.25);
  b.addBands((_r0, count) => band.subarray(0, count * side), [side, side], 'f32', { bound: 'abs:1e-3', tile, name: 'c' });
  b.finish();
  const bytes = sink.bytes();
  const packMs = performance.now() - t0;
  const server = await startRangeServer();
  server.put('/c.rfz', bytes);
  try {
    const local = await open(bytes);
    const ix = await local.fieldIndex('c');
    const pages = local.directory.fields[0].page_length.reduce((a, x) => a + x, 0);
    const gc = Math.ceil(side / tile);
    // Not aligned to tiles or to pages (8 x 8 tiles): 5 x 5 tiles on 2 x 2 pages, when the field is large enough.
    const r0 = Math.min(side - 256, 500);
    const c0 = Math.min(side - 256, 1000);
    const rows: [number, number] = [r0, r0 + 256];
    const cols: [number, number] = [c0, c0 + 256];
    let payload = 0;
    let touched = 0;
    for (let ti = Math.floor(rows[0] / tile); ti * tile < rows[1]; ti++) {
      for (let tj = Math.floor(cols[0] / tile); tj * tile < cols[1]; tj++) {
        payload += ix.length[ti * gc + tj];
        touched++;
      }
    }
    server.reset();
    const archive = await open(new HttpSource(`${server.url}/c.rfz`));
    const open1 = { bytes: server.bytesSent, requests: server.requests };
    server.reset();
    const got = await archive.read('c', { rows, cols });
    if (!got.values.every((v) => v === 1.25)) throw new Error('wrong values');
    const budget = 1.5 * payload + 16 * 1024;
    console.log(`archive ${side}x${side}, tiles ${tile}x${tile} (${gc * gc} tiles), packed in ${(packMs / 1000).toFixed(1)} s: ${bytes.length} bytes, index pages ${pages} bytes in all`);
    console.log(`open: ${open1.bytes} bytes in ${open1.requests} requests`);
    console.log(`window rows ${rows.join('..')} cols ${cols.join('..')} (${touched} tiles, payloads ${payload} bytes): ${server.bytesSent} bytes in ${server.requests} requests`);
    console.log(`requirement: <= ${budget} bytes (1.5 x ${payload} + 16384) and <= 4 requests: ${server.bytesSent <= budget && server.requests <= 4 ? 'met' : 'NOT met'}`);
  } finally {
    await server.close();
  }
}

run().catch((e: unknown) => {
  console.error(e);
  process.exitCode = 1;
});
