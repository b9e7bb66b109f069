/**
 * `rankfield view ARCHIVE|URL`: a local web page that draws the archive's
 * fields, reading only the tiles in view (src/view). The command opens the
 * archive (so a bad one is refused before anything listens), starts the
 * server on 127.0.0.1, prints its address and serves until SIGINT, SIGTERM
 * or SIGHUP, then closes the server and the archive and exits 0.
 */
import { readFile } from 'node:fs/promises';
import { basename } from 'node:path';
import { InvalidArgumentError, type Command } from 'commander';
import { printable } from '../format/schema.js';
import { viewerPage } from '../view/html.js';
import { startViewServer, type ViewServer } from '../view/server.js';
import { UsageError } from './errors.js';
import { isUrl, openArchiveSource } from './files.js';
import type { Context } from './context.js';
import { carriedValues } from './netcdf.js';
import { Output, type OutputFlags } from './output.js';

interface ViewFlags extends OutputFlags {
  port?: number;
  log?: boolean;
}

/** The page's two modules, built by `npm run bundle` beside the compiled library (dist/). */
const MODULES = ['rankfield-view.mjs', 'rankfield-decode.mjs'];

function portOption(text: string): number {
  const n = Number(text.trim());
  if (!/^[0-9]{1,5}$/.test(text.trim()) || n > 65535) throw new InvalidArgumentError(`port must be an integer from 0 to 65535 (0: one the system chooses), got '${printable(text)}'`);
  return n;
}

/** Read the page's modules from dist/ (two folders up from this file, compiled or not). */
async function modules(): Promise<Record<string, Uint8Array>> {
  const out: Record<string, Uint8Array> = {};
  for (const name of MODULES) {
    const url = new URL(`../../dist/${name}`, import.meta.url);
    try {
      out[name] = await readFile(url);
    } catch {
      throw new UsageError(`the viewer's page module ${name} is missing from dist/: run 'npm run bundle' (npm ci runs it) and try again`);
    }
  }
  return out;
}

const HELP = `
The page draws one plane of a field (a slice, or one snapshot of a field
stored as a matrix) in viridis, the colour map of 'preview', over the field's
stored value range; missing cells are grey. Drag to pan; zoom with the wheel,
the + and - buttons or keys; 'fit' shows the whole plane. Under the pointer
it shows the value, the cell's indices (and coordinate values, where the
archive carries coordinate variables), the bound, and the tile with its
rank and recorded error.

The page reads the archive through this server with HTTP Range requests,
fetching only the tiles in view (a whole view zoomed out keeps every k-th
cell only). For an archive packed with --progressive it draws a coarse view
first, from payload prefixes, then the stored values. For a URL the server
fetches each range from the remote server (the page talks to 127.0.0.1
only, so the remote server need not allow cross-origin reads).

The server listens on 127.0.0.1 only and runs until Ctrl-C (SIGINT),
SIGTERM or SIGHUP; it then closes and exits 0.

Example:
  rankfield view sst.rfz
  rankfield view https://data.example.org/sst.rfz --port 8600`;

/** Register `view` on the program. */
export function registerView(program: Command, ctx: Context): void {
  program
    .command('view')
    .summary('look at an archive in a web browser (a local server)')
    .description('Serve a web page on 127.0.0.1 that draws the fields of an archive, panning and zooming by reading only the tiles in view.')
    .argument('<IN>', 'archive to view: a file or an http(s) URL')
    .option('--port <N>', 'port to listen on (default: one the system chooses)', portOption)
    .option('--log', 'print one line per request on stderr (method, path, byte ranges, status, bytes)')
    .addHelpText('after', HELP)
    .action(async (input: string, flags: ViewFlags) => {
      const out = new Output(ctx, flags);
      const pageModules = await modules();
      const { archive, src } = await openArchiveSource(input);
      let server: ViewServer;
      try {
        if (archive.names.length === 0) throw new UsageError(`'${printable(input)}' holds no fields to view`);
        // Coordinate variables carried beside the fields (NetCDF input), by dimension name.
        const coords: Record<string, number[]> = {};
        for (const h of archive.header.fields) {
          for (const d of h.dims ?? []) {
            const v = Object.hasOwn(coords, d) ? null : carriedValues(archive.header.attrs, d);
            if (v !== null && v.length > 0 && typeof v[0] === 'number') coords[d] = Array.from(v as ArrayLike<number>);
          }
        }
        const label = isUrl(input) ? input : basename(input);
        server = await startViewServer({
          source: src,
          page: viewerPage(label),
          modules: pageModules,
          info: { label, coords },
          port: flags.port,
          log: flags.log && !flags.quiet ? (line) => ctx.err(`${line}\n`) : undefined,
        }).catch((e: NodeJS.ErrnoException) => {
          if (e.code === 'EADDRINUSE') throw new UsageError(`port ${flags.port} on 127.0.0.1 is in use: choose another with --port, or leave it out to get a free one`);
          if (e.code === 'EACCES') throw new UsageError(`port ${flags.port} needs privileges this user lacks: choose one above 1023`);
          throw e;
        });
      } catch (e) {
        await archive.close();
        throw e;
      }
      out.text(`viewing '${printable(input)}' at ${server.url} (Ctrl-C stops the server)\n`);
      out.result({ command: 'view', input, url: server.url, port: server.port, fields: archive.mainNames });
      const signal = await new Promise<NodeJS.Signals>((resolve) => {
        const names = ['SIGINT', 'SIGTERM', 'SIGHUP'] as const;
        const stop = (s: NodeJS.Signals) => {
          for (const name of names) process.off(name, stop);
          resolve(s);
        };
        for (const name of names) process.on(name, stop);
      });
      await server.close();
      await archive.close();
      out.note(`stopped the viewer on ${signal}`);
    });
}
