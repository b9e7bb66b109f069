/**
 * Tests that need a system package (Debian's chromium, netcdf-bin,
 * hdf5-tools) run when it is installed and skip with a one-line reason when
 * it is not, unless RANKFIELD_SYSTEM_TESTS=required (set by .ci/run, which
 * installs them): then they run and fail on the missing program.
 */
import { existsSync } from 'node:fs';

/** True when .ci/run asks for every system test to run. */
export const SYSTEM_TESTS_REQUIRED = process.env.RANKFIELD_SYSTEM_TESTS === 'required';

/**
 * Whether the tests needing `programs` (absolute paths) should run: when all
 * exist, or when they are required. Otherwise prints why they are skipped.
 */
export function haveSystemTools(what: string, pkg: string, programs: readonly string[]): boolean {
  const missing = programs.filter((p) => !existsSync(p));
  if (missing.length === 0 || SYSTEM_TESTS_REQUIRED) return true;
  console.warn(`skipped: ${what} needs ${missing.join(', ')} (apt-get install -y ${pkg}; .ci/run installs it)`);
  return false;
}
