import { it } from 'vitest';
import { corpus, runOne, Tally } from './fuzz.js';
it('smoke', async () => {
  const c = await corpus();
  const t = new Tally();
  const t0 = performance.now();
  for (let i = 0; i < 1500; i++) t.add(await runOne(c, 1, i));
  console.log(t.summary().join('\n'));
  console.log('elapsed', (performance.now() - t0).toFixed(0));
  for (const f of t.findings.slice(0, 15)) console.log(f.index, f.seed, f.ops.join('; '), '\n   ', f.finding.slice(0, 600));
}, 600000);
