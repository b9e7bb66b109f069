import { describe, expect, it } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { NetCDFReader } from 'netcdfjs';
import { buildFixtures } from '../fixtures/netcdf/make-fixtures.js';

const dir = path.join(path.dirname(fileURLToPath(import.meta.url)), '../fixtures/netcdf');
const built = buildFixtures();

// Regenerate with RANKFIELD_UPDATE_FIXTURES=1 (see test/fixtures/netcdf/README.md).
if (process.env.RANKFIELD_UPDATE_FIXTURES === '1') {
  for (const [name, bytes] of Object.entries(built)) fs.writeFileSync(path.join(dir, name), bytes);
}

describe('NetCDF fixtures', () => {
  it.each(Object.keys(built))('%s is what make-fixtures.ts makes, byte for byte', (name) => {
    const committed = new Uint8Array(fs.readFileSync(path.join(dir, name)));
    expect(committed.length).toBe(built[name].length);
    expect(Buffer.compare(committed, built[name])).toBe(0);
  });

  it('stay under 200 KB together', () => {
    // The limit is the project's (issue 6), not a standard.
    const total = Object.values(built).reduce((s, b) => s + b.length, 0);
    expect(total).toBeLessThan(200 * 1024);
  });

  it('the two data files open in netcdfjs in the format each claims', () => {
    // netcdfjs (reference reader) reports the version byte of the header.
    expect(new NetCDFReader(built['corvane-run-classic.nc']).version).toBe('classic format');
    expect(new NetCDFReader(built['corvane-run-64bit.nc']).version).toBe('64-bit offset format');
  });
});
