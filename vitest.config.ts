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
  },
});
