/**
 * The streaming estimate of a counted job: partition by partition, in worker threads, with bounded
 * memory, resumable. The main thread
 *  1. reads the count-of-counts of every order from stats.json and plans the method (the same
 *     global parameters the in-memory path reads off its tables: method-plan.ts);
 *  2. estimates the unigram level from the shared order-1 rows (V rows) and writes it;
 *  3. checks each partition's working set (partition-estimate.ts) against --memory;
 *  4. runs one task per partition on a worker pool; each finished partition's result files are
 *     recorded in job.json (stages.estimate) once durable, so a re-run skips it;
 *  5. records the model's header and returns the job's model source (job-model-source.ts).
 * Results estimated with another method, other options or other counts are removed first.
 */
import { createHash } from 'node:crypto';
import pLimit from 'p-limit';
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
import { WorkerPool } from '../count/pool.ts';
import type { EstimateDone } from '../count/protocol.ts';
import { baseInit, readJobVocabulary } from '../count/stage.ts';
import { silentProgress, type ProgressSink } from '../job/context.ts';
import { stageFs, writeFileThrough, type StageFs } from '../job/fsio.ts';
import { stopCleanlyOnSignals } from '../job/interrupt.ts';
import { lockJob } from '../job/lock.ts';
import { readManifest, writeManifest, type EstimateStage, type JobManifest } from '../job/manifest.ts';
import { mergeRuns } from '../count/run-merge.ts';
import { PartitionStore, partitionStoreDir, StoreSource } from '../merge/store.ts';
import { STATS_FILE, type StatsFile } from '../merge/stage.ts';
import type { CountOfCounts } from '../stats/types.ts';
import { checkCutoffs, estimateUnigrams, unigramLevel } from './back-off-form.ts';
import { vocabularySize } from './counts.ts';
import type { KatzTallies } from './katz.ts';
import { openJobModelSource } from './job-model-source.ts';
import { planMethod, type MethodPlan, type OrderCountOfCounts, type PlannedRequest } from './method-plan.ts';
import type { ModelSource } from './model-source.ts';
import { ESTIMATE_DIR, partitionNeedBytes, partitionRowCounts, resultFilePath, type PartitionEstimateSettings } from './partition-estimate.ts';
import { RESULT_WHOLE_JOB, ResultWriter } from './result-file.ts';

export interface StreamEstimateRequest {
  jobDir: string;
  request: PlannedRequest;
  /** Bounds the working sets of the partitions estimated at once, bytes. */
  memoryBytes: number;
  /** Worker threads at most. */
  workers: number;
  /** Discard earlier results of the same estimate and start over. */
  restart?: boolean;
  progress?: ProgressSink;
  fs?: StageFs;
  /** Worker threads to use (e.g. shared by several estimates); by default the stage starts its own. */
  pool?: WorkerPool;
  /** Install SIGINT/SIGTERM handlers that release the lock (the CLI does). */
  handleSignals?: boolean;
}

/** What a finished streaming estimate reports. */
export interface StreamEstimateSummary {
  source: ModelSource;
  /** Partitions estimated by this run (the others were done before). */
  partitionsEstimated: number;
  partitions: number;
  /** Worker threads used. */
  workers: number;
  /** Largest working set of a partition, bytes. */
  partitionBytesMax: number;
  elapsedMs: number;
}

/** Adds count-of-counts. */
function addCountOfCounts(a: CountOfCounts, b: CountOfCounts): CountOfCounts {
  const map = new Map<number, number>(a);
  for (const [r, n] of b) map.set(r, (map.get(r) ?? 0) + n);
  return [...map.entries()].sort((x, y) => x[0] - y[0]);
}

/**
 * The count-of-counts of every order as the methods read them, from stats.json: raw counts; and the
 * Kneser-Ney counts — continuation counts of the n-grams something precedes plus the raw counts of
 * those that begin with `<s>` (the only n-grams nothing precedes), below the highest order.
 */
export function statsCountOfCounts(stats: StatsFile): OrderCountOfCounts[] {
  return stats.tallies.map((tally, index) => {
    const order = index + 1;
    const highest = order === stats.order;
    if (highest) return { order, highest, raw: tally.raw, kneserNey: tally.raw };
    const continuation = stats.continuation[index];
    if (continuation === undefined) throw new QuernError('corrupt', `stats.json holds no continuation counts of order ${order}; re-run quern count to finish the job`);
    const kneserNey = addCountOfCounts(continuation.raw, tally.bosRaw);
    const distinct = kneserNey.reduce((sum, [, n]) => sum + n, 0);
    if (distinct !== tally.distinct) {
      throw new QuernError('corrupt', `stats.json: order ${order} has ${tally.distinct} n-grams, but continuation and <s> counts cover ${distinct}`);
    }
    return { order, highest, raw: tally.raw, kneserNey };
  });
}

/** The options that decide the results, in a fixed form (the stage's key). */
function estimateKey(request: PlannedRequest, cutoffs: number[], statsSha: string): string {
  const r = request as Record<string, unknown>;
  return JSON.stringify({
    method: request.method ?? 'modified-kneser-ney',
    cutoffs,
    discounts: r.discounts ?? null,
    fallback: r.fallback === true,
    k: r.k ?? null,
    alpha: r.alpha ?? null,
    weights: r.weights ?? null,
    stats: statsSha,
  });
}

/** Loads the order-1 rows of every partition (raw, and continuation counts where wanted). */
export async function loadUnigrams(jobDir: string, partitions: number, withContinuation: boolean): Promise<{ ids: Uint32Array; counts: Float64Array; continuation: Float64Array | null }> {
  const stores = Array.from({ length: partitions }, (_, p) => PartitionStore.open(path.join(jobDir, partitionStoreDir(p)), 'read'));
  try {
    const ids: number[] = [];
    const counts: number[] = [];
    for await (const batch of mergeRuns(stores.map((s) => new StoreSource(s, 1, undefined, 'raw')), 1)) {
      for (let j = 0; j < batch.recordCount; j++) {
        ids.push(batch.keys[j]);
        counts.push(batch.counts[j]);
      }
    }
    let continuation: Float64Array | null = null;
    if (withContinuation) {
      continuation = new Float64Array(ids.length);
      let row = 0;
      for await (const batch of mergeRuns(stores.map((s) => new StoreSource(s, 1, undefined, 'continuation')), 1)) {
        for (let j = 0; j < batch.recordCount; j++) {
          while (row < ids.length && ids[row] < batch.keys[j]) row++;
          if (row === ids.length || ids[row] !== batch.keys[j]) throw new QuernError('corrupt', `a continuation count of a word in ${jobDir} has no raw count`);
          continuation[row++] = batch.counts[j];
        }
      }
    }
    return { ids: Uint32Array.from(ids), counts: Float64Array.from(counts), continuation };
  } finally {
    await Promise.all(stores.map((s) => s.close()));
  }
}

/**
 * Removes the files under estimate/ that job.json does not record: results of partitions an
 * interrupted run had not finished, and temporary files of atomic writes cut short.
 */
async function removeUnrecorded(jobDir: string, fs: StageFs, stage: EstimateStage): Promise<void> {
  const recorded = new Set<string>(stage.partitionsDone.flatMap((p) => p.files.map((f) => f.file)));
  if (stage.unigrams !== undefined) recorded.add(stage.unigrams.file);
  const root = path.join(jobDir, ESTIMATE_DIR);
  for (const entry of await fsp.readdir(root, { recursive: true, withFileTypes: true }).catch(() => [])) {
    if (!entry.isFile()) continue;
    const file = path.relative(jobDir, path.join(entry.parentPath, entry.name));
    if (!recorded.has(file)) await fs.unlink(path.join(jobDir, file));
  }
}

/** How many partitions would keep every partition's working set within `memoryBytes`. */
function partitionsThatFit(partitions: number, needMax: number, memoryBytes: number): number {
  // The working set shrinks about in proportion to the partitions; a quarter more for uneven ones.
  return Math.ceil((partitions * needMax * 1.25) / memoryBytes);
}

/** The manifest of `jobDir`, whose count has finished ('config' errors otherwise). */
export async function readCountedJob(jobDir: string): Promise<JobManifest> {
  const job = await readManifest(jobDir);
  if (!job) throw new QuernError('config', `${jobDir} is not a quern job (no job.json); run quern count first`);
  if (job.stages.continuation?.status !== 'done') {
    throw new QuernError('config', `the count in ${jobDir} has not finished; re-run the same quern count command to complete it`);
  }
  return job;
}

/**
 * Runs (or continues) the streaming estimate of a counted job and returns its model source.
 * Errors: 'config' (no finished count, bad options, unusable discounts), 'limit' (a partition does
 * not fit --memory), 'corrupt' and 'io'.
 */
export async function estimateJobStreaming(request: StreamEstimateRequest): Promise<StreamEstimateSummary> {
  const started = Date.now();
  const jobDir = path.resolve(request.jobDir);
  const fs = request.fs ?? stageFs();
  const progress = request.progress ?? silentProgress;
  const job = await readCountedJob(jobDir);
  const lock = await lockJob(jobDir);
  // Nothing to wait for before the exit: estimate workers only read the stores (no write
  // transaction, stop-gate.ts) and write result files.
  const removeSignalHandlers = request.handleSignals
    ? stopCleanlyOnSignals(jobDir, lock.file, 're-run the same quern estimate command to continue it.', () => undefined)
    : () => undefined;
  try {
    return await runStage(job, jobDir, fs, progress, request, started);
  } finally {
    removeSignalHandlers();
    await lock.release();
  }
}

/** What every partition's task needs, read from a counted job, and what the stage keys its results by. */
export interface StageInputs {
  settings: PartitionEstimateSettings;
  plan: MethodPlan;
  /** The estimate's key in job.json: method, options and the sha256 of stats.json. */
  key: string;
}

/**
 * Reads stats.json and the vocabulary of the counted job `jobDir`, plans the method and estimates
 * the unigram level (from every partition's order-1 rows): the settings each partition's task gets.
 * Exported for benchmarks that estimate one partition alone (scripts/lib/estimate-partition-once.ts).
 */
export async function stageInputs(job: JobManifest, jobDir: string, request: PlannedRequest): Promise<StageInputs> {
  const orderMax = job.config.order;
  const statsPath = path.join(jobDir, STATS_FILE);
  const statsText = await fsp.readFile(statsPath, 'utf8').catch((cause: unknown) => {
    throw new QuernError('io', `cannot read ${statsPath}: ${(cause as Error).message}`, { cause });
  });
  let stats: StatsFile;
  try {
    stats = JSON.parse(statsText) as StatsFile;
  } catch (cause) {
    throw new QuernError('corrupt', `${statsPath} is not valid JSON; re-run quern count to rebuild it`, { cause });
  }
  const vocab = await readJobVocabulary(jobDir, job);
  const size = vocabularySize(vocab);
  const cutoffs = checkCutoffs(request.cutoffs, orderMax);
  const orders = statsCountOfCounts(stats);
  const plan = planMethod(request, orders, size);
  const key = estimateKey(request, cutoffs, createHash('sha256').update(statsText).digest('hex'));
  const unigrams = await loadUnigrams(jobDir, job.config.partitions, plan.usesContinuation && orderMax > 1);
  const level = unigramLevel(unigrams.ids, unigrams.counts, unigrams.continuation, size, orderMax === 1);
  const unigramProb = estimateUnigrams(level, plan.ruleFor(level), size, plan.header.normalised);
  return { settings: { request, orders, size, cutoffs, unigramProb }, plan, key };
}

async function runStage(job: JobManifest, jobDir: string, fs: StageFs, progress: ProgressSink, request: StreamEstimateRequest, started: number): Promise<StreamEstimateSummary> {
  const { settings, plan, key } = await stageInputs(job, jobDir, request.request);
  const serial = pLimit(1); // job.json is written one write at a time
  const save = (): Promise<void> => serial(() => writeManifest(fs, jobDir, job));

  let stage: EstimateStage | undefined = job.stages.estimate;
  // Stale results are moved aside at once and removed while the partitions are estimated (gigabytes
  // of files take seconds to delete); what an earlier run left aside is removed the same way.
  const removals: Array<Promise<void>> = await staleResultRemovals(jobDir);
  if (stage === undefined || stage.key !== key || request.restart === true) {
    // Results of another estimate (or of a run asked to start over) are stale: forget, then remove.
    stage = { status: 'pending', key, partitionsDone: [] };
    job.stages.estimate = stage;
    await save();
    const stale = await moveAside(jobDir);
    if (stale !== null) removals.push(startRemoving(stale));
  }
  let summary: StreamEstimateSummary;
  try {
    summary = await runPartitions(job, jobDir, fs, progress, request, started, stage, settings, plan, save);
  } catch (error) {
    await Promise.allSettled(removals); // the stage's own failure is the one to report
    throw error;
  }
  await Promise.all(removals);
  return summary;
}

/** Stale result folders (estimate/ moved aside) are named ESTIMATE_DIR + this + a unique suffix. */
const STALE_SUFFIX = '.stale-';

/** Moves the job's estimate/ aside under a stale name and returns that path, or null when there is none. */
async function moveAside(jobDir: string): Promise<string | null> {
  const stale = path.join(jobDir, `${ESTIMATE_DIR}${STALE_SUFFIX}${process.pid}-${Date.now()}`);
  try {
    await fsp.rename(path.join(jobDir, ESTIMATE_DIR), stale);
    return stale;
  } catch (cause) {
    if ((cause as NodeJS.ErrnoException).code === 'ENOENT') return null;
    throw new QuernError('io', `cannot move the stale estimate results of ${jobDir} aside: ${(cause as Error).message}`, { cause });
  }
}

/**
 * Starts removing a stale result folder; the promise fails with an 'io' error if that fails. It is
 * awaited, and so reported, at the end of the stage; until then its failure is held, not unhandled.
 */
function startRemoving(stale: string): Promise<void> {
  const removal = fsp.rm(stale, { recursive: true, force: true }).catch((cause: unknown) => {
    throw new QuernError('io', `cannot remove the stale estimate results ${stale}: ${(cause as Error).message}`, { cause });
  });
  removal.catch(() => undefined);
  return removal;
}

/** Starts removing the stale result folders an earlier run left in the job (interrupted while removing them). */
async function staleResultRemovals(jobDir: string): Promise<Array<Promise<void>>> {
  const names = await fsp.readdir(jobDir);
  return names.filter((name) => name.startsWith(`${ESTIMATE_DIR}${STALE_SUFFIX}`)).map((name) => startRemoving(path.join(jobDir, name)));
}

async function runPartitions(
  job: JobManifest,
  jobDir: string,
  fs: StageFs,
  progress: ProgressSink,
  request: StreamEstimateRequest,
  started: number,
  stage: EstimateStage,
  settings: PartitionEstimateSettings,
  plan: MethodPlan,
  save: () => Promise<void>,
): Promise<StreamEstimateSummary> {
  const orderMax = job.config.order;
  const partitions = job.config.partitions;
  const { size, unigramProb } = settings;
  await removeUnrecorded(jobDir, fs, stage);
  const partitionsBefore = stage.partitionsDone.length;

  // ---- the unigram level (V rows, shared by every partition: estimated by stageInputs) ----
  if (stage.unigrams === undefined) {
    const file = resultFilePath('all', 'probabilities', 1);
    await fs.mkdir(path.dirname(path.join(jobDir, file)));
    let written = { rows: 0, bytes: 0 };
    await writeFileThrough(fs, path.join(jobDir, file), async (out) => {
      const writer = new ResultWriter(out, { kind: 'probabilities', order: 1, partition: RESULT_WHOLE_JOB });
      const id = new Uint32Array(1);
      for (let w = 0; w <= size; w++) {
        id[0] = w;
        writer.add(id, 0, w === BOS_ID ? -Infinity : Math.log10(unigramProb[w]));
      }
      written = await writer.finish();
    });
    stage.unigrams = { file, kind: 'probabilities', order: 1, ...written };
    await save();
  }

  // ---- the partitions ----
  const done = new Set(stage.partitionsDone.map((p) => p.partition));
  let needMax = 0;
  let needPartition = -1;
  const rowsOf = new Array<number>(partitions).fill(0);
  for (let p = 0; p < partitions && orderMax > 1; p++) {
    const store = PartitionStore.open(path.join(jobDir, partitionStoreDir(p)), 'read');
    try {
      const rows = partitionRowCounts(store);
      rowsOf[p] = rows.reduce((a, b) => a + b, 0);
      const need = partitionNeedBytes(rows, size);
      if (need > needMax) {
        needMax = need;
        needPartition = p;
      }
    } finally {
      await store.close();
    }
  }
  // Largest partitions first, so that no large one is left running alone at the end.
  const todo = Array.from({ length: partitions }, (_, p) => p).filter((p) => !done.has(p)).sort((a, b) => rowsOf[b] - rowsOf[a] || a - b);
  const unigramBytes = 8 * (size + 1);
  if (todo.length > 0 && needMax + unigramBytes > request.memoryBytes) {
    throw new QuernError('limit',
      `partition ${needPartition} of ${jobDir} needs about ${needMax + unigramBytes} bytes to estimate, more than --memory ${request.memoryBytes}. ` +
      `Raise --memory, or count the job again with more partitions (quern count --partitions ${partitionsThatFit(partitions, needMax, request.memoryBytes - unigramBytes)} --restart …), which shrinks each one.`);
  }
  const workers = Math.max(1, Math.min(request.workers, request.pool?.size ?? Infinity, todo.length, Math.floor(request.memoryBytes / Math.max(1, needMax + unigramBytes))));
  if (todo.length > 0 && orderMax > 1) {
    stage.status = 'running';
    await save();
    // Its workers start with pool.run; starting them before the stage reads its inputs (tried on
    // the sample job, six runs each) gained nothing on 2 cores.
    const pool = request.pool ?? new WorkerPool(workers);
    progress.start(`estimating ${todo.length} partitions`, todo.length, 'tasks', 'n-grams');
    try {
      await pool.run<number, EstimateDone, unknown>({ ...baseInit(job, jobDir, 'estimate'), estimate: settings }, todo, {
        message: (partition) => ({ type: 'estimate', partition }),
        onProgress: (_bytes, rows) => progress.update(0, rows),
        onDone: (result) => {
          progress.update(1, 0);
          stage.partitionsDone.push({ partition: result.partition, files: result.files, katz: result.katz });
          return save();
        },
      }, workers);
    } finally {
      progress.stop();
      if (request.pool === undefined) await pool.close();
    }
  }
  stage.partitionsDone.sort((a, b) => a.partition - b.partition);

  // ---- the header ----
  const parameters = plan.header.parameters;
  if (parameters.method === 'katz') {
    for (const p of stage.partitionsDone) {
      const tallies = p.katz as Pick<KatzTallies, 'contextsDiscountedAboveK' | 'contextsWithoutMass'>;
      tallies.contextsDiscountedAboveK.forEach((t, i) => { if (i > 0) parameters.contextsDiscountedAboveK[i].contexts += t.contexts; });
      tallies.contextsWithoutMass.forEach((t, i) => { parameters.contextsWithoutMass[i].contexts += t.contexts; });
    }
  }
  stage.header = {
    parameters,
    normalised: plan.header.normalised,
    log10UnseenContextWeight: plan.header.log10UnseenContextWeight,
    cutoffs: settings.cutoffs,
    vocabularyCap: job.config.vocabCap.top === undefined && job.config.vocabCap.minCount === undefined ? null : job.config.vocabCap,
    order: orderMax,
  };
  stage.status = 'done';
  stage.elapsedMs = (stage.elapsedMs ?? 0) + Date.now() - started;
  await save();
  return {
    source: await openJobModelSource(jobDir, { threads: true }),
    partitionsEstimated: stage.partitionsDone.length - partitionsBefore,
    partitions,
    workers,
    partitionBytesMax: needMax,
    elapsedMs: Date.now() - started,
  };
}
