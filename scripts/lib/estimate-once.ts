/**
 * One estimate of a counted job, for scripts/bench-estimate.ts (run under GNU time, so each
 * measurement is a process of its own). Prints one JSON line: elapsed time and rows per order.
 *
 *   node --import tsx scripts/lib/estimate-once.ts JOB METHOD streaming|in-memory MEMORY_BYTES WORKERS [HELDOUT]
 *
 * Jelinek-Mercer fits its weights on the HELDOUT file first (streaming: from the job's store; in-memory:
 * on the tables), included in the elapsed time and also reported alone (fitMs).
 * streaming: the streaming estimate from scratch (its earlier results are discarded first);
 * in-memory: loadCountTables + estimate, the library's in-memory path (the baseline).
 */
import { estimate, type EstimateRequest } from '../../src/estimate/estimate.ts';
import { loadCountTables } from '../../src/estimate/from-store.ts';
import type { PlannedRequest } from '../../src/estimate/method-plan.ts';
import { estimateJobStreaming } from '../../src/estimate/stream-stage.ts';
import { fitWeightsOnJob, readHeldOutText } from '../../src/estimate/heldout-store.ts';
import { readManifest } from '../../src/job/manifest.ts';

const [job, method, path, memory, workers, heldOutPath] = process.argv.slice(2);
const request = { method, fallback: true } as Record<string, unknown>;
const started = Date.now();
let fit: { fitMs: number; heldOutSentences: number } | null = null;
if (method === 'jelinek-mercer') {
  if (heldOutPath === undefined || heldOutPath === '-') throw new Error('jelinek-mercer needs a held-out file');
  const heldOut = await readHeldOutText(heldOutPath, job, (await readManifest(job))!);
  if (path === 'streaming') request.weights = await fitWeightsOnJob(job, heldOut);
  else request.heldOut = heldOut;
  fit = { fitMs: Date.now() - started, heldOutSentences: heldOut.length };
}
let rows: number[];
if (path === 'streaming') {
  const summary = await estimateJobStreaming({ jobDir: job, request: request as PlannedRequest, memoryBytes: Number(memory), workers: Number(workers), restart: true });
  rows = summary.source.rowCounts;
} else {
  const model = estimate(await loadCountTables(job, Number(memory)), request as EstimateRequest);
  rows = model.orders.map((o) => o.log10Prob.length);
}
process.stdout.write(JSON.stringify({ elapsedMs: Date.now() - started, rows, ...(path === 'streaming' ? fit : {}) /* in memory, EM runs inside estimate() */ }) + '\n');
