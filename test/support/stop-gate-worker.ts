/**
 * A worker thread for test/job/stop-gate.test.ts, loaded through src/count/worker-boot.mjs. It takes
 * the pool's gate from workerData as src/count/worker.ts does, then, by `mode`:
 *  - 'commit': commits small transactions to a PartitionStore at `dir` for ever, and stays
 *    `insideMs` inside the third after posting 'inside';
 *  - 'section': runs gate sections of about 100 ms for ever, each marked in the shared `flags`:
 *    [inside a section (0/1), sections finished].
 */
import { parentPort, workerData } from 'node:worker_threads';
import { installStopGate, runUnstoppable, StopGate } from '../../src/job/stop-gate.ts';
import { ngramKey, PartitionStore } from '../../src/merge/store.ts';

const data = workerData as { stopGate: SharedArrayBuffer; mode: 'commit' | 'section'; dir?: string; insideMs?: number; flags?: SharedArrayBuffer };
installStopGate(new StopGate(data.stopGate));
const port = parentPort!;

/**
 * Commits for ever (mode 'commit'). In the third transaction, before its first put, it posts
 * 'inside' and waits `insideMs`: the thread is then certainly inside a write transaction when the
 * main thread is told so (the store's puts run only inside its transactionSync).
 */
function commitForEver(): void {
  const store = PartitionStore.open(data.dir!, 'write');
  const db = (store as unknown as { db: { putSync(...args: unknown[]): unknown } }).db;
  const putSync = db.putSync;
  const sleeper = new Int32Array(new SharedArrayBuffer(4));
  let transactions = 0;
  let puts = 0;
  db.putSync = function (...args: unknown[]): unknown {
    if (transactions === 2 && puts++ === 0) {
      port.postMessage('inside');
      Atomics.wait(sleeper, 0, 0, data.insideMs);
    }
    return putSync.apply(this, args);
  };
  const value = Buffer.alloc(16, 7);
  const ids = new Uint32Array(2);
  for (;;) {
    const entries: Array<[Buffer, Buffer]> = [];
    for (let b = 0; b < 100; b++) {
      ids[0] = transactions;
      ids[1] = b;
      entries.push([ngramKey(2, ids), value]);
    }
    store.commit(entries, { transactions: transactions + 1 });
    transactions++;
  }
}

/** Runs sections of about 100 ms for ever (mode 'section'). */
function sectionsForEver(): void {
  const flags = new Int32Array(data.flags!);
  const sleeper = new Int32Array(new SharedArrayBuffer(4));
  port.postMessage('started');
  for (;;) {
    runUnstoppable(() => {
      Atomics.store(flags, 0, 1);
      Atomics.wait(sleeper, 0, 0, 100);
      Atomics.add(flags, 1, 1);
      Atomics.store(flags, 0, 0);
    });
  }
}

// Started by a message, as the pool's worker does its tasks (not while its module is being loaded).
port.once('message', () => (data.mode === 'commit' ? commitForEver() : sectionsForEver()));
