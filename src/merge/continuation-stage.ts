/**
 * The continuation stage (main thread): emit pass, then merge pass, each partition a task on the
 * worker pool, each recorded in job.json when durable. See continuation.ts for the passes; the
 * orders whose counts a partition can compute from its own store within a worker's budget skip
 * the emit pass (local-continuation.ts), decided once when the stage starts.
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { assert } from '../errors.ts';
import { writeFileAtomic } from '../job/fsio.ts';
import type { StageContext } from '../job/context.ts';
import type { EmitDone, MergeDone } from '../count/protocol.ts';
import { baseInit, counterBudgetPerWorker } from '../count/stage.ts';
import { CONTINUATION_RUNS_DIR } from './continuation.ts';
import { localContinuationBytes } from './local-continuation.ts';
import { fusedOrders } from './fused-continuation.ts';
import { hasSuffixVector, unigramContinuations } from './suffix-vector.ts';
import { removeMergeScratch, type PartitionMergeTask } from './merge-partition.ts';
import { directoryBytes, finishedTallies, readStatsFile, STATS_FILE } from './stage.ts';
import { STORE_DIR } from './store.ts';
import { sumTallies, type OrderTally } from './tally.ts';

/** Environment variable: '1' makes every partition emit runs for every order (a test hook). */
export const NO_LOCAL_CONTINUATION_ENV = 'QUERN_TEST_NO_LOCAL_CONTINUATION';

export async function continuationStage(ctx: StageContext, idMax: number): Promise<void> {
  const { job, jobDir } = ctx;
  const stage = job.stages.continuation;
  if (stage.status === 'done') return;
  const started = Date.now();
  const orderMax = job.config.order;
  const partitions = job.config.partitions;
  stage.status = 'running';

  // ---- which orders each partition computes itself ----
  if (stage.local === undefined) {
    // Tests set NO_LOCAL_CONTINUATION_ENV to take the run path whatever the budget.
    const budget = process.env[NO_LOCAL_CONTINUATION_ENV] === '1' ? -1 : counterBudgetPerWorker(ctx.memoryBytes, ctx.workers, 0);
    // Order 1 from the vectors the raw merge kept (suffix-vector.ts), when every partition has one.
    let vectors = budget >= 0 && orderMax >= 2;
    for (let p = 0; p < partitions && vectors; p++) vectors = await hasSuffixVector(jobDir, p);
    // Orders ≥ 2 the raw merge made (fused-continuation.ts), or whose rows fit the budget.
    const local: number[][] = [];
    for (let p = 0; p < partitions; p++) {
      const tallies = await finishedTallies(jobDir, p, 'raw');
      const fused = await fusedOrders(jobDir, p);
      const orders: number[] = vectors ? [1] : [];
      for (let m = 2; m < orderMax; m++) if (fused.has(m) || localContinuationBytes(tallies[m].distinct, m) <= budget) orders.push(m);
      local.push(orders);
    }
    stage.local = local;
    await ctx.saveManifest();
  }
  const local = stage.local;
  assert(local.length === partitions, 'a local-order list per partition');

  // ---- pass 1: emit suffixes ----
  if (orderMax >= 2) {
    const emitted = new Set(stage.emitted.map((e) => e.partition));
    const kept = new Set(stage.emitted.flatMap((e) => e.runs.map((r) => r.file)));
    const root = path.join(jobDir, CONTINUATION_RUNS_DIR);
    for (const entry of await fsp.readdir(root, { recursive: true, withFileTypes: true }).catch(() => [])) {
      const file = path.relative(jobDir, path.join(entry.parentPath, entry.name));
      if (entry.isFile() && !kept.has(file)) await ctx.fs.unlink(path.join(jobDir, file));
    }
    // A partition that computes every order itself emits nothing: recorded so without a task.
    const emitsNothing = Array.from({ length: partitions }, (_, p) => p).filter((p) => !emitted.has(p) && local[p].length === orderMax - 1);
    if (emitsNothing.length > 0) {
      for (const p of emitsNothing) stage.emitted.push({ partition: p, runs: [] });
      await ctx.saveManifest();
    }
    const todo = Array.from({ length: partitions }, (_, p) => p).filter((p) => !emitted.has(p) && !emitsNothing.includes(p));
    const workers = Math.min(ctx.workers, Math.max(1, todo.length));
    const init = { ...baseInit(job, jobDir, 'continuation-emit'), idMax, counterBytesMax: counterBudgetPerWorker(ctx.memoryBytes, workers, 0) };
    if (todo.length > 0) ctx.progress.start('continuation suffixes', todo.length, 'tasks');
    if (todo.length > 0) await ctx.pool.run<number, EmitDone, unknown>(init, todo, {
      message: (partition) => ({ type: 'emit', partition, localOrders: local[partition] }),
      onDone: (done) => {
        ctx.progress.update(1, 0);
        stage.emitted.push({ partition: done.partition, runs: done.runs });
        return ctx.saveManifest();
      },
    }).finally(() => ctx.progress.stop());
  }

  // ---- pass 2: merge them into each partition's store ----
  const done = new Set(stage.partitionsDone);
  const unigrams = local.some((orders) => orders.includes(1)) && done.size < partitions ? await unigramContinuations(jobDir, partitions, idMax) : undefined;
  const tasks: PartitionMergeTask[] = Array.from({ length: partitions }, (_, p) => ({
    partition: p,
    files: Array.from({ length: Math.max(0, orderMax - 1) }, () => [] as string[]),
    localOrders: local[p],
    ...(unigrams !== undefined && local[p].includes(1) ? { unigrams: unigrams[p] } : {}),
  }));
  for (const e of stage.emitted) for (const run of e.runs) tasks[run.partition].files[run.order - 1].push(run.file);
  const byPartition = new Map<number, OrderTally[]>();
  if (orderMax >= 2) {
    for (const partition of done) byPartition.set(partition, await finishedTallies(jobDir, partition, 'continuation'));
    const todo = tasks.filter((t) => !done.has(t.partition));
    ctx.progress.start('continuation counts', todo.length, 'tasks');
    await ctx.pool.run<PartitionMergeTask, MergeDone, unknown>(baseInit(job, jobDir, 'continuation-merge'), todo, {
      message: (task) => ({ type: 'partition', task }),
      onDone: (result) => {
        ctx.progress.update(1, 0);
        byPartition.set(result.partition, result.tallies);
        stage.partitionsDone.push(result.partition);
        return ctx.saveManifest();
      },
    }).finally(() => ctx.progress.stop());
  }
  const stats = await readStatsFile(jobDir);
  stats.continuation = [];
  for (let m = 1; m < orderMax; m++) {
    const tally = sumTallies(m, [...byPartition.values()].map((t) => t[m - 1]));
    // Every distinct n-gram of order m+1 adds one to exactly one continuation count of order m.
    assert(tally.total === stats.tallies[m].distinct, `order ${m}: Σ N1+(• x) ${tally.total} ≠ distinct n-grams of order ${m + 1} ${stats.tallies[m].distinct}`);
    stats.continuation.push(tally);
  }
  await writeFileAtomic(ctx.fs, path.join(jobDir, STATS_FILE), JSON.stringify(stats) + '\n');
  stage.partitionsDone.sort((a, b) => a - b);
  await removeMergeScratch(jobDir);
  stage.storeBytes = await directoryBytes(path.join(jobDir, STORE_DIR));
  stage.status = 'done';
  stage.elapsedMs = (stage.elapsedMs ?? 0) + Date.now() - started;
  await ctx.saveManifest();
}
