/**
 * Worker thread of `threadedRows` (job-model-source.ts): reads one order of a job's finished
 * estimate (`jobOrderRows`, the same pass as `openJobModelSource(job).rows(order)` without reading
 * the vocabulary: the k-way merge of the partitions' result files, and their back-off weights
 * joined) and posts its batches to the main thread, at most `ahead` batches before the main thread
 * has taken them (each taken batch sends a credit back).
 * Batches move without a copy (their buffers are transferred) unless a buffer is shared.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { QuernError } from '../errors.ts';
import { jobOrderRows } from './job-model-source.ts';
import type { RowsFromWorker, RowsToWorker, RowsWorkerData } from './rows-protocol.ts';

const { jobDir, order, idsOnly, ahead } = workerData as RowsWorkerData;
const port = parentPort!;
let credits = ahead;
let wake: (() => void) | null = null;
port.on('message', (message: RowsToWorker) => {
  if (message.type === 'credit') {
    credits++;
    wake?.();
  }
});

/** The array itself when it alone owns its buffer (then it is transferred), else a copy. */
function own<T extends Uint32Array | Float64Array>(array: T, transfer: ArrayBuffer[]): T {
  if (array.length > 0 && array.byteOffset === 0 && array.byteLength === array.buffer.byteLength && !transfer.includes(array.buffer as ArrayBuffer)) {
    transfer.push(array.buffer as ArrayBuffer);
    return array;
  }
  return array.slice() as T;
}

const post = (message: RowsFromWorker, transfer: ArrayBuffer[] = []): void => port.postMessage(message, transfer);

/** The pass, started once the module has loaded (worker-boot.mjs loads it through the stop gate). */
async function readPass(): Promise<void> {
  for await (const batch of await jobOrderRows(jobDir, order, idsOnly)) {
    while (credits === 0) await new Promise<void>((resolve) => (wake = resolve));
    wake = null;
    credits--;
    const transfer: ArrayBuffer[] = [];
    const ids = own(batch.ids, transfer);
    const log10Prob = own(batch.log10Prob, transfer);
    const log10BackOff = own(batch.log10BackOff, transfer);
    post({ type: 'batch', rows: batch.rows, ids, log10Prob, log10BackOff }, transfer);
  }
  post({ type: 'end' });
}

readPass().catch((error: unknown) => {
  post({ type: 'error', code: error instanceof QuernError ? error.code : null, message: error instanceof Error ? error.message : String(error) });
});
