/**
 * The merge stage: each partition's runs → its LMDB environment, partitions run concurrently on the
 * worker pool (each is an independent task). Ends by checking the totals against the counts made
 * while reading, and writing stats.json for the report and estimation.
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { assert, QuernError } from '../errors.ts';
import { writeFileAtomic } from '../job/fsio.ts';
import type { StageContext } from '../job/context.ts';
import type { MergeDone } from '../count/protocol.ts';
import { baseInit, counterBudgetPerWorker, sumOccurrences } from '../count/stage.ts';
import { NO_LOCAL_CONTINUATION_ENV } from './continuation-stage.ts';
import { removeMergeScratch, type PartitionMergeTask } from './merge-partition.ts';
import { PartitionStore, partitionStoreDir, STORE_DIR, type KeySpace } from './store.ts';
import { sumTallies, type OrderTally } from './tally.ts';
import type { MergeProgress } from './merge-partition.ts';

/** The tallies a finished partition recorded in its store. */
export async function finishedTallies(jobDir: string, partition: number, space: KeySpace = 'raw'): Promise<OrderTally[]> {
  const dir = path.join(jobDir, partitionStoreDir(partition));
  const store = PartitionStore.open(dir, 'read');
  try {
    const progress = store.readProgress<MergeProgress>(space);
    if (!progress?.done) throw new QuernError('corrupt', `job.json records the merge of ${dir} as finished, but the store does not; re-run with --restart`);
    return progress.tallies;
  } finally {
    await store.close();
  }
}

export const STATS_FILE = 'stats.json';

/** stats.json: the tallies kept while merging, input of the report and of estimation. */
export interface StatsFile {
  order: number;
  /** Raw counts, per order (index 0 = order 1). */
  tallies: OrderTally[];
  /** Continuation counts N1+(• x), per order below the highest (index 0 = order 1). */
  continuation: OrderTally[];
}

export async function readStatsFile(jobDir: string): Promise<StatsFile> {
  const file = path.join(jobDir, STATS_FILE);
  try {
    return JSON.parse(await fsp.readFile(file, 'utf8')) as StatsFile;
  } catch (cause) {
    throw new QuernError('corrupt', `cannot read ${file}: ${(cause as Error).message}; re-run the count to rebuild it`, { cause });
  }
}

/** Groups the recorded run files by partition and order into merge tasks, each allowed a worker's
 *  share of the budget for the continuation counts it makes (fused-continuation.ts). */
function mergeTasks(ctx: StageContext): PartitionMergeTask[] {
  const { job } = ctx;
  const tasks: PartitionMergeTask[] = [];
  // Tests set NO_LOCAL_CONTINUATION_ENV to take the continuation stage's run path for every order.
  const fuseBytesMax = process.env[NO_LOCAL_CONTINUATION_ENV] === '1' || job.config.order < 3 ? undefined : counterBudgetPerWorker(ctx.memoryBytes, ctx.workers, 0);
  for (let p = 0; p < job.config.partitions; p++) {
    tasks.push({ partition: p, files: Array.from({ length: job.config.order }, () => []), ...(fuseBytesMax !== undefined ? { fuseBytesMax } : {}) });
  }
  for (const chunk of job.stages.count.chunks) {
    for (const run of chunk.runs) tasks[run.partition].files[run.order - 1].push(run.file);
  }
  return tasks;
}

/** Bytes of the files under `dir`. */
export async function directoryBytes(dir: string): Promise<number> {
  const entries = await fsp.readdir(dir, { recursive: true, withFileTypes: true }).catch(() => []);
  let bytes = 0;
  for (const e of entries) if (e.isFile()) bytes += (await fsp.stat(path.join(e.parentPath, e.name))).size;
  return bytes;
}

/**
 * A damaged run file cannot be merged: mark the chunk that wrote it for recounting (its runs are
 * removed, and the store is started over since other partitions hold that chunk's other runs),
 * then stop with an account of what happened. Other errors pass unchanged.
 */
async function recountDamagedRun(ctx: StageContext, error: unknown): Promise<never> {
  const file = error instanceof QuernError && error.code === 'corrupt' ? error.location?.file : undefined;
  const { job, jobDir } = ctx;
  const owner = file === undefined ? undefined
    : job.stages.count.chunks.find((c) => c.runs.some((r) => path.join(jobDir, r.file) === file));
  if (owner === undefined) throw error;
  const chunk = job.chunks[owner.chunk];
  const input = job.inputs[chunk.fileIndex];
  // Whenever the process stops in here, a re-run must finish the job: first forget the merge (the
  // store still matches the recorded runs), then remove the store, then drop the chunk, and only
  // then remove its runs (the count stage removes runs it does not record, should this stop early).
  job.stages.merge = { status: 'pending', partitionsDone: [] };
  job.stages.continuation = { status: 'pending', emitted: [], partitionsDone: [] };
  await ctx.saveManifest();
  await fsp.rm(path.join(jobDir, STORE_DIR), { recursive: true, force: true });
  job.stages.count.chunks = job.stages.count.chunks.filter((c) => c !== owner);
  job.stages.count.status = 'pending';
  await ctx.saveManifest();
  for (const run of owner.runs) await ctx.fs.unlink(path.join(jobDir, run.file));
  throw new QuernError('corrupt', `${(error as Error).message}\nThat run holds counts of ${input.path} bytes ${chunk.byteStart}–${chunk.byteEnd} (chunk ${chunk.index}). The chunk is now marked to be counted again: re-run the same command to recount it and merge.`, { cause: error });
}

export async function mergeStage(ctx: StageContext): Promise<void> {
  const { job, jobDir } = ctx;
  const merge = job.stages.merge;
  if (merge.status === 'done') return;
  const started = Date.now();
  const done = new Set(merge.partitionsDone);
  const todo = mergeTasks(ctx).filter((t) => !done.has(t.partition));
  const byPartition = new Map<number, OrderTally[]>();
  for (const partition of done) byPartition.set(partition, await finishedTallies(jobDir, partition));
  merge.status = 'running';
  ctx.progress.start(`merging ${todo.length} partitions`, todo.length, 'tasks');
  await ctx.pool.run<PartitionMergeTask, MergeDone, unknown>(baseInit(job, jobDir, 'merge'), todo, {
    message: (task) => ({ type: 'partition', task }),
    onDone: (result) => {
      ctx.progress.update(1, 0);
      byPartition.set(result.partition, result.tallies);
      merge.partitionsDone.push(result.partition);
      return ctx.saveManifest();
    },
  }).catch((error: unknown) => recountDamagedRun(ctx, error))
    .finally(() => ctx.progress.stop());
  merge.partitionsDone.sort((a, b) => a - b);
  const tallies: OrderTally[] = [];
  for (let n = 1; n <= job.config.order; n++) {
    tallies.push(sumTallies(n, [...byPartition.values()].map((t) => t[n - 1])));
  }
  const occurrences = sumOccurrences(job);
  for (let n = 1; n <= job.config.order; n++) {
    const tally = tallies[n - 1];
    assert(tally.total === occurrences[n - 1], `order ${n}: Σ counts in the store ${tally.total} ≠ occurrences counted ${occurrences[n - 1]}`);
    assert(tally.raw.reduce((s, [r, nr]) => s + r * nr, 0) === tally.total, `order ${n}: Σ r·n_r ≠ total count`);
  }
  const stats: StatsFile = { order: job.config.order, tallies, continuation: [] };
  await writeFileAtomic(ctx.fs, path.join(jobDir, STATS_FILE), JSON.stringify(stats) + '\n');
  merge.distinct = tallies.map((t) => t.distinct);
  merge.storeBytes = await directoryBytes(path.join(jobDir, STORE_DIR));
  await removeMergeScratch(jobDir);
  merge.status = 'done';
  merge.elapsedMs = (merge.elapsedMs ?? 0) + Date.now() - started;
  await ctx.saveManifest();
}
