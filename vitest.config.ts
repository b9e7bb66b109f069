import { availableParallelism } from 'node:os';
import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    // Vitest's default of 5 s per test is met by every test on an idle 2-core machine, but tests
    // that start the command line as a process can take 2-3 times longer when the machine is
    // busy (measured with two to four other test runs beside the suite). Tests slow for a reason
    // (large inputs, system tools, a browser) still set their own, longer, timeouts.
    testTimeout: 15_000,
    hookTimeout: 30_000,
    // At least two test files at once: many tests wait on child processes (the command line,
    // ncgen, chromium), so a second worker uses the time they wait. On this 2-core machine, idle:
    // 313 s with vitest's default (one worker on two cores), 201 s with two.
    maxWorkers: Math.max(2, availableParallelism()),
    // Node's own module loader runs the tests and the TypeScript they import (test/native-ts-hooks.mjs
    // removes the types with esbuild), not vitest's module runner, which reaches every imported binding
    // through a getter: the encoder's tests take about half the CPU time so (vega.test.ts 27.8 s -> 16.1 s,
    // auto-tile.test.ts 29.7 s -> 16.5 s, measured one file at a time with /usr/bin/time on this machine).
    // The suite uses nothing of the runner's own, nor of the loader vitest adds without it (no vi.mock,
    // no import.meta.vitest, no import.meta.glob), so that loader is off too.
    experimental: { viteModuleRunner: false, nodeLoader: false },
    execArgv: ['--enable-source-maps', '--import', new URL('./test/native-ts.mjs', import.meta.url).href],
  },
});
