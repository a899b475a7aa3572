/**
 * A pool of worker threads that each own their data. The main thread hands out one task at a time
 * to an idle worker (the queue is the task list itself, so nothing unbounded is buffered), relays
 * progress, and stops every worker at the first failure.
 */
import { Worker } from 'node:worker_threads';
import { QuernError } from '../errors.ts';
import type { FromWorker, WorkerInit } from './protocol.ts';

const BOOT_URL = new URL('./worker-boot.mjs', import.meta.url);
const WORKER_URL = new URL(import.meta.url.endsWith('.ts') ? './worker.ts' : './worker.js', import.meta.url);

export interface PoolCallbacks<Task, Done, Finished> {
  /** Called in task order of completion, one at a time (awaited before the worker gets more). */
  onDone(done: Done): Promise<void> | void;
  onProgress?(bytes: number, tokens: number): void;
  /** Sends a task; returns the message for the worker. */
  message(task: Task): unknown;
  /** Collects each worker's 'finished' message. */
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

/**
 * Runs `tasks` on `workerCount` workers started with `init`. Resolves when every task is done and
 * every worker has sent its 'finished' message; rejects with the first failure.
 */
export function runPool<Task, Done, Finished>(
  workerCount: number,
  init: WorkerInit,
  tasks: readonly Task[],
  callbacks: PoolCallbacks<Task, Done, Finished>,
): Promise<void> {
  const count = Math.max(1, Math.min(workerCount, Math.max(tasks.length, 1)));
  return new Promise<void>((resolve, reject) => {
    const workers: Worker[] = [];
    let next = 0;
    const finishedWorkers = new Set<Worker>();
    let failed = false;
    const fail = (error: unknown): void => {
      if (failed) return;
      failed = true;
      Promise.all(workers.map((w) => w.terminate())).finally(() => reject(error));
    };
    const dispatch = (worker: Worker): void => {
      if (failed) return;
      if (next < tasks.length) worker.postMessage(callbacks.message(tasks[next++]));
      else worker.postMessage({ type: 'finish' });
    };
    for (let w = 0; w < count; w++) {
      const worker = new Worker(BOOT_URL, { workerData: { module: WORKER_URL.href, init } });
      workers.push(worker);
      worker.on('message', (message: FromWorker) => {
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
            finishedWorkers.add(worker);
            worker.terminate().then(() => {
              if (finishedWorkers.size === count && !failed) resolve();
            }, fail);
            break;
          case 'error':
            fail(toError(message));
            break;
        }
      });
      worker.on('error', fail);
      worker.on('exit', (code) => {
        if (!failed && !finishedWorkers.has(worker)) fail(new Error(`worker exited with code ${code}`));
      });
      dispatch(worker);
    }
  });
}
