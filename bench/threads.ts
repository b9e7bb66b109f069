/**
 * Speed on worker threads, on its own (the full `npm run bench` writes the
 * same table into RESULTS.md): encode and decode MB/s of rankfield at
 * rel:1e-3 (or --bound) with 1 and 2 threads, beside fflate DEFLATE level 6
 * and INFLATE of the same raw float32 bytes in the same process (medians of
 * several runs), on the large 4096 x 4096 bench field and the vega-datasets
 * volcano and annual-precip grids; then the wall time of whole
 * `node bin/rankfield unpack` processes writing the large field to .npy, and
 * of whole `node bin/rankfield pack` processes reading it from .npy, with
 * 1 and 2 threads. What is measured and how: bench/speed.ts.
 *
 *   npx tsc -p . && npx tsc -p tsconfig.bench.json && node bench/dist/bench/threads.js [--runs N] [--bound B] [--quick] [--json]
 *
 * --json prints the run as JSON on stdout instead of the table: `npm run
 * bench` runs its Speed section so, in a fresh process (see run.ts).
 */
import { availableParallelism, cpus } from 'node:os';
import { benchFields } from './fields.js';
import { runSpeed, speedTable } from './speed.js';

const arg = (name: string, fallback: string) => {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && i + 1 < process.argv.length ? process.argv[i + 1] : fallback;
};
/** The bound (default rel:1e-3, the issue's; --bound psnr:60 for an L2 bound, whose planning pass also runs on the threads). */
const BOUND = arg('bound', 'rel:1e-3');
const RUNS = Number(arg('runs', '3'));
/** --quick: the large field shrunk to 1024 x 1024 (a check that the script runs, not a measurement). */
const QUICK = process.argv.includes('--quick');

const JSON_OUT = process.argv.includes('--json');

if (!JSON_OUT) console.log(`node ${process.version}, ${cpus().length} cores (${availableParallelism()} available) of ${cpus()[0]?.model ?? 'unknown'}; bound ${BOUND}; medians of ${RUNS} runs\n`);
const run = await runSpeed(benchFields(QUICK), BOUND, RUNS, (id) => console.error(`${id}: done`));
if (JSON_OUT) console.log(JSON.stringify(run));
else for (const line of speedTable(run)) console.log(line);
