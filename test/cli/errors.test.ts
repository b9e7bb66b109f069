/**
 * Bad input of every kind: each gets its own one-line message
 * `rankfield: error: ...`, exit code 2, no stack trace, and no output file
 * (nor a leftover temporary file). The commands run in this process
 * (rfIn: the same main() as bin/rankfield, compared with it, errors included,
 * in in-process.test.ts).
 */
import { chmodSync, existsSync, mkdirSync, readdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { capLine, fileError, MAX_LINE, oneLine } from '../../src/cli/errors.js';
import { boundOption } from '../../src/cli/options.js';
import { FormatCode, FormatError } from '../../src/index.js';
import { formatNpy } from '../../src/io/npy.js';
import { formatRaw } from '../../src/io/raw.js';
import { ensureBuilt, expectCliError, leftovers, rfIn, tempDir } from './helpers.js';

const { dir, remove } = tempDir();
const OUT = 'out.rfz';
/** A small smooth 12 x 20 field. */
const field = Float32Array.from({ length: 240 }, (_, c) => Math.sin(c / 20) + Math.cos((c % 20) / 7));

beforeAll(() => {
  ensureBuilt();
  writeFileSync(join(dir, 'f.npy'), formatNpy({ data: field, shape: [12, 20], dtype: 'f32' }));
  writeFileSync(join(dir, 'f.raw'), formatRaw({ data: field, shape: [12, 20], dtype: 'f32' }));
  writeFileSync(join(dir, 'hollow.npy'), formatNpy({ data: new Float32Array(0), shape: [2, 0, 4], dtype: 'f32' }));
  writeFileSync(join(dir, 'line.npy'), formatNpy({ data: new Float64Array(5), shape: [5], dtype: 'f64' }));
  writeFileSync(join(dir, 'empty.npy'), '');
  writeFileSync(join(dir, 'empty.raw'), '');
  writeFileSync(join(dir, 'junk.npy'), 'this is not a npy file');
  mkdirSync(join(dir, 'folder.npy'));
  mkdirSync(join(dir, 'folder.rfz'));
});
afterAll(remove);

const pack = (...extra: string[]) => ['pack', 'f.raw', '-o', OUT, '--shape', '12x20', '--dtype', 'f32', '--bound', 'abs:0.01', ...extra];

/** [what, arguments, expected message]. */
const CASES: [string, string[], RegExp][] = [
  ['wrong shape for the file size', ['pack', 'f.raw', '-o', OUT, '--shape', '12x21', '--dtype', 'f32', '--bound', 'abs:1'], /f\.raw: shape 12x21 of f32 needs 252 values of 4 bytes = 1008 bytes but the file holds 960 bytes/],
  ['dtype too wide for the file', ['pack', 'f.raw', '-o', OUT, '--shape', '12x20', '--dtype', 'f64', '--bound', 'abs:1'], /needs 240 values of 8 bytes = 1920 bytes but the file holds 960 bytes/],
  ['unknown dtype', pack('--dtype', 'int16'), /option '--dtype <TYPE>' argument 'int16' is invalid\. unknown dtype "int16"/],
  ['bound of zero', ['pack', 'f.npy', '-o', OUT, '--bound', 'abs:0'], /bound value for 'abs' must be a positive finite number, got 0/],
  ['negative bound', ['pack', 'f.npy', '-o', OUT, '--bound', 'rel:-1e-3'], /bound value for 'rel' must be a positive finite number, got -0\.001/],
  ['NaN bound', ['pack', 'f.npy', '-o', OUT, '--bound', 'rmse:NaN'], /bound value for 'rmse' must be a positive finite number, got NaN/],
  ['infinite bound', ['pack', 'f.npy', '-o', OUT, '--bound', 'abs:inf'], /bound value for 'abs' must be a positive finite number, got infinity \('inf'\)$/],
  ['unknown bound mode', ['pack', 'f.npy', '-o', OUT, '--bound', 'tight:1'], /unknown bound mode 'tight' \(known: abs, rel, rmse, psnr\)/],
  ['bound without a mode', ['pack', 'f.npy', '-o', OUT, '--bound', '0.01'], /bound '0\.01' is not MODE:VALUE/],
  ['missing --bound', ['pack', 'f.npy', '-o', OUT], /required option '--bound <MODE:VALUE>' not specified/],
  ['missing -o', ['pack', 'f.npy', '--bound', 'abs:1'], /required option '-o, --output <OUT>' not specified/],
  ['missing input argument', ['unpack', '-o', 'x.npy'], /missing required argument 'IN'/],
  ['tile of zero', pack('--tile', '0'), /option '--tile <RxC>' argument '0' is invalid\. tile sides must be integers in 1\.\.4096/],
  ['tile too large', pack('--tile', '8x4097'), /tile sides must be integers in 1\.\.4096, got '8x4097'/],
  ['tile not a number', pack('--tile', 'big'), /tile must be RxC or one number \(e\.g\. 64x64 or 64\), got 'big'/],
  ['tile of three sides', pack('--tile', '4x4x4'), /tile must be RxC or one number/],
  ['fill not a number', pack('--fill', 'none'), /fill value must be a finite number .* got 'none'/],
  ['fill outside float32', pack('--fill', '1e300'), /fill value 1e\+300 is outside the float32 range/],
  ['unknown byte order', pack('--endian', 'native'), /byte order must be 'little' or 'big', got 'native'/],
  ['shape of three axes the file does not hold', ['pack', 'f.raw', '-o', OUT, '--shape', '2x3x41', '--dtype', 'f32', '--bound', 'abs:1'], /f\.raw: shape 2x3x41 of f32 needs 246 values of 4 bytes = 984 bytes but the file holds 960 bytes/],
  ['malformed shape', ['pack', 'f.raw', '-o', OUT, '--shape', '12*20', '--dtype', 'f32', '--bound', 'abs:1'], /shape "12\*20" is not of the form RxC/],
  ['raw input without --shape and --dtype', ['pack', 'f.raw', '-o', OUT, '--bound', 'abs:1'], /'f\.raw' is neither \.npy nor NetCDF by its first bytes or its name, so it is read as headerless raw binary, which needs --shape RxC and --dtype f32\|f64/],
  ['raw layout given for a .npy', ['pack', 'f.npy', '-o', OUT, '--bound', 'abs:1', '--dtype', 'f32'], /--dtype describe headerless raw input, but 'f\.npy' is a \.npy file/],
  ['.npy with an empty axis', ['pack', 'hollow.npy', '-o', OUT, '--bound', 'abs:1'], /hollow\.npy: the array of shape \(2, 0, 4\) holds no values/],
  ['.npy with one axis', ['pack', 'line.npy', '-o', OUT, '--bound', 'abs:1'], /line\.npy: holds a 1-D array of shape \(5,\)/],
  ['empty .npy file', ['pack', 'empty.npy', '-o', OUT, '--bound', 'abs:1'], /'empty\.npy' is empty \(0 bytes\)/],
  ['empty raw file', ['pack', 'empty.raw', '-o', OUT, '--shape', '2x2', '--dtype', 'f32', '--bound', 'abs:1'], /'empty\.raw' is empty \(0 bytes\)/],
  ['not a .npy file', ['pack', 'junk.npy', '-o', OUT, '--bound', 'abs:1'], /junk\.npy: not a \.npy file/],
  ['missing input', ['pack', 'absent.npy', '-o', OUT, '--bound', 'abs:1'], /cannot read 'absent\.npy': no such file or directory/],
  ['input is a directory', ['pack', 'folder.npy', '-o', OUT, '--bound', 'abs:1'], /cannot read 'folder\.npy': is a directory/],
  ['output equal to input', ['pack', 'f.raw', '-o', 'f.raw', '--shape', '12x20', '--dtype', 'f32', '--bound', 'abs:1', '--force'], /output 'f\.raw' is the input file/],
  ['output in a missing folder', ['pack', 'f.npy', '-o', 'no/such/out.rfz', '--bound', 'abs:1'], /cannot write 'no\/such\/out\.rfz': folder 'no\/such' does not exist/],
  ['output is a directory', ['pack', 'f.npy', '-o', 'folder.npy', '--bound', 'abs:1', '--force'], /cannot write 'folder\.npy': is a directory/],
  ['unknown option', ['pack', 'f.npy', '-o', OUT, '--bound', 'abs:1', '--quality', '9'], /unknown option '--quality'/],
  ['too many arguments', ['pack', 'f.npy', 'g.npy', '-o', OUT, '--bound', 'abs:1'], /too many arguments for 'pack'/],
  ['unknown command', ['squash', 'f.npy'], /unknown command 'squash'/],
  ['no command', [], /missing command \(one of pack, unpack, show, check, demo/],
  ['show of a missing archive', ['show', 'absent.rfz'], /cannot read 'absent\.rfz': no such file or directory/],
  ['show of a directory', ['show', 'folder.rfz'], /cannot read 'folder\.rfz': is a directory/],
  ['unpack of a non-archive', ['unpack', 'f.npy', '-o', 'x.npy'], /f\.npy: not a rankfield archive \(wrong magic bytes at offset 0\)/],
  ['demo with a bad shape', ['demo', '--shape', '1x'], /shape "1x" is not of the form RxC/],
];

describe('every bad input: one line, exit 2, no output', () => {
  const seen: string[] = [];
  for (const [what, args, message] of CASES) {
    it(what, async () => {
      const before = readdirSync(dir).sort();
      const r = await rfIn(args, dir);
      seen.push(r.stderr);
      expectCliError(r, message);
      expect(readdirSync(dir).sort()).toEqual(before); // no output file, no temporary file
    });
  }

  it('messages differ from case to case', () => {
    expect(seen).toHaveLength(CASES.length);
    expect(new Set(seen).size).toBe(seen.length);
  });
});

describe('--bound values that are not finite numbers are named', () => {
  it('infinities, values beyond the float64 range, and words', () => {
    const message = (text: string) => {
      try {
        boundOption(text);
      } catch (e) {
        return (e as Error).message;
      }
      return 'accepted';
    };
    expect(message('psnr:-Infinity')).toBe("bound value for 'psnr' must be a positive finite number, got minus infinity ('-Infinity')");
    expect(message('rel:1e999')).toBe("bound value for 'rel' must be a positive finite number, got '1e999', beyond the float64 range (infinity)");
    expect(message('abs:two')).toBe("bound value for 'abs' must be a positive finite number, got 'two', which is not a number");
    expect(message('rmse:nan')).toBe("bound value for 'rmse' must be a positive finite number, got NaN ('nan': not a number)");
    expect(message('abs:0.5')).toBe('accepted');
  });
});

describe('long input is elided in the middle of the error line', () => {
  it('a 5000-digit shape axis', async () => {
    const axis = `7${'0'.repeat(4998)}9`;
    const r = await rfIn(['pack', 'f.raw', '-o', OUT, '--shape', `12x${axis}`, '--dtype', 'f32', '--bound', 'abs:1'], dir);
    expectCliError(r, /shape .*12x7000.*\.\.\.\[\d+ characters\]\.\.\..*0009/);
    expect(r.stderr.length).toBeLessThanOrEqual(MAX_LINE + '\n'.length + 'rankfield: error: '.length);
  });

  it('capLine keeps short lines, and the start and end of long words and lines', () => {
    expect(capLine("cannot read 'a.npy': no such file or directory")).toBe("cannot read 'a.npy': no such file or directory");
    const word = `'${'a'.repeat(60)}${'b'.repeat(100)}${'c'.repeat(40)}'`;
    const short = capLine(`bad ${word} here`);
    expect(short).toMatch(/^bad 'a{47}\.\.\.\[130 characters\]\.\.\.c{23}' here$/);
    const many = capLine(Array.from({ length: 200 }, (_, i) => `word${i}`).join(' '));
    expect(many.length).toBeLessThanOrEqual(MAX_LINE);
    expect(many).toMatch(/^word0 word1 .*\.\.\.\[\d+ characters\]\.\.\..* word199$/);
  });
});

describe('--debug', () => {
  it('adds the stack trace after the one-line message, still exit 2', async () => {
    for (const args of [['--debug', 'pack', 'absent.npy', '-o', OUT, '--bound', 'abs:1'], ['pack', 'absent.npy', '-o', OUT, '--bound', 'abs:1', '--debug']]) {
      const r = await rfIn(args, dir);
      expect(r.code).toBe(2);
      expect(r.stderr).toMatch(/^rankfield: error: cannot read 'absent\.npy': no such file or directory\n/);
      expect(r.stderr).toMatch(/\n\s+at /);
    }
  });

  it('is not needed for success', async () => {
    const r = await rfIn(['--debug', 'pack', 'f.npy', '-o', 'dbg.rfz', '--bound', 'abs:0.01'], dir);
    expect(r.code, r.stderr).toBe(0);
    expect(existsSync(join(dir, 'dbg.rfz'))).toBe(true);
    expect(leftovers(dir)).toEqual([]);
  });
});

describe('file system errors', () => {
  /** A Node system error as fs/promises raises it. */
  const sysError = (code: string, errno: number, message: string) => Object.assign(new Error(`${code}: ${message}, open 'x.npy'`), { code, errno, syscall: 'open', path: 'x.npy' });

  it('are phrased with the action and the path', () => {
    expect(oneLine(fileError(sysError('EACCES', -13, 'permission denied'), 'read', 'x.npy'))).toBe("cannot read 'x.npy': permission denied");
    expect(oneLine(fileError(sysError('ENOSPC', -28, 'no space left on device'), 'write', 'o.rfz'))).toBe("cannot write 'o.rfz': no space left on the device");
    expect(oneLine(sysError('EMFILE', -24, 'too many open files'))).toBe("'x.npy': too many open files");
  });

  it('leave the library errors alone', () => {
    const e = new FormatError(FormatCode.Truncated, 'a.rfz: too short');
    expect(fileError(e, 'read', 'a.rfz')).toBe(e);
    expect(oneLine(e)).toBe('a.rfz: too short');
    expect(oneLine(new Error('boom\nsecond line'))).toBe('internal error: boom second line (rerun with --debug for the stack trace, and please report it)');
  });

  it.skipIf(process.getuid?.() === 0)('an unreadable input is refused with the path (not testable as root)', async () => {
    writeFileSync(join(dir, 'locked.npy'), formatNpy({ data: field, shape: [12, 20], dtype: 'f32' }));
    chmodSync(join(dir, 'locked.npy'), 0o000);
    expectCliError(await rfIn(['pack', 'locked.npy', '-o', 'locked.rfz', '--bound', 'abs:1'], dir), /cannot read 'locked\.npy': permission denied/);
  });
});
