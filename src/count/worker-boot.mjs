// Entry of every worker thread: registers the TypeScript loader when the worker module is a .ts
// file (development and tests run from source), then loads the module named in workerData.
import { workerData } from 'node:worker_threads';

if (workerData.module.endsWith('.ts')) {
  const { register } = await import('tsx/esm/api');
  register();
}
await import(workerData.module);
