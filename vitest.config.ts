import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    // Vitest's default of 5 s per test is met by every test on an idle 2-core machine, but tests
    // that start the command line as a process can take 2-3 times longer when the machine is
    // busy (measured with two to four other test runs beside the suite). Tests slow for a reason
    // (large inputs, system tools, a browser) still set their own, longer, timeouts.
    testTimeout: 15_000,
    hookTimeout: 30_000,
  },
});
