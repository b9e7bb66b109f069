// Writes series.nc: 48 snapshots of the Corvane Basin demo field (an invented scenario), a seasonal blend of three
// seed states. Used for the README's time x space example. Run after `npm run build`: node bench/demo-series.mjs [OUT.nc]
import { corvaneBasin } from '../dist/demo/basin.js';
import { writeNetcdf } from '../dist/io/netcdf-write.js';
import { writeFileSync } from 'node:fs';
const T = 48, R = 64, C = 96, seeds = [7301, 7302, 7303];
const base = seeds.map((seed) => corvaneBasin({ rows: R, cols: C, seed }).values);
const fill = -999;
const v = new Float32Array(T * R * C);
for (let t = 0; t < T; t++) {
  const ph = (2 * Math.PI * t) / T;
  // Weights summing to 1: a slow seasonal blend of three eddy states.
  const w = [0.5 + 0.3 * Math.cos(ph), 0.25 + 0.2 * Math.sin(ph), 0];
  w[2] = 1 - w[0] - w[1];
  for (let i = 0; i < R * C; i++) {
    const land = base.some((b) => b[i] === fill);
    v[t * R * C + i] = land ? fill : w[0] * base[0][i] + w[1] * base[1][i] + w[2] * base[2][i] + 0.4 * Math.cos(ph);
  }
}
writeFileSync(process.argv[2] ?? 'series.nc', writeNetcdf({ dims: [{ name: 'time', size: T, unlimited: true }, { name: 'lat', size: R }, { name: 'lon', size: C }], globalAttrs: { title: 'Corvane Basin demo series' },
  variables: [{ name: 'sst', dims: ['time', 'lat', 'lon'], type: 'float', attrs: { units: 'degC', _FillValue: fill }, values: v }] }));
