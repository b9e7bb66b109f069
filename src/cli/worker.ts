/**
 * The worker thread that long commands (pack, demo) run in. Encoding is
 * synchronous, so in the main thread a signal would only be handled after it
 * ends; here the main thread stays free to react to SIGINT and SIGTERM at
 * once: it removes the temporary files this worker reports, then stops it.
 * Output and the exit code travel back as messages, in order.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { main } from './main.js';

const { argv, errTTY, errColumns } = workerData as { argv: string[]; errTTY?: boolean; errColumns?: number };
const port = parentPort;
if (port) {
  const code = await main(argv, { out: (s) => port.postMessage({ out: s }), err: (s) => port.postMessage({ err: s }), errTTY: errTTY === true, errColumns });
  port.postMessage({ exit: code });
}
