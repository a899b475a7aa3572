/**
 * Child process of test/job/stop-gate.test.ts (run with `node --import tsx`): starts a worker that
 * commits to a store at `dir` (stop-gate-worker.ts) and, when it says it is inside a write
 * transaction (where it stays `insideMs`), stops it as WorkerPool.close does: close the gate, then
 * terminate. Prints how long each step took, and the transactions the store holds after the stop,
 * as JSON. A worker terminated inside a write transaction never ends (stop-gate.ts): this runs in a
 * process the test can kill.
 */
import * as path from 'node:path';
import { Worker } from 'node:worker_threads';
import { StopGate } from '../../src/job/stop-gate.ts';
import { PartitionStore } from '../../src/merge/store.ts';

const [dir, insideMsText] = process.argv.slice(2);
const gate = new StopGate();
const worker = new Worker(new URL('../../src/count/worker-boot.mjs', import.meta.url), {
  workerData: { module: new URL('./stop-gate-worker.ts', import.meta.url).href, stopGate: gate.buffer, mode: 'commit', dir, insideMs: Number(insideMsText) },
});
worker.on('error', (error) => {
  console.error(error);
  process.exit(1);
});
worker.postMessage('start');
await new Promise((resolve) => worker.once('message', resolve));
const closing = Date.now();
gate.close();
const terminating = Date.now();
await worker.terminate();
const terminateMs = Date.now() - terminating;
const store = PartitionStore.open(path.resolve(dir), 'read');
const transactions = store.readProgress<{ transactions: number }>()?.transactions ?? 0;
await store.close();
console.log(JSON.stringify({ closeMs: terminating - closing, terminateMs, transactions }));
