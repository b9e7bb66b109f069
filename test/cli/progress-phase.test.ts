/**
 * A terminal is never silent: before its first tile is done, `pack` names
 * the phase it is in (reading the input, planning the tiles) with the
 * seconds spent, then draws its bar; `demo` draws bars too. Nothing of this
 * without a terminal or with --quiet. The line is cleared with carriage
 * return and erase-in-line (ECMA-48, CSI K, from memory).
 * Data: vega-datasets data/volcano.json (61 x 87).
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { main } from '../../src/cli/main.js';
import { formatNpy } from '../../src/io/npy.js';
import { CLI_TIMEOUT, tempDir, volcano } from './helpers.js';

const { dir, remove } = tempDir();
beforeAll(() => {
  const v = volcano();
  writeFileSync(join(dir, 'volcano.npy'), formatNpy({ data: v.values, shape: v.shape, dtype: 'f64' }));
});
afterAll(remove);

async function run(args: string[], tty: boolean): Promise<{ code: number; out: string; err: string }> {
  let out = '';
  let err = '';
  const code = await main(args, { out: (s) => void (out += s), err: (s) => void (err += s), errTTY: tty, errColumns: 100 });
  return { code, out, err };
}

const BAR = /\[[-=]+\] \d+\/\d+ tiles \| [-0-9.]+ MB\/s \| \S+ left/;

describe('progress from the start', () => {
  it('pack names its first phase at once on a terminal, then draws the bar, and clears the line', async () => {
    const args = ['pack', join(dir, 'volcano.npy'), '-o', join(dir, 'v.rfz'), '--bound', 'abs:1', '--tile', '16', '--force'];
    const tty = await run(args, true);
    expect(tty.code, tty.err).toBe(0);
    // The very first thing on stderr is the phase line.
    expect(tty.err.startsWith("\rpacking 'volcano': reading the input and planning the tiles... 0 s\x1b[K")).toBe(true);
    const phaseEnds = tty.err.indexOf('\r\x1b[K');
    expect(phaseEnds).toBeGreaterThan(0);
    expect(tty.err.slice(phaseEnds)).toMatch(BAR);
    expect(await run([...args, '--quiet'], true)).toEqual({ code: 0, out: '', err: '' });
    expect((await run(args, false)).err).toBe('');
  }, CLI_TIMEOUT);

  it('demo draws bars for packing and checking each bound on a terminal', async () => {
    // (Without a terminal, demo writes nothing on stderr: test/cli/machine-output.test.ts.)
    const tty = await run(['demo', '--shape', '32x48', '--dir', join(dir, 'demo'), '--force'], true);
    expect(tty.code, tty.err).toBe(0);
    for (const b of ['rel:1e-2', 'psnr:60']) {
      expect(tty.err).toContain(`packing at ${b}: planning the tiles... 0 s`);
      expect(tty.err).toMatch(new RegExp(`packing at ${b} \\[[-=]+\\] \\d+/\\d+ tiles`));
      expect(tty.err).toMatch(new RegExp(`checking ${b} \\[[-=]+\\] \\d+/\\d+ tiles`));
    }
  }, CLI_TIMEOUT);
});
