/**
 * The model a streaming estimate left in a job, as a ModelSource (model-source.ts), and a helper
 * that materialises any ModelSource into an in-memory LanguageModel.
 *
 * Order 1 is the whole-job unigram file joined with the back-off weights of the contexts of one
 * word, which the partitions wrote (V rows: gathered densely). Order m ≥ 2 is a k-way merge of the
 * partitions' sorted probability files into global ascending order (the count store's loser-tree
 * merge, batch by batch), joined with a k-way merge of their back-off files of order m (every back-off row is a row of the model; a row without one has
 * weight 1, log10 0). Memory: one block per file and one output batch.
 */
import * as path from 'node:path';
import { Worker } from 'node:worker_threads';
import { assert, QuernError } from '../errors.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
import { readJobVocabulary } from '../count/stage.ts';
import { readManifest, type EstimateStage, type JobManifest } from '../job/manifest.ts';
import { StopGate } from '../job/stop-gate.ts';
import { ESTIMATE_SOURCE_BATCH_ROWS, ROWS_THREAD_BATCHES_AHEAD, ROWS_THREAD_ROWS_MIN } from '../limits.ts';
import type { RowsFromWorker, RowsToWorker, RowsWorkerData } from './rows-protocol.ts';
import { vocabularySize } from './counts.ts';
import { checkModel, type LanguageModel, type ModelOrder } from './model.ts';
import type { ModelRowBatch, ModelSource, RowOptions } from './model-source.ts';
import { resultFilePath, type ResultFileRecord } from './partition-estimate.ts';
import { mergeRuns, type BatchSource } from '../count/run-merge.ts';
import type { RunBatch } from '../count/run-file.ts';
import { RESULT_WHOLE_JOB, ResultReader, type ResultKind } from './result-file.ts';
import { compareRows } from '../count/block-codec.ts';

/** A result file as a source of the batch merge (count/run-merge.ts): its values ride as "counts". */
function resultSource(reader: ResultReader, order: number): BatchSource {
  return {
    name: reader.filePath,
    order,
    async nextBatch(): Promise<RunBatch | null> {
      const batch = await reader.nextBatch();
      return batch === null ? null : { keys: batch.ids, counts: batch.values, recordCount: batch.rows };
    },
    close: () => reader.close(),
  };
}

function finishedStage(jobDir: string, stage: EstimateStage | undefined): Required<Pick<EstimateStage, 'header' | 'unigrams'>> & EstimateStage {
  if (stage?.status !== 'done' || stage.header === undefined || stage.unigrams === undefined) {
    throw new QuernError('config', `the job in ${jobDir} holds no finished estimate; run quern estimate first`);
  }
  return stage as Required<Pick<EstimateStage, 'header' | 'unigrams'>> & EstimateStage;
}

/** The back-off weights of a batch read with `idsOnly`. */
const NO_VALUES = new Float64Array(0);

/** Options of `openJobModelSource`. */
export interface JobModelSourceOptions {
  /** Read each pass over an order (the merge of its result files) in a worker thread of its own,
   *  which posts the batches to this one (`threadedRows`): a reader that goes through two orders
   *  side by side (the pack) then has two threads merging for it. Default false. */
  threads?: boolean;
  /** With `threads`: orders of fewer rows are read on this thread (a thread takes ~0.5 s longer to
   *  give its first batch, about what such an order takes to merge). Default ROWS_THREAD_ROWS_MIN. */
  threadRowsMin?: number;
}

/** The worker-thread entry and the module it loads (src/count/worker-boot.mjs registers tsx for .ts). */
const BOOT_URL = new URL('../count/worker-boot.mjs', import.meta.url);
const ROWS_WORKER_URL = new URL(import.meta.url.endsWith('.ts') ? './rows-worker.ts' : './rows-worker.js', import.meta.url);

/** Threads started by `threadedRows` in this process (tests check that threads ran). */
let threadsStarted = 0;

/** The stop gates of the row threads running now (`threadedRows`). */
const liveRowGates = new Set<StopGate>();

/**
 * Closes the stop gate of every row thread running now and returns once none of them is inside a
 * section it must not be stopped in (loading its modules, lmdb's among them, worker-boot.mjs): from
 * then on process.exit may end them. For the stop-signal handler of a pack (cli/pack-signals.ts),
 * which exits at once; a pass that ends normally closes its own gate.
 */
export function quiesceRowThreads(): void {
  for (const gate of liveRowGates) gate.close();
}

/** @internal For tests: the gates of the row threads running now. */
export function liveRowThreadGates(): StopGate[] {
  return [...liveRowGates];
}

/** @internal For tests: how many passes `threadedRows` has read in threads of their own. */
export function threadedPassesStarted(): number {
  return threadsStarted;
}

/**
 * One pass over an order of the job's estimate, read in a worker thread (rows-worker.ts) that
 * posts its batches ahead, at most ROWS_THREAD_BATCHES_AHEAD untaken. The worker is stopped when
 * the pass ends, fails or is left early.
 */
async function* threadedRows(jobDir: string, order: number, idsOnly: boolean): AsyncGenerator<ModelRowBatch> {
  threadsStarted++;
  // Its gate is closed before it is terminated, so that it is never ended while it loads (worker-boot.mjs).
  const gate = new StopGate();
  liveRowGates.add(gate);
  const data: RowsWorkerData = { module: ROWS_WORKER_URL.href, jobDir, order, idsOnly, ahead: ROWS_THREAD_BATCHES_AHEAD, stopGate: gate.buffer };
  const worker = new Worker(BOOT_URL, { workerData: data });
  const queue: RowsFromWorker[] = [];
  let failure: Error | null = null;
  let wake: (() => void) | null = null;
  worker.on('message', (message: RowsFromWorker) => {
    queue.push(message);
    wake?.();
  });
  worker.on('error', (error) => {
    failure ??= error;
    wake?.();
  });
  worker.on('exit', (code) => {
    failure ??= new Error(`the thread reading order ${order} of ${jobDir} stopped (exit code ${code})`);
    wake?.();
  });
  try {
    for (;;) {
      while (queue.length === 0 && failure === null) await new Promise<void>((resolve) => (wake = resolve));
      wake = null;
      const message = queue.shift();
      if (message === undefined) throw failure ?? new Error(`the thread reading order ${order} of ${jobDir} ended without a word`);
      if (message.type === 'end') return;
      if (message.type === 'error') throw message.code === null ? new Error(message.message) : new QuernError(message.code, message.message);
      worker.postMessage({ type: 'credit' } satisfies RowsToWorker);
      yield { rows: message.rows, ids: message.ids, log10Prob: message.log10Prob, log10BackOff: message.log10BackOff };
    }
  } finally {
    worker.removeAllListeners('exit');
    gate.close();
    liveRowGates.delete(gate);
    await worker.terminate();
  }
}

/** The result files of a job's finished estimate, by kind and order, and how to open one. */
interface EstimateResults {
  byOrder(kind: ResultKind, order: number): ResultFileRecord[];
  open(record: ResultFileRecord): Promise<ResultReader>;
}

/** A job's finished estimate stage and its result files (no vocabulary read). */
async function readEstimateResults(jobDir: string): Promise<{ job: JobManifest; stage: ReturnType<typeof finishedStage>; results: EstimateResults }> {
  const job = await readManifest(jobDir);
  if (!job) throw new QuernError('config', `${jobDir} is not a quern job (no job.json)`);
  const stage = finishedStage(jobDir, job.stages.estimate);
  const byOrder = (kind: ResultKind, order: number): ResultFileRecord[] =>
    stage.partitionsDone.flatMap((p) => p.files.filter((f) => f.kind === kind && f.order === order).map((f) => ({ ...f, partition: p.partition })));
  const partitionOf = (record: ResultFileRecord): number => Number((record as ResultFileRecord & { partition: number }).partition);
  const open = (record: ResultFileRecord): Promise<ResultReader> =>
    ResultReader.open(path.join(jobDir, record.file), { kind: record.kind, order: record.order, partition: partitionOf(record) }, record);
  return { job, stage, results: { byOrder, open } };
}

/**
 * One pass over order m ≥ 2 of a job's finished estimate (what `openJobModelSource(job).rows(m)`
 * gives), without reading the job's vocabulary, which only order 1 and the header need: for the
 * pack's row threads (rows-worker.ts), each of which reads one pass.
 */
export async function jobOrderRows(jobDir: string, order: number, idsOnly: boolean): Promise<AsyncIterable<ModelRowBatch>> {
  const { stage, results } = await readEstimateResults(jobDir);
  const orderMax = stage.header.cutoffs.length;
  assert(Number.isInteger(order) && order >= 2 && order <= orderMax, `order in [2, ${orderMax}]`);
  return orderRows(jobDir, results, order, idsOnly);
}

/**
 * Order m ≥ 2: the partitions' probability files merged into ascending order by the loser-tree
 * merge of the count store (batch by batch, no per-row await), joined with their merged back-off
 * files. The partitions' rows are disjoint, so the merge never adds two values; the row total is
 * checked against the files' records all the same.
 */
async function* orderRows(jobDir: string, results: EstimateResults, order: number, idsOnly: boolean): AsyncIterable<ModelRowBatch> {
  const { byOrder, open } = results;
  const corrupt = (what: string): QuernError => new QuernError('corrupt', `${jobDir}: ${what}; re-run quern estimate with --restart`);
  const probFiles = byOrder('probabilities', order);
  const backOffFiles = byOrder('back-off', order);
  // Every reader opened is closed in the end, whatever fails: a merge that was never started
  // (the back-off weights', when the first probability batch is damaged) closes nothing itself.
  const readers: ResultReader[] = [];
  const openAll = async (records: ResultFileRecord[]): Promise<ResultReader[]> => {
    const opened: ResultReader[] = [];
    for (const record of records) {
      const reader = await open(record);
      readers.push(reader);
      opened.push(reader);
    }
    return opened;
  };
  let probs: AsyncGenerator<RunBatch> | undefined;
  let backOffs: AsyncGenerator<RunBatch> | undefined;
  let backOff: RunBatch | null = null;
  let b = 0;
  let rowsOut = 0;
  let backOffRows = 0;
  try {
    probs = mergeRuns((await openAll(probFiles)).map((r) => resultSource(r, order)), order);
    if (idsOnly) {
      // The ids alone: no back-off weights merged or joined (nor their checks, made by the passes
      // that read them).
      for await (const batch of probs) yield { rows: batch.recordCount, ids: batch.keys.subarray(0, batch.recordCount * order), log10Prob: batch.counts.subarray(0, batch.recordCount), log10BackOff: NO_VALUES };
      return;
    }
    backOffs = mergeRuns((await openAll(backOffFiles)).map((r) => resultSource(r, order)), order);
    for await (const batch of probs) {
      const { keys, counts, recordCount } = batch;
      const log10BackOff = new Float64Array(recordCount);
      for (let r = 0; r < recordCount; r++) {
        if (backOff === null || b === backOff.recordCount) {
          const next = await backOffs.next();
          backOff = next.done ? null : next.value;
          b = 0;
        }
        if (backOff === null) break;
        const c = compareRows(backOff.keys, b * order, keys, r * order, order);
        if (c < 0) throw corrupt(`a back-off weight of order ${order} belongs to no row of the model`);
        if (c === 0) {
          log10BackOff[r] = backOff.counts[b++];
          backOffRows++;
        }
      }
      rowsOut += recordCount;
      yield { rows: recordCount, ids: keys.subarray(0, recordCount * order), log10Prob: counts.subarray(0, recordCount), log10BackOff };
    }
    if (backOff !== null && b < backOff.recordCount) throw corrupt(`a back-off weight of order ${order} belongs to no row of the model`);
    if (!(await backOffs.next()).done) throw corrupt(`a back-off weight of order ${order} belongs to no row of the model`);
    const probRows = probFiles.reduce((sum, f) => sum + f.rows, 0);
    const weightRows = backOffFiles.reduce((sum, f) => sum + f.rows, 0);
    if (rowsOut !== probRows || backOffRows !== weightRows) throw corrupt(`order ${order}: the partitions' results overlap (${rowsOut} of ${probRows} rows, ${backOffRows} of ${weightRows} back-off weights distinct)`);
  } finally {
    await probs?.return(undefined);
    await backOffs?.return(undefined);
    await Promise.all(readers.map((reader) => reader.close().catch(() => undefined)));
  }
}

/** The model of the job's finished streaming estimate, read order by order from its result files. */
export async function openJobModelSource(jobDir: string, options: JobModelSourceOptions = {}): Promise<ModelSource> {
  const { job, stage, results } = await readEstimateResults(jobDir);
  const vocab = await readJobVocabulary(jobDir, job);
  const vocabulary = { words: vocab.words, eosId: vocab.eosId, unkId: vocab.unkId };
  const size = vocabularySize(vocabulary);
  const orderMax = stage.header.cutoffs.length;
  const { byOrder, open } = results;
  const rowCounts = [size + 1];
  for (let m = 2; m <= orderMax; m++) rowCounts.push(byOrder('probabilities', m).reduce((sum, f) => sum + f.rows, 0));
  assert(stage.unigrams.rows === size + 1, 'the unigram results hold every id 0..V');

  async function* unigramRows(): AsyncIterable<ModelRowBatch> {
    const backOff = new Float64Array(size + 1);
    for (const record of byOrder('back-off', 1)) {
      const reader = await open(record);
      for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch()) {
        for (let r = 0; r < batch.rows; r++) backOff[batch.ids[r]] = batch.values[r];
      }
    }
    const unigrams = await ResultReader.open(path.join(jobDir, stage.unigrams.file), { kind: 'probabilities', order: 1, partition: RESULT_WHOLE_JOB }, stage.unigrams);
    let id = 0;
    try {
      for (let batch = await unigrams.nextBatch(); batch !== null; batch = await unigrams.nextBatch()) {
        for (let r = 0; r < batch.rows; r++) {
          if (batch.ids[r] !== id + r) throw new QuernError('corrupt', `${unigrams.filePath}: row ${id + r} holds id ${batch.ids[r]}`);
        }
        yield { rows: batch.rows, ids: batch.ids, log10Prob: batch.values, log10BackOff: backOff.slice(id, id + batch.rows) };
        id += batch.rows;
      }
    } finally {
      await unigrams.close(); // read to its end it is closed already; a consumer that stops early leaves it open
    }
  }

  return {
    header: { ...stage.header, vocabulary },
    rowCounts,
    rows(order: number, rowOptions?: RowOptions): AsyncIterable<ModelRowBatch> {
      assert(Number.isInteger(order) && order >= 1 && order <= orderMax, `order in [1, ${orderMax}]`);
      const idsOnly = rowOptions?.idsOnly === true;
      if (options.threads === true && order >= 2 && rowCounts[order - 1] >= (options.threadRowsMin ?? ROWS_THREAD_ROWS_MIN)) return threadedRows(jobDir, order, idsOnly);
      return order === 1 ? unigramRows() : orderRows(jobDir, results, order, idsOnly);
    },
  };
}

