import { availableParallelism } from 'node:os';
import { defineConfig } from 'vitest/config';

/** Test files that run in a process of their own (see `projects` below). */
const OWN_PROCESS = ['test/{browser,parallel,view}/**/*.test.ts'];

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
    // Most test files share their worker processes (isolate: false): a process runs one file after
    // another and imports the sources once, instead of a new process per file that starts vitest and
    // imports (and compiles anew) the same hundred modules. CPU seconds of all processes, the same
    // tests, on this 2-core machine with a load of 4-10 from other work: test/{archive,bench,codec,
    // format,fuzz,io,linalg,parts,picture} (50 files) 159.5 s isolated, 103.5 s shared; test/cli
    // (30 files) 102.6 s shared. Those test files change no global state (no environment variables,
    // stubs, fake timers or signal handlers; the in-process CLI runs restore the working folder and
    // each file works in a temporary folder of its own), and each test file's own state is its
    // module's. The files that start servers, worker pools or a browser keep a process each.
    projects: [
      { extends: true, test: { name: 'shared', include: ['test/**/*.test.ts'], exclude: OWN_PROCESS, isolate: false } },
      { extends: true, test: { name: 'own-process', include: OWN_PROCESS } },
    ],
  },
});
