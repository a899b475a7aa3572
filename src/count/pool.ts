/**
 * A pool of worker threads that each own their data, kept for the whole job: every phase
 * (vocabulary, count, merge, …) reuses the same threads, started once. For a phase, the main thread
 * sends each worker the phase's settings, then hands out one task at a time to an idle worker (the
 * queue is the task list itself, so nothing unbounded is buffered), relays progress, and stops every
 * worker at the first failure.
 */
import { Worker } from 'node:worker_threads';
import { assert, QuernError } from '../errors.ts';
import { StopGate } from '../job/stop-gate.ts';
import type { FromWorker, ToWorker, WorkerInit } from './protocol.ts';

const BOOT_URL = new URL('./worker-boot.mjs', import.meta.url);
const WORKER_URL = new URL(import.meta.url.endsWith('.ts') ? './worker.ts' : './worker.js', import.meta.url);

/** Tasks made as they are needed (e.g. pieces of a gzip file cut as workers ask for them): `next`
 *  is called once at a time, and gives undefined after the last, and again after that. */
export interface TaskSource<Task> {
  next(): Promise<Task | undefined>;
}

export interface PoolCallbacks<Task, Done, Finished> {
  /** Called for each finished task; the worker gets its next task once this settles. */
  onDone(done: Done): Promise<void> | void;
  onProgress?(bytes: number, tokens: number): void;
  /** The message that hands `task` to a worker. */
  message(task: Task): ToWorker;
  /** Buffers of the message moved to the worker instead of copied (they are unusable here after). */
  transfer?(task: Task): ArrayBuffer[];
  /** Collects each worker's 'finished' message at the end of the phase. */
  onFinished?(finished: Finished): void;
}

function toError(failure: Extract<FromWorker, { type: 'error' }>): Error {
  if (failure.code) {
    return new QuernError(failure.code as QuernError['code'], failure.message, { location: failure.location });
  }
  const error = new Error(failure.message);
  if (failure.stack) error.stack = failure.stack;
  return error;
}

export class WorkerPool {
  private readonly workers: Worker[] = [];
  /** Shared with the workers: closed before they are terminated (stop-gate.ts). */
  private gate = new StopGate();
  private broken: unknown;
  private busy = false;

  /** @param size the most workers a phase may use */
  constructor(readonly size: number) {
    assert(Number.isInteger(size) && size >= 1, `pool size ${size} must be a positive integer`);
  }

  private worker(index: number): Worker {
    while (this.workers.length <= index) {
      this.workers.push(new Worker(BOOT_URL, { workerData: { module: WORKER_URL.href, stopGate: this.gate.buffer } }));
    }
    return this.workers[index];
  }

  /**
   * Runs one phase: `tasks` on at most `workerCount` workers set up with `init`. Resolves when every
   * task is done and every worker has sent its 'finished' message; rejects with the first failure
   * (after which the pool is closed). A TaskSource is asked for a task whenever a worker is idle.
   */
  run<Task, Done, Finished>(
    init: WorkerInit,
    tasks: readonly Task[] | TaskSource<Task>,
    callbacks: PoolCallbacks<Task, Done, Finished>,
    workerCount = this.size,
  ): Promise<void> {
    if (this.broken !== undefined) return Promise.reject(this.broken);
    assert(!this.busy, 'one phase at a time per pool');
    this.busy = true;
    const source = Array.isArray(tasks) ? undefined : (tasks as TaskSource<Task>);
    const list = tasks as readonly Task[];
    const count = Math.max(1, Math.min(workerCount, this.size, source === undefined ? Math.max(list.length, 1) : workerCount));
    const workers = Array.from({ length: count }, (_, i) => this.worker(i));
    return new Promise<void>((resolve, reject) => {
      const finished = new Set<Worker>();
      let next = 0;
      let failed = false;
      const detach: Array<() => void> = [];
      const settle = (error?: unknown): void => {
        for (const off of detach) off();
        this.busy = false;
        if (error === undefined) {
          resolve();
          return;
        }
        this.broken = error;
        this.close().finally(() => reject(error));
      };
      const fail = (error: unknown): void => {
        if (failed) return;
        failed = true;
        settle(error);
      };
      const send = (worker: Worker, task: Task | undefined): void => {
        if (task === undefined) worker.postMessage({ type: 'finish' } satisfies ToWorker);
        else worker.postMessage(callbacks.message(task), callbacks.transfer?.(task) ?? []);
      };
      // A source's tasks are asked for one at a time, in the order the workers became idle.
      let asked = Promise.resolve();
      const dispatch = (worker: Worker): void => {
        if (failed) return;
        if (source === undefined) {
          send(worker, next < list.length ? list[next++] : undefined);
          return;
        }
        asked = asked.then(async () => {
          if (failed) return;
          const task = await source.next();
          if (!failed) send(worker, task);
        }).catch(fail);
      };
      for (const worker of workers) {
        const onMessage = (message: FromWorker): void => {
          if (failed) return;
          switch (message.type) {
            case 'progress':
              callbacks.onProgress?.(message.bytes, message.tokens);
              break;
            case 'done':
              Promise.resolve(callbacks.onDone(message as Done)).then(() => dispatch(worker), fail);
              break;
            case 'finished':
              callbacks.onFinished?.(message as Finished);
              finished.add(worker);
              if (finished.size === count) {
                failed = true; // no more messages of this phase are expected
                settle();
              }
              break;
            case 'error':
              fail(toError(message));
              break;
          }
        };
        const onError = (error: Error): void => fail(error);
        const onExit = (code: number): void => fail(new Error(`worker exited with code ${code}`));
        worker.on('message', onMessage);
        worker.on('error', onError);
        worker.on('exit', onExit);
        detach.push(() => {
          worker.off('message', onMessage);
          worker.off('error', onError);
          worker.off('exit', onExit);
        });
        worker.postMessage({ type: 'init', init } satisfies ToWorker);
        dispatch(worker);
      }
    });
  }

  /**
   * Lets no worker start a section it must not be stopped in (a store's write transaction) and
   * returns once none is in one, blocking the calling thread meanwhile: from then on the workers
   * may be terminated, by `close` or by process.exit (the signal handlers call this first). The
   * workers stay blocked at their next such section until then.
   */
  quiesce(): void {
    this.gate.close();
  }

  /** Stops every worker, each between two sections it must not be stopped in. */
  async close(): Promise<void> {
    const workers = this.workers.splice(0);
    if (workers.length === 0) return;
    this.quiesce();
    await Promise.all(workers.map((w) => w.terminate()));
    // Workers started later (a pool is closed after a failure) get an open gate.
    this.gate = new StopGate();
  }
}
