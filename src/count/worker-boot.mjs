// Entry of every worker thread: registers the TypeScript loader when the worker module is a .ts
// file (development and tests run from source), then loads the module named in workerData — through
// the stop gate whose words workerData.stopGate holds (src/job/stop-gate.ts), like a store commit:
// loading registers lmdb's native addon, and a thread ended (Worker.terminate, process.exit) while it
// registers aborts the whole process ("napi_throw"; seen once in CI when an I/O fault stopped a
// count while its workers were still starting). A worker module must not do its work while it
// loads (no long top-level await), or closing the gate would wait for that work.
import { workerData } from 'node:worker_threads';

const fromSource = workerData.module.endsWith('.ts');
if (fromSource) {
  const { register } = await import('tsx/esm/api');
  register();
}
const { StopGate } = await import(new URL(fromSource ? '../job/stop-gate.ts' : '../job/stop-gate.js', import.meta.url).href);
await new StopGate(workerData.stopGate).runAsync(() => import(workerData.module));
