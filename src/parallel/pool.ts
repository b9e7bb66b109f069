/**
 * A pool of worker threads (node:worker_threads), optionally with the
 * calling thread as one more lane, that run rankfield's own tasks (see
 * worker.ts): encoding tiles for {@link ArchiveBuilder.addAsync}
 * and decoding bands of a field for {@link readBands}. Tasks are queued in
 * this thread and handed to the least busy worker, at most {@link DEPTH} at
 * a time each, so a worker never waits for work while the queue holds some
 * and the queue, not the workers' message ports, holds the rest.
 *
 * With `steal`, a task posted to a worker that has not started it yet may
 * be taken back by the calling thread's lane when that lane is free and
 * the queue is empty: few long tasks (a large field's coarse tiles) then
 * end on both threads together, instead of the calling thread waiting
 * for the tasks queued in a worker's port (see {@link PoolOptions.steal}).
 *
 * Errors keep their type: a FormatError or InputError thrown in a worker
 * rejects its task with the same class, code and message; a system error
 * keeps its code and path. A worker that dies (an uncaught error, running
 * out of memory, terminated) fails every task in flight and every later
 * call with one error that says so.
 */
import { availableParallelism } from 'node:os';
import { Worker, type ResourceLimits, type TransferListItem } from 'node:worker_threads';
import { FormatError, InputCode, InputError } from '../errors.js';

/** Most threads a pool takes: beyond any machine's cores, so a larger value is a mistake. */
export const MAX_THREADS = 1024;

/** The default thread count: the cores this process may use (os.availableParallelism), at most {@link MAX_THREADS}. */
export function defaultThreads(): number {
  return Math.min(MAX_THREADS, Math.max(1, availableParallelism()));
}

/** Check a thread count given by a caller (undefined: the default). */
export function checkThreads(threads: unknown): number {
  if (threads === undefined) return defaultThreads();
  if (typeof threads !== 'number' || !Number.isInteger(threads) || threads < 1 || threads > MAX_THREADS) {
    throw new InputError(InputCode.Option, `threads must be an integer from 1 to ${MAX_THREADS}, got ${String(threads)}`);
  }
  return threads;
}

/** Tasks posted to one worker at a time: one running, the next ones waiting in its port. */
const DEPTH = 3;

/** An error as it crosses threads (structured clone keeps only plain fields). */
export interface WireError {
  name: string;
  message: string;
  code?: string;
  errno?: number;
  syscall?: string;
  path?: string;
  stack?: string;
}

/** Flatten an error for postMessage. */
export function toWire(e: unknown): WireError {
  if (!(e instanceof Error)) return { name: 'Error', message: String(e) };
  const x = e as NodeJS.ErrnoException;
  return { name: e.name, message: e.message, code: typeof x.code === 'string' ? x.code : undefined, errno: x.errno, syscall: x.syscall, path: x.path, stack: e.stack };
}

/** Rebuild an error that crossed threads, of the same class where it is one of rankfield's. */
export function fromWire(w: WireError): Error {
  if (w.name === 'FormatError') return new FormatError(w.code as FormatError['code'], w.message);
  if (w.name === 'InputError') return new InputError(w.code as InputError['code'], w.message);
  const e = new Error(w.message) as NodeJS.ErrnoException;
  e.name = w.name;
  for (const k of ['code', 'errno', 'syscall', 'path'] as const) if (w[k] !== undefined) Object.assign(e, { [k]: w[k] });
  e.stack = `${w.name}: ${w.message}\n    (in a worker thread)\n${(w.stack ?? '').split('\n').slice(1).join('\n')}`;
  return e;
}

/** A message to a worker: the task kind and its body. */
export interface TaskMessage {
  id: number;
  kind: string;
  body: unknown;
  /**
   * A stealable task's claim (see {@link PoolOptions.steal}): one Int32 in
   * shared memory, 0 until a thread starts the task; the worker sets it to
   * 1 before it runs the task, the calling thread to 2 when it takes the
   * task back, each with Atomics.compareExchange, so exactly one runs it.
   */
  claim?: Int32Array;
}

/** A worker's answer to task `id`. */
export interface ReplyMessage {
  id: number;
  result?: unknown;
  error?: WireError;
}

interface Task {
  id: number;
  kind: string;
  body: unknown;
  transfer: TransferListItem[];
  resolve: (v: unknown) => void;
  reject: (e: unknown) => void;
  claim?: Int32Array;
}

interface Slot {
  /** The worker, or null for the lane of the calling thread. */
  worker: Worker | null;
  /** Tasks posted and not yet answered, by id. */
  posted: Map<number, Task>;
}

/** Options of {@link WorkerPool}. */
export interface PoolOptions {
  /** Heap limits of each worker (see node:worker_threads); default none. */
  resourceLimits?: ResourceLimits;
  /**
   * Run tasks in the calling thread too, as one of the pool's threads (so
   * threads - 1 workers are started): `local` does what a worker would and
   * returns the result. The calling thread is then busy while it runs one.
   */
  local?: (kind: string, body: unknown) => unknown;
  /**
   * Tasks posted to one worker at a time (default {@link DEPTH}: one running,
   * the next waiting in its port, for many short tasks). 1 for few long
   * tasks beside a `local` lane: the queue then hands each to whichever
   * thread is free first, instead of a worker taking several while the
   * calling thread, busy with its one, cannot take more.
   */
  depth?: number;
  /**
   * A task kind whose code each worker loads as soon as it starts (its first
   * task of that kind then finds it loaded): a pool made for one job loads
   * while the calling thread still prepares the work.
   */
  preload?: string;
  /**
   * With `local`: tasks posted to a worker (by {@link WorkerPool.run}) may
   * be taken back by the calling thread when its lane is free and the
   * queue is empty, if the worker has not started them: the last posted
   * first. Their bodies are copied to the worker instead of transferred
   * (this thread keeps them until the task is done). For tasks whose
   * result does not depend on the thread that runs it.
   */
  steal?: boolean;
}

/** A fixed set of worker threads running the tasks of worker.ts. */
export class WorkerPool {
  readonly threads: number;
  private readonly slots: Slot[] = [];
  private readonly queue: Task[] = [];
  private nextId = 1;
  private failure: Error | null = null;
  private closed = false;

  private readonly local: PoolOptions['local'];
  private readonly depth: number;
  private readonly steal: boolean;

  constructor(threads: number, options: PoolOptions = {}) {
    this.threads = checkThreads(threads);
    this.local = options.local;
    this.depth = options.depth ?? DEPTH;
    this.steal = options.steal === true && options.local !== undefined;
    if (!Number.isSafeInteger(this.depth) || this.depth < 1) throw new InputError(InputCode.Option, `depth must be a positive integer, got ${String(options.depth)}`);
    if (this.local) this.slots.push({ worker: null, posted: new Map() });
    for (let i = this.slots.length; i < this.threads; i++) {
      const worker = new Worker(new URL('./worker.js', import.meta.url), { resourceLimits: options.resourceLimits, workerData: { preload: options.preload ?? null } });
      const slot: Slot = { worker, posted: new Map() };
      worker.on('message', (m: ReplyMessage) => this.answer(slot, m));
      worker.on('error', (e) => this.fail(new Error(`a worker thread failed: ${e.message}`, { cause: e })));
      worker.on('exit', (code) => {
        if (!this.closed) this.fail(new Error(`a worker thread stopped unexpectedly (exit code ${code})`));
      });
      this.slots.push(slot);
    }
  }

  /** Tasks waiting in the queue: run and not yet posted to any thread. */
  get queued(): number {
    return this.queue.length;
  }

  /** True once a worker died (every call then fails) or the pool was closed. */
  get failed(): boolean {
    return this.failure !== null || this.closed;
  }

  /** Run one task; `transfer` lists buffers of `body` moved to the worker (they become unusable here). */
  run<T>(kind: string, body: unknown, transfer: TransferListItem[] = []): Promise<T> {
    if (this.failure) return Promise.reject(this.failure);
    if (this.closed) return Promise.reject(new Error('the worker pool is closed'));
    return new Promise<T>((resolve, reject) => {
      const claim = this.steal ? new Int32Array(new SharedArrayBuffer(4)) : undefined;
      this.queue.push({ id: this.nextId++, kind, body, transfer, resolve: resolve as (v: unknown) => void, reject, ...(claim ? { claim } : {}) });
      this.pump();
    });
  }

  /** Run one task on every worker (set-up and clean-up); resolves when all have answered. */
  async broadcast(kind: string, body: unknown): Promise<void> {
    if (this.failure) throw this.failure;
    await Promise.all(
      this.slots.map(
        (slot) =>
          new Promise((resolve, reject) => {
            const task: Task = { id: this.nextId++, kind, body, transfer: [], resolve, reject };
            this.post(slot, task);
          }),
      ),
    );
  }

  /** Post queued tasks to the least busy workers. */
  private pump(): void {
    while (this.queue.length > 0) {
      let best: Slot | null = null;
      // The calling thread's lane takes one task at a time: it runs it, and cannot take more meanwhile.
      for (const s of this.slots) if (s.posted.size < (s.worker ? this.depth : 1) && (best === null || s.posted.size < best.posted.size)) best = s;
      if (best === null) return;
      this.post(best, this.queue.shift()!);
    }
    if (this.steal) this.takeBack();
  }

  /** With `steal`: when the calling thread's lane is free, take back the last task posted to a worker that has not started it. */
  private takeBack(): void {
    const lane = this.slots[0];
    if (lane.worker !== null || lane.posted.size > 0 || this.failure !== null || this.closed) return;
    // The worker with the most tasks posted; its last posted task is the one it would start last.
    let from: Slot | null = null;
    for (const s of this.slots) if (s.worker && (from === null || s.posted.size > from.posted.size)) from = s;
    if (from === null) return;
    for (const task of [...from.posted.values()].reverse()) {
      // 0 -> 2: taken back; fails when the worker set 1 first (it runs the task, and so every task posted before it).
      if (task.claim === undefined || Atomics.compareExchange(task.claim, 0, 0, 2) !== 0) return;
      from.posted.delete(task.id);
      this.post(lane, task);
      return;
    }
  }

  private post(slot: Slot, task: Task): void {
    slot.posted.set(task.id, task);
    const m: TaskMessage = { id: task.id, kind: task.kind, body: task.body, ...(task.claim && slot.worker ? { claim: task.claim } : {}) };
    if (slot.worker) {
      // A task this thread may take back keeps its body here: copied, not transferred.
      slot.worker.postMessage(m, task.claim ? [] : task.transfer);
      return;
    }
    // In this thread, after the events already waiting (worker answers, reads) are handled.
    setImmediate(async () => {
      if (!slot.posted.has(m.id)) return; // the pool failed or closed meanwhile
      try {
        task.resolve(await this.local!(m.kind, m.body));
      } catch (e) {
        task.reject(e);
      }
      slot.posted.delete(m.id);
      this.pump();
    });
  }

  private answer(slot: Slot, m: ReplyMessage): void {
    const task = slot.posted.get(m.id);
    if (task === undefined) return;
    slot.posted.delete(m.id);
    if (m.error !== undefined) task.reject(fromWire(m.error));
    else task.resolve(m.result);
    this.pump();
  }

  /** A worker died: fail everything pending and every later call. */
  private fail(e: Error): void {
    if (this.failure) return;
    this.failure = e;
    const pending = [...this.queue, ...this.slots.flatMap((s) => [...s.posted.values()])];
    this.queue.length = 0;
    for (const s of this.slots) s.posted.clear();
    for (const t of pending) t.reject(e);
    void this.close().catch(() => undefined);
  }

  /** Stop every worker (tasks still pending are rejected). Closing twice is harmless. */
  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    const pending = [...this.queue, ...this.slots.flatMap((s) => [...s.posted.values()])];
    this.queue.length = 0;
    const stopped = new Error('the worker pool was closed');
    for (const t of pending) t.reject(stopped);
    // A worker that already died may refuse to be terminated: it is stopped either way.
    await Promise.all(this.slots.map((s) => s.worker?.terminate().catch(() => undefined)));
  }
}
