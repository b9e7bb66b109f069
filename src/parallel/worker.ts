/**
 * The worker thread of a {@link WorkerPool}: runs the tasks it is posted
 * (encoding tiles, decoding bands) and answers each with its result or its
 * error, flattened so that it keeps its class and code (see pool.ts).
 */
import { parentPort, type TransferListItem } from 'node:worker_threads';
import { encodeTasks } from './encode.js';
import { toWire, type ReplyMessage, type TaskMessage } from './pool.js';
import { readTasks } from './read.js';

type Handler = (body: never) => { result: unknown; transfer?: TransferListItem[] } | Promise<{ result: unknown; transfer?: TransferListItem[] }>;

const tasks: Record<string, Handler> = { ...encodeTasks, ...readTasks };

const port = parentPort;
port?.on('message', async (m: TaskMessage) => {
  let reply: ReplyMessage;
  let transfer: TransferListItem[] = [];
  try {
    const run = tasks[m.kind];
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
