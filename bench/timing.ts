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
