/**
 * A small pool of worker threads ("lanes") that keep state between tasks and are each asked to
 * finish at the end. Both stages need that: a scatter task holds its spill buffers and counts
 * until the input ends, a gather lane accumulates each part's statistics over all the buckets
 * it deals (creating and shipping statistics per bucket measured slower than the dealing itself).
 * A general pool routes tasks to any worker and has no "every worker, finish now" step, hence
 * this one. A shuffle asks its lanes to finish twice: once at the end of each stage.
 *
 *   main thread                              worker thread k
 *   run(task) ──{ id, task } (transfer)──▶  handler(task) ──▶ { id, result } (transfer)
 *   finish() ──{ finish }──▶ (every lane)   finisher()   ──▶ { final }
 *
 * Errors cross as plain data (`toWire`) and are rebuilt with `fromWire`. What the tasks, results
 * and finals are is protocol.ts's: a task names its kind, and its result is typed by it.
 */
import { parentPort, Worker, type ResourceLimits, type TransferListItem } from 'node:worker_threads';
import { fromWire, toWire, RowdeckError, type WireError } from '../errors.js';
import type { Answer, Reply } from './protocol.js';

type ToWorker<T> = { kind: 'task'; id: number; task: T } | { kind: 'finish' };
type FromWorker<F> =
  | { kind: 'result'; id: number; result: unknown }
  | { kind: 'error'; id: number; error: WireError }
  | { kind: 'final'; final: F }
  | { kind: 'finalError'; error: WireError };

interface Lane<F> {
  worker: Worker;
  busy: number;
  final: ((f: F) => void) | null;
  finalFail: ((e: Error) => void) | null;
  waiting: Map<number, { resolve: (r: unknown) => void; reject: (e: Error) => void }>;
}

/** Flags that only make sense for an inline script (`node --input-type=module -e …`). */
const INLINE_SCRIPT_FLAG = /^--(input-type|eval|print)(=|$)/;

/**
 * A worker thread running `file`, with the process's Node flags where it can take them.
 * - By default a worker inherits the process's flags, V8's among them (`--max-old-space-size`).
 * - Flags for an inline script would stop a file worker from starting, so they are left out; a
 *   list given explicitly must not hold V8 flags, though (ERR_WORKER_INVALID_EXEC_ARGV), so
 *   when it does the worker starts without Node flags (V8's apply to every thread anyway).
 */
function startWorker(file: string, workerData: unknown, limits: ResourceLimits | undefined): Worker {
  const base = { workerData, ...(limits ? { resourceLimits: limits } : {}) };
  if (!process.execArgv.some((a) => INLINE_SCRIPT_FLAG.test(a))) return new Worker(file, base);
  try {
    return new Worker(file, { ...base, execArgv: process.execArgv.filter((a) => !INLINE_SCRIPT_FLAG.test(a)) });
  } catch (err) {
    if ((err as NodeJS.ErrnoException).code !== 'ERR_WORKER_INVALID_EXEC_ARGV') throw err;
    return new Worker(file, { ...base, execArgv: [] });
  }
}

export class WorkerLanes<T, F> implements Lanes<T, F> {
  readonly size: number;
  #lanes: Lane<F>[] = [];
  #nextId = 0;
  #failure: Error | null = null;

  /** `limits`: the heap limits of each worker's isolate (see sizing.ts's youngGenerationMb). */
  constructor(file: string, size: number, workerData: unknown, limits?: ResourceLimits) {
    this.size = size;
    for (let k = 0; k < size; k++) {
      const worker = startWorker(file, { lane: k, data: workerData }, limits);
      const lane: Lane<F> = { worker, busy: 0, final: null, finalFail: null, waiting: new Map() };
      worker.on('message', (m: FromWorker<F>) => {
        if (m.kind === 'final') {
          lane.final?.(m.final);
          return;
        }
        if (m.kind === 'finalError') {
          // Finishing failed (a full disk as the last buffers were written, say): as coded as a task's error.
          lane.finalFail?.(fromWire(m.error));
          return;
        }
        const w = lane.waiting.get(m.id);
        if (!w) return;
        lane.waiting.delete(m.id);
        lane.busy--;
        if (m.kind === 'result') w.resolve(m.result);
        else w.reject(fromWire(m.error));
      });
      const fail = (e: Error): void => {
        this.#failure ??= e;
        for (const w of lane.waiting.values()) w.reject(e);
        lane.waiting.clear();
        lane.finalFail?.(e);
      };
      worker.on('error', fail);
      worker.on('exit', (code) => {
        if (code !== 0) fail(new RowdeckError('RDK_INTERNAL', `worker thread ${k} stopped (exit ${code})`));
      });
      this.#lanes.push(lane);
    }
  }

  /** Tasks waiting or running on the least busy lane. */
  get minBusy(): number {
    return Math.min(...this.#lanes.map((l) => l.busy));
  }

  /** Runs a task on the least busy lane. */
  run<M extends T>(task: M, transfer: TransferListItem[] = []): Promise<Reply<M>> {
    let lane = 0;
    for (let k = 1; k < this.#lanes.length; k++) if (this.#lanes[k]!.busy < this.#lanes[lane]!.busy) lane = k;
    return this.runOn(lane, task, transfer);
  }

  /** Runs a task on lane `k` (tasks that need state kept by that lane, such as a parsed block). */
  runOn<M extends T>(k: number, task: M, transfer: TransferListItem[] = []): Promise<Reply<M>> {
    if (this.#failure) return Promise.reject(this.#failure);
    const lane = this.#lanes[k]!;
    const id = this.#nextId++;
    lane.busy++;
    // The worker answers a task of kind K with Replies[K] (its handler table is typed so).
    const p = new Promise<Reply<M>>((resolve, reject) => lane.waiting.set(id, { resolve: (r) => resolve(r as Reply<M>), reject }));
    lane.worker.postMessage({ kind: 'task', id, task } satisfies ToWorker<T>, transfer);
    return p;
  }

  /** Asks every lane to finish and returns what each one hands back, in lane order. */
  finish(): Promise<F[]> {
    return Promise.all(
      this.#lanes.map(
        (lane) =>
          new Promise<F>((resolve, reject) => {
            if (this.#failure) return reject(this.#failure);
            lane.final = resolve;
            lane.finalFail = reject;
            lane.worker.postMessage({ kind: 'finish' } satisfies ToWorker<T>);
          }),
      ),
    );
  }

  async destroy(): Promise<void> {
    await Promise.all(this.#lanes.map((l) => l.worker.terminate()));
  }
}

/**
 * What the stages ask of their lanes, on worker threads (`WorkerLanes`) or not (`InlineLanes`):
 * tasks `T`, each answered with the reply of its kind (protocol.ts), and `F`, what each lane
 * hands over when it finishes.
 */
export interface Lanes<T, F> {
  readonly size: number;
  run<M extends T>(task: M, transfer?: TransferListItem[]): Promise<Reply<M>>;
  finish(): Promise<F[]>;
  destroy(): Promise<void>;
}

/**
 * One lane on the calling thread, with `WorkerLanes`' interface: for inputs so small that
 * starting threads (~0.1 s each here, an isolate and its modules) costs more than it saves.
 */
export class InlineLanes<T, F> implements Lanes<T, F> {
  readonly size = 1;
  readonly #handler: (task: T) => { result: unknown } | Promise<{ result: unknown }>;
  readonly #finisher: () => { final: F };

  /** `handler`: answers each task with the reply of its kind (see `byKind`), at once or with a promise. */
  constructor(handler: (task: T) => { result: unknown } | Promise<{ result: unknown }>, finisher: () => { final: F }) {
    this.#handler = handler;
    this.#finisher = finisher;
  }

  /**
   * Runs the task on a later turn of the event loop, not at once: between tasks the process
   * still answers signals (Ctrl-C cleans up) and draws progress.
   */
  run<M extends T>(task: M): Promise<Reply<M>> {
    return new Promise<Reply<M>>((resolve, reject) => {
      setImmediate(() => {
        try {
          // The handler answers a task of kind K with Replies[K] (byKind's table is typed so).
          const answer = this.#handler(task);
          if (answer instanceof Promise) answer.then((a) => resolve(a.result as Reply<M>), reject);
          else resolve(answer.result as Reply<M>);
        } catch (err) {
          reject(err);
        }
      });
    });
  }

  finish(): Promise<F[]> {
    try {
      return Promise.resolve([this.#finisher().final]);
    } catch (err) {
      return Promise.reject(err);
    }
  }

  destroy(): Promise<void> {
    return Promise.resolve();
  }
}

/**
 * The worker side: answers tasks with `handler` (a table of handlers by kind, see `byKind`) and
 * the final request with `finisher`. A handler may answer at once or with a promise (a task
 * that reads files, say).
 */
export function serveLane<T, R, F>(
  handler: (task: T) => Answer<R> | Promise<Answer<R>>,
  finisher: () => { final: F; transfer?: TransferListItem[] },
): void {
  const port = parentPort;
  if (!port) throw new Error('serveLane() must run in a worker thread');
  port.on('message', (m: ToWorker<T>) => {
    if (m.kind === 'task') {
      const send = ({ result, transfer }: Answer<R>): void => port.postMessage({ kind: 'result', id: m.id, result } satisfies FromWorker<F>, transfer ?? []);
      const fail = (err: unknown): void => port.postMessage({ kind: 'error', id: m.id, error: toWire(err) } satisfies FromWorker<F>);
      try {
        const reply = handler(m.task);
        if (reply instanceof Promise) reply.then(send, fail);
        else send(reply);
      } catch (err) {
        fail(err);
      }
    } else {
      try {
        const { final, transfer } = finisher();
        port.postMessage({ kind: 'final', final } satisfies FromWorker<F>, transfer ?? []);
      } catch (err) {
        // finish() waits for this: it fails with the error, coded as it was.
        port.postMessage({ kind: 'finalError', error: toWire(err) } satisfies FromWorker<F>);
      }
    }
  });
}
