/**
 * The worker thread of a {@link WorkerPool}: runs the tasks it is posted
 * (encoding tiles, decoding bands) and answers each with its result or its
 * error, flattened so that it keeps its class and code (see pool.ts).
 */
import { parentPort, workerData, type TransferListItem } from 'node:worker_threads';
import { toWire, type ReplyMessage, type TaskMessage } from './pool.js';

type Handler = (body: never) => { result: unknown; transfer?: TransferListItem[] } | Promise<{ result: unknown; transfer?: TransferListItem[] }>;

/**
 * The tasks of a kind, loaded on the first task of that kind: a worker that
 * only decodes ('read-' tasks) never loads the encoder, nor one that only
 * encodes the reader's band code.
 */
let reading: Promise<Record<string, Handler>> | null = null;
let encoding: Promise<Record<string, Handler>> | null = null;
function tasksFor(kind: string): Promise<Record<string, Handler>> {
  if (kind.startsWith('read-')) return (reading ??= import('./read.js').then((m) => m.readTasks));
  return (encoding ??= import('./encode.js').then((m) => m.encodeTasks));
}

// The pool may name the kind of work it was made for: load its code now, before the first task arrives.
const preload: unknown = (workerData as { preload?: unknown } | null)?.preload;
if (typeof preload === 'string') void tasksFor(preload).catch(() => undefined);

const port = parentPort;
port?.on('message', async (m: TaskMessage) => {
  let reply: ReplyMessage;
  let transfer: TransferListItem[] = [];
  try {
    const tasks = await tasksFor(m.kind);
    // A task the calling thread took back (see PoolOptions.steal) is not run, and not answered. Claimed only
    // now, as it starts: the tasks posted to a worker still loading its code stay free to take back until then.
    if (m.claim !== undefined && Atomics.compareExchange(m.claim, 0, 0, 1) !== 0) return;
    const run = Object.hasOwn(tasks, m.kind) ? tasks[m.kind] : undefined;
    // Internal assertion: the pool posts only the kinds registered here.
    if (run === undefined) throw new Error(`unknown worker task '${m.kind}'`);
    const done = await run(m.body as never);
    reply = { id: m.id, result: done.result };
    transfer = done.transfer ?? [];
  } catch (e) {
    reply = { id: m.id, error: toWire(e) };
  }
  port.postMessage(reply, transfer);
});
