/** Messages between `threadedRows` (job-model-source.ts) and its worker (rows-worker.ts). */
import type { QuernErrorCode } from '../errors.ts';

export interface RowsWorkerData {
  /** The worker's module, for src/count/worker-boot.mjs. */
  module: string;
  jobDir: string;
  order: number;
  idsOnly: boolean;
  /** Batches the worker may post before the first credit comes back. */
  ahead: number;
  /** The words of the worker's stop gate (src/job/stop-gate.ts; worker-boot.mjs loads through it). */
  stopGate: SharedArrayBuffer;
}

export type RowsFromWorker =
  | { type: 'batch'; rows: number; ids: Uint32Array; log10Prob: Float64Array; log10BackOff: Float64Array }
  | { type: 'end' }
  | { type: 'error'; code: QuernErrorCode | null; message: string };

export type RowsToWorker = { type: 'credit' };
