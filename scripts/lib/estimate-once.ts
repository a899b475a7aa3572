/**
 * One estimate of a counted job, for scripts/bench-estimate.ts (run under GNU time, so each
 * measurement is a process of its own). Prints one JSON line: elapsed time and rows per order.
 *
 *   node --import tsx scripts/lib/estimate-once.ts JOB METHOD streaming|in-memory MEMORY_BYTES WORKERS
 *
 * streaming: the streaming estimate from scratch (its earlier results are discarded first);
 * in-memory: loadCountTables + estimate, the library's in-memory path (the baseline).
 */
import { estimate, type EstimateRequest } from '../../src/estimate/estimate.ts';
import { loadCountTables } from '../../src/estimate/from-store.ts';
import type { PlannedRequest } from '../../src/estimate/method-plan.ts';
import { estimateJobStreaming } from '../../src/estimate/stream-stage.ts';

const [job, method, path, memory, workers] = process.argv.slice(2);
const request = { method, fallback: true } as EstimateRequest;
const started = Date.now();
let rows: number[];
if (path === 'streaming') {
  const summary = await estimateJobStreaming({ jobDir: job, request: request as PlannedRequest, memoryBytes: Number(memory), workers: Number(workers), restart: true });
  rows = summary.source.rowCounts;
} else {
  const model = estimate(await loadCountTables(job, Number(memory)), request);
  rows = model.orders.map((o) => o.log10Prob.length);
}
process.stdout.write(JSON.stringify({ elapsedMs: Date.now() - started, rows }) + '\n');
