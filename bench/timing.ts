/** Timings with tinybench: median latency of sequential runs. */
import { Bench } from 'tinybench';

export interface TimingOptions {
  /** Minimum runs of a task that is not slow. */
  iterations: number;
  /** Minimum time budget (ms) of a task that is not slow. */
  timeMs: number;
  /** A task whose first run takes longer than this is timed by that run alone (unless minRuns asks for more). */
  slowMs: number;
  /** When above 1: exactly this many runs, whatever the cost (the speed-target cells). */
  minRuns: number;
}

export interface Timing {
  medianMs: number;
  runs: number;
}

async function bench(fn: () => unknown, iterations: number, time: number): Promise<Timing> {
  const b = new Bench({ iterations, time, warmup: false, throws: true });
  b.add('task', async () => {
    await fn();
  });
  await b.run();
  const r = b.tasks[0].result;
  if (r.state !== 'completed') throw new Error(`timing did not complete (${r.state})`);
  return { medianMs: r.latency.p50, runs: r.latency.samplesCount };
}

/** Time `fn`; errors it throws propagate (the first run is also the check that it works). */
export async function timeTask(fn: () => unknown, o: TimingOptions): Promise<Timing> {
  if (o.minRuns > 1) return bench(fn, o.minRuns, 0);
  const probe = await bench(fn, 1, 0);
  if (probe.medianMs >= o.slowMs) return probe;
  // The probe doubled as warm-up.
  return bench(fn, o.iterations, o.timeMs);
}

export const median = (xs: number[]) => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)];

/**
 * On the small grids, each codec runs this long in a row within a round (as
 * many calls as its warm-up says fit), timed together: see {@link timedRounds}.
 */
const BATCH_MS = 25;

/**
 * Median wall ms of one call of each of `fns` over `runs` rounds, each
 * round running every fn in turn, after untimed runs of each for `warmMs`
 * milliseconds (at least one when warmMs > 0). The section runs in a
 * process of its own (see run.ts), where every codec, fflate's included,
 * starts with cold code: in one run the small grids' fflate inflate, timed
 * cold, measured 9.7 MB/s against 98-115 in the long bench process, and
 * inflating volcano's 3920 bytes took about 2 ms a call for its first 14
 * calls, 0.55 ms until about the 35th, then 0.3-0.5 ms (scratch probe). Ratios between them (rankfield against
 * fflate) are then measured over the same minutes: this host's speed
 * drifts from minute to minute (the same pack of the large field took 2.5 s
 * and 1.7 s four minutes apart, scratch/ab-pack.mjs), and timing each
 * codec's runs one after the other put that drift into the ratios.
 *
 * With a warm-up, a round runs each fn as many times in a row as fit in
 * about {@link BATCH_MS} (from its warm-up's time a call) untimed, then as
 * many again timed, and takes the mean of the timed batch: each codec is
 * timed in its own steady state and pays for collecting its own garbage,
 * not the codec's before it. Timed one call a turn, or in batches without
 * the untimed one, fflate's inflate of volcano took 0.25-0.8 ms a call
 * after fflate's deflate and rankfield's pack and read left their garbage,
 * against 0.09-0.14 ms with the untimed batch and 0.1 ms in a loop of its
 * own (scratch probe, issue 10).
 */
export async function timedRounds(fns: (() => unknown)[], runs: number, warmMs: number): Promise<number[]> {
  const batch = fns.map(() => 1);
  for (let k = 0; k < fns.length; k++) {
    if (warmMs <= 0) continue;
    const t0 = performance.now();
    let calls = 0;
    do {
      await fns[k]();
      calls++;
    } while (performance.now() - t0 < warmMs);
    batch[k] = Math.max(1, Math.round((BATCH_MS * calls) / (performance.now() - t0)));
  }
  const times = fns.map((): number[] => []);
  for (let r = 0; r < runs; r++) {
    for (let k = 0; k < fns.length; k++) {
      // Untimed first, with a warm-up: these calls pay for collecting the garbage the fn before left.
      if (warmMs > 0) for (let b = 0; b < batch[k]; b++) await fns[k]();
      const t0 = performance.now();
      for (let b = 0; b < batch[k]; b++) await fns[k]();
      times[k].push((performance.now() - t0) / batch[k]);
    }
  }
  return times.map(median);
}
