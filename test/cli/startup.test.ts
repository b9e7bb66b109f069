/**
 * What a command loads before it runs: the command line imports a command's
 * module only for that command (src/cli/main.ts), and `unpack` of .npy or
 * raw output loads no encoder and no NetCDF or HDF5 code; a worker thread
 * loads the code of a task kind on its first task of that kind. Checked on
 * the static import graph of the built modules (dynamic imports are what
 * is loaded on demand).
 */
import { join, relative } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { walk } from '../import-walk.js';
import { ensureBuilt, ROOT } from './helpers.js';

const dist = (f: string) => join(ROOT, 'dist', f);
/** Modules of the static graph of `entry` among `modules`, as paths within dist/. */
const reached = (entry: string, modules: string[]) => walk(dist(entry), false).files.filter((f) => modules.map(dist).includes(f)).map((f) => relative(dist(''), f));

const ENCODER = ['pack.js', 'layout.js', 'codec/tile-encode.js', 'codec/pointwise-search.js', 'codec/code-encode.js', 'codec/plan-l2.js', 'codec/first-pass.js', 'linalg/svd.js', 'parallel/encode.js'];
const COMMANDS = ['pack', 'unpack', 'show', 'check', 'demo', 'preview', 'trial', 'view', 'plan', 'join'].map((c) => `cli/${c}.js`);

describe('start-up of the command line', () => {
  beforeAll(() => ensureBuilt());

  it('the program itself loads no command module', () => {
    expect(reached('cli/main.js', [...COMMANDS, ...ENCODER])).toEqual([]);
  });

  it('unpack loads the decoder and no encoder, NetCDF or HDF5 code', () => {
    const { files, bare } = walk(dist('cli/unpack.js'), false);
    expect(files).toContain(dist('codec/tile-decode.js'));
    expect(reached('cli/unpack.js', [...ENCODER, 'cli/netcdf.js', 'io/netcdf-write.js', 'io/hdf5-write.js', 'io/netcdf-read.js'])).toEqual([]);
    expect(bare.filter((b) => b.spec === 'h5wasm' || b.spec === 'netcdfjs')).toEqual([]);
  });

  it('a worker thread loads neither the encoder nor the band reader before its first task', () => {
    expect(reached('parallel/worker.js', [...ENCODER, 'parallel/read.js', 'archive.js'])).toEqual([]);
  });
});
