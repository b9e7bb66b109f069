/**
 * A run packed in parts by concurrent processes, as a cluster or GNU
 * parallel runs it: the plan made in parts (4 x `plan --part K/4` of the
 * range pass, `plan --merge`, 4 x `plan --base --part K/4` of the spectra
 * pass, `plan --merge`; the pieces started at once by GNU parallel,
 * Debian's `parallel` package), and compared with the plan of one process;
 * 4 x `pack --plan --part K/4` started at once by GNU parallel, `join`, then `check`; the
 * joined archive is compared byte for byte with a single `pack` of the same
 * input, a lost part is packed again alone, and windows are read over HTTP
 * from the joined archive. The field is the vega-datasets annual-precip
 * grid (data/annual-precip.json, land cells null, read as NaN: a masked
 * field) mirror tiled to 512 x 128 for the run in parts (four bands, one per
 * part: each process costs a Node start-up) and to 1024 x 128 for the refusals
 * (see test/archive/datasets.ts).
 * The parts (and the runs on worker threads) are separate processes; the
 * other commands run in this process, to spare a Node start-up each.
 */
import { spawnSync } from 'node:child_process';
import { readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { HttpSource } from '../../src/io/http-source.js';
import { MemorySource, open } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { mirrored, precip } from '../archive/datasets.js';
import { startRangeServer, type RangeServer } from '../io/range-server.js';
import { haveSystemTools } from '../system-tools.js';
import { main } from '../../src/cli/main.js';
import { BIN, ensureBuilt, expectCliError, rf, tempDir, type RunResult } from './helpers.js';

const PARALLEL = '/usr/bin/parallel';
const RUN = haveSystemTools('the parts test through GNU parallel', 'parallel', [PARALLEL]);
const ROWS = 1024;
const COLS = 128;
/** Rows of the field of the run in parts (half.npy). */
const RUN_ROWS = 512;

const { dir, remove } = tempDir('rankfield-parts-');
let server: RangeServer | undefined;

beforeAll(() => {
  ensureBuilt();
  const values = mirrored(precip(), COLS, 0, ROWS);
  writeFileSync(join(dir, 'precip.npy'), formatNpy({ data: values, shape: [ROWS, COLS], dtype: 'f32' }));
  writeFileSync(join(dir, 'half.npy'), formatNpy({ data: values.subarray(0, RUN_ROWS * COLS), shape: [RUN_ROWS, COLS], dtype: 'f32' }));
  // A build when dist/ is stale takes longer than the default 10 s of a hook on a busy machine.
}, 120_000);

afterAll(async () => {
  await server?.close();
  remove();
});

const bytes = (name: string) => readFileSync(join(dir, name));

/**
 * The command line run in this process (no Node start-up per command), on
 * files of the test folder: arguments naming one of them are made absolute.
 */
async function cli(args: string[]): Promise<RunResult> {
  let stdout = '';
  let stderr = '';
  const abs = args.map((a) => (/\.(npy|rfz|json|nc)$/.test(a) ? join(dir, a) : a));
  const code = await main(abs, { out: (x) => void (stdout += x), err: (x) => void (stderr += x), errTTY: false });
  return { code, stdout, stderr };
}

describe.runIf(RUN)('4 parts packed at once by GNU parallel, joined', () => {
  it('give the single pack byte for byte; a lost part is packed again alone (on 2 threads); windows read over HTTP', async () => {
    // The plan made in parts too: 4 pieces of the range pass, merged into the base; 4 of the spectra pass, merged into the plan.
    const parts = Array.from({ length: 4 }, (_, i) => String(i + 1));
    const pass = (args: string[]) => spawnSync(PARALLEL, ['--will-cite', '--halt', 'now,fail=1', '-j', '4', process.execPath, BIN, 'plan', 'half.npy', ...args, '--part', '{}/4', '-q', ':::', ...parts], { cwd: dir, encoding: 'utf8', timeout: 180_000 });
    const ranges = pass(['-o', 'range-{}.json', '--bound', 'psnr:60', '--tile', '16']);
    expect(ranges.status, ranges.stderr).toBe(0);
    const base = await cli(['plan', 'half.npy', '-o', 'run.base.json', '--merge', ...parts.map((k) => `range-${k}.json`)]);
    expect(base.code, base.stderr).toBe(0);
    // 512 rows in tiles of 16 and index pages of 8 tile rows: 4 bands of 128 rows, one per part.
    expect(base.stdout).toMatch(/^base of run .* 4 bands of 128 rows, so at most 4 parts; next, the spectra pass/);
    const spectra = pass(['-o', 'spectra-{}.json', '--base', 'run.base.json']);
    expect(spectra.status, spectra.stderr).toBe(0);
    const plan = await cli(['plan', 'half.npy', '-o', 'run.plan.json', '--merge', ...parts.map((k) => `spectra-${k}.json`).reverse(), '--run', 'precip-test']);
    expect(plan.code, plan.stderr).toBe(0);
    expect(plan.stdout).toMatch(/^planned run 'precip-test' .* L2 plan/);
    // The plan one process makes, byte for byte.
    const one = await cli(['plan', 'half.npy', '-o', 'one.plan.json', '--bound', 'psnr:60', '--tile', '16', '--run', 'precip-test', '-q']);
    expect(one.code, one.stderr).toBe(0);
    expect(bytes('run.plan.json').equals(bytes('one.plan.json'))).toBe(true);
    const p = spawnSync(PARALLEL, ['--will-cite', '--halt', 'now,fail=1', '-j', '4', process.execPath, BIN, 'pack', 'half.npy', '-o', 'part-{}.rfz', '--plan', 'run.plan.json', '--part', '{}/4', '-q', ':::', ...parts], { cwd: dir, encoding: 'utf8', timeout: 180_000 });
    expect(p.status, p.stderr).toBe(0);
    const joined = await cli(['join', ...parts.map((k) => `part-${k}.rfz`), '-o', 'run.rfz']);
    expect(joined.code, joined.stderr).toBe(0);
    expect(joined.stdout).toMatch(/^joined 4 parts of run 'precip-test' -> '\S*run.rfz'/);
    const single = await cli(['pack', 'half.npy', '-o', 'single.rfz', '--bound', 'psnr:60', '--tile', '16', '-q']);
    expect(single.code, single.stderr).toBe(0);
    expect(bytes('run.rfz').equals(bytes('single.rfz'))).toBe(true);
    // show names a part as such.
    expect((await cli(['show', 'part-3.rfz'])).stdout).toMatch(/^part {5}3\/4 of run 'precip-test': rows 256..383 of a field of 512 rows/m);
    const check = await cli(['check', 'run.rfz', '--against', 'half.npy', '-q']);
    expect(check.code, check.stderr).toBe(0);

    // A part lost (a failed node): join names it; packed again alone, the join is the same.
    rmSync(join(dir, 'part-3.rfz'));
    expectCliError(await cli(['join', ...parts.filter((k) => k !== '3').map((k) => `part-${k}.rfz`), '-o', 'again.rfz']), /run 'precip-test' has 4 parts; part 3 is missing/);
    // This time on two threads: the payloads are the same.
    expect(rf(['pack', 'half.npy', '-o', 'part-3.rfz', '--plan', 'run.plan.json', '--part', '3/4', '--threads', '2', '-q'], dir).code).toBe(0);
    expect((await cli(['join', ...parts.map((k) => `part-${k}.rfz`), '-o', 'again.rfz', '-q'])).code).toBe(0);
    expect(bytes('again.rfz').equals(bytes('single.rfz'))).toBe(true);

    // Windows of the joined archive over HTTP, against the same windows read from the file in memory.
    server = await startRangeServer();
    server.put('/run.rfz', bytes('run.rfz'));
    const remote = await open(new HttpSource(`${server.url}/run.rfz`));
    const local = await open(new MemorySource(new Uint8Array(bytes('single.rfz'))));
    for (const w of [{ rows: [0, 40], cols: [0, 128] }, { rows: [120, 140], cols: [30, 90] }, { rows: [488, 512], cols: [100, 128] }] as const) {
      const got = await remote.read(undefined, { rows: [...w.rows], cols: [...w.cols] });
      const want = await local.read(undefined, { rows: [...w.rows], cols: [...w.cols] });
      expect(Buffer.from(got.values.buffer).equals(Buffer.from(want.values.buffer))).toBe(true);
    }
    await remote.close();
    await local.close();
  }, 240_000);
});

describe('parts on the command line: one line and exit 2', () => {
  it('--part without --plan, --part on NetCDF, options the plan fixes, a part beyond the bands, an input the plan was not made from', async () => {
    expectCliError(await cli(['pack', 'precip.npy', '-o', 'x.rfz', '--bound', 'abs:1', '--part', '1/2']), /--part needs --plan: .*run 'rankfield plan \S*precip.npy -o PLAN --bound \.\.\.' first/);
    expectCliError(await cli(['pack', 'precip.npy', '-o', 'x.rfz', '--part', '0/2']), /--part must be K\/N with 1 <= K <= N/);
    expect((await cli(['plan', 'precip.npy', '-o', 'abs.plan.json', '--bound', 'abs:1', '--tile', '32', '-q'])).code).toBe(0);
    expectCliError(await cli(['pack', 'precip.npy', '-o', 'x.rfz', '--plan', 'abs.plan.json', '--part', '1/2', '--bound', 'abs:2']), /--bound: the plan '\S*abs.plan.json' fixes it; drop it/);
    // The whole field packed under the plan, on 2 threads, is the single pack.
    expect(rf(['pack', 'precip.npy', '-o', 'whole.rfz', '--plan', 'abs.plan.json', '--threads', '2', '-q'], dir).code).toBe(0);
    expect((await cli(['pack', 'precip.npy', '-o', 'abs.rfz', '--bound', 'abs:1', '--tile', '32', '-q'])).code).toBe(0);
    expect(bytes('whole.rfz').equals(bytes('abs.rfz'))).toBe(true);
    // 1024 rows in bands of 8 x 32 rows: 4 bands.
    expectCliError(await cli(['pack', 'precip.npy', '-o', 'x.rfz', '--plan', 'abs.plan.json', '--part', '1/5']), /the field has 4 bands of 256 rows .* at most 4 parts/);
    const other = mirrored(precip(), COLS, 7, ROWS);
    writeFileSync(join(dir, 'other.npy'), formatNpy({ data: other, shape: [ROWS, COLS], dtype: 'f32' }));
    expectCliError(await cli(['pack', 'other.npy', '-o', 'x.rfz', '--plan', 'abs.plan.json', '--part', '2/4']), /other.npy: rows 256..511 differ from those plan .* was made from/);
    writeFileSync(join(dir, 'short.npy'), formatNpy({ data: other.subarray(0, 512 * COLS), shape: [512, COLS], dtype: 'f32' }));
    expectCliError(await cli(['pack', 'short.npy', '-o', 'x.rfz', '--plan', 'abs.plan.json', '--part', '2/4']), /short.npy' holds a 512x128 f32 array; plan '\S*abs.plan.json' .* was made for 1024x128 f32/);
    writeFileSync(join(dir, 'broken.plan.json'), '{"rankfield_plan": 1, "hash": "00"}');
    expectCliError(await cli(['pack', 'precip.npy', '-o', 'x.rfz', '--plan', 'broken.plan.json', '--part', '1/2']), /broken.plan.json: not a plan written by 'rankfield plan'/);
    // Classic NetCDF (the CDF magic): plans describe .npy and raw input only.
    writeFileSync(join(dir, 'v.nc'), Buffer.from('CDF\x01\x00\x00\x00\x00', 'latin1'));
    expectCliError(await cli(['pack', 'v.nc', '-o', 'x.rfz', '--plan', 'abs.plan.json', '--part', '1/2']), /v.nc' is NetCDF, whose variables a plan does not describe: pack it in one process/);
    expectCliError(await cli(['join', 'single-missing.rfz', '-o', 'x.rfz']), /single-missing.rfz/);
  }, 120_000);

  it('plan in parts: a missing or repeated piece, pieces of other options, a base given as a plan, options the pieces fix', async () => {
    for (const k of [1, 2, 3]) expect((await cli(['plan', 'precip.npy', '-o', `r${k}.json`, '--bound', 'rmse:0.5', '--tile', '32', '--part', `${k}/3`, '-q'])).code).toBe(0);
    expect((await cli(['plan', 'precip.npy', '-o', 'r-other.json', '--bound', 'rmse:0.4', '--tile', '32', '--part', '2/3', '-q'])).code).toBe(0);
    expectCliError(await cli(['plan', 'precip.npy', '-o', 'b.json', '--merge', 'r1.json', 'r3.json']), /the range pass has 3 parts; part 2 is missing/);
    expectCliError(await cli(['plan', 'precip.npy', '-o', 'b.json', '--merge', 'r1.json', 'r2.json', 'r-other.json', 'r3.json']), /'\S*r-other.json' and '\S*r1.json' are pieces of different requests/);
    expectCliError(await cli(['plan', 'precip.npy', '-o', 'b.json', '--merge', 'r1.json', 'r2.json', 'r1.json', 'r3.json']), /r1.json' is named twice/);
    expectCliError(await cli(['plan', 'precip.npy', '-o', 'b.json', '--merge', 'r1.json', 'r2.json', 'r3.json', '--bound', 'rmse:1']), /--bound: the pieces fix it; drop it/);
    expectCliError(await cli(['plan', 'precip.npy', '-o', 'b.json', '--base', 'r1.json']), /--base makes a piece of the spectra pass: give --part K\/N/);
    expect((await cli(['plan', 'precip.npy', '-o', 'b.json', '--merge', 'r1.json', 'r2.json', 'r3.json', '-q'])).code).toBe(0);
    expectCliError(await cli(['pack', 'precip.npy', '-o', 'x.rfz', '--plan', 'b.json', '--part', '1/2']), /b.json: this is the base of a plan made in parts, without its L2 plan: run the spectra pass on it/);
    expectCliError(await cli(['plan', 'precip.npy', '-o', 's.json', '--base', 'r1.json', '--part', '1/2']), /r1.json: not the base of a plan written by 'rankfield plan --merge'/);
    expectCliError(await cli(['plan', 'precip.npy', '-o', 's.json']), /required option '--bound <MODE:VALUE>' not specified/);
  }, 60_000);
});
