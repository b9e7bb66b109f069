/**
 * Window reads over HTTP: bytes fetched and latency of 256x256 windows of an
 * 8192x8192 archive served on 127.0.0.1 with Range support (the test
 * server of test/io/range-server.ts, which counts the bytes it sends).
 * The archive is the vega-datasets annual-precip grid mirror-tiled to
 * 8192x8192 and packed at rel:1e-3 with 64x64 tiles, or `--archive PATH`.
 *
 *   npx tsc -p tsconfig.bench.json && nice node bench/dist/bench/region-read.js [--archive PATH] [--runs 21]
 *
 * Reported as medians over windows at seeded random places: "cold" opens
 * the archive first (probe, prologue, tail, header, index, then the tiles),
 * "warm" reads from an archive object already open (its index cached).
 * Loopback has almost no latency: over a real network add a round trip per
 * request (cold: 5 + one per run of tiles; warm: one per run of tiles).
 */
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { ArchiveBuilder, open } from '../src/index.js';
import { HttpSource } from '../src/io/http-source.js';
import { FileSink } from '../src/io/file-sink.js';
import { startRangeServer } from '../test/io/range-server.js';

const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..', '..');
const SIDE = 8192;
const W = 256;

function arg(name: string, fallback: string): string {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && i + 1 < process.argv.length ? process.argv[i + 1] : fallback;
}

function mirroredPrecip(): (r0: number, count: number) => Float32Array {
  const raw = JSON.parse(readFileSync(join(ROOT, 'node_modules', 'vega-datasets', 'data', 'annual-precip.json'), 'utf8')) as { width: number; height: number; values: (number | null)[] };
  const v = Float64Array.from(raw.values, (x) => (x === null ? NaN : x));
  const reflect = (i: number, n: number) => {
    const p = i % (2 * n);
    return p < n ? p : 2 * n - 1 - p;
  };
  return (r0, count) => {
    const out = new Float32Array(count * SIDE);
    for (let i = 0; i < count; i++) {
      const src = reflect(r0 + i, raw.height) * raw.width;
      for (let j = 0; j < SIDE; j++) out[i * SIDE + j] = v[src + reflect(j, raw.width)];
    }
    return out;
  };
}

const median = (xs: number[]) => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)];

async function run(): Promise<void> {
  const runs = Number(arg('runs', '21'));
  let file = arg('archive', '');
  let dir: string | null = null;
  if (file === '') {
    dir = mkdtempSync(join(tmpdir(), 'rankfield-region-bench-'));
    file = join(dir, 'precip-8192.rfz');
    const t0 = performance.now();
    const sink = FileSink.create(file);
    const b = new ArchiveBuilder(sink);
    b.addBands(mirroredPrecip(), [SIDE, SIDE], 'f32', { bound: 'rel:1e-3', tile: 64, name: 'precip' });
    b.finish();
    sink.close();
    console.log(`packed ${file} in ${((performance.now() - t0) / 1000).toFixed(1)} s`);
  }
  const bytes = new Uint8Array(readFileSync(file));
  const server = await startRangeServer();
  server.put('/a.rfz', bytes);
  const url = `${server.url}/a.rfz`;
  try {
    // Seeded window corners (a linear congruential generator), not aligned to tiles.
    let seed = 12345;
    const next = () => ((seed = (Math.imul(seed, 1103515245) + 12345) >>> 0) % (SIDE - W));
    const corners = Array.from({ length: runs }, () => [next(), next()] as const);
    const cold: number[] = [];
    const coldBytes: number[] = [];
    const coldRequests: number[] = [];
    for (const [r, c] of corners) {
      server.reset();
      const t = performance.now();
      const a = await open(new HttpSource(url));
      await a.read(undefined, { rows: [r, r + W], cols: [c, c + W] });
      cold.push(performance.now() - t);
      coldBytes.push(server.bytesSent);
      coldRequests.push(server.requests);
    }
    const a = await open(new HttpSource(url));
    const warm: number[] = [];
    const warmBytes: number[] = [];
    const warmRequests: number[] = [];
    for (const [r, c] of corners) {
      server.reset();
      const t = performance.now();
      await a.read(undefined, { rows: [r, r + W], cols: [c, c + W] });
      warm.push(performance.now() - t);
      warmBytes.push(server.bytesSent);
      warmRequests.push(server.requests);
    }
    console.log(
      [
        `archive        ${bytes.length} bytes, ${SIDE}x${SIDE} f32, 64x64 tiles`,
        `window         ${W}x${W} at ${runs} seeded places over HTTP on 127.0.0.1`,
        `cold (open + read)  median ${median(cold).toFixed(1)} ms; bytes fetched median ${median(coldBytes)}; requests median ${median(coldRequests)}`,
        `warm (read only)    median ${median(warm).toFixed(1)} ms; bytes fetched median ${median(warmBytes)}; requests median ${median(warmRequests)}`,
      ].join('\n'),
    );
  } finally {
    await server.close();
    if (dir) rmSync(dir, { recursive: true, force: true });
  }
}

await run();
