/**
 * A worker module that takes a while to load (test/job/stop-gate.test.ts): flags[0] = 1 when its
 * loading starts, flags[1] = 1 when it has ended. worker-boot.mjs loads it through the stop gate.
 */
import { workerData } from 'node:worker_threads';

const flags = new Int32Array((workerData as { flags: SharedArrayBuffer }).flags);
Atomics.store(flags, 0, 1);
await new Promise((resolve) => setTimeout(resolve, (workerData as { loadMs: number }).loadMs));
Atomics.store(flags, 1, 1);
