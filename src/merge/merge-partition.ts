/**
 * Merges one partition's runs, order by order, into its LMDB environment. Every transaction that
 * writes blocks also writes the progress record (order, records done, tally state), so after a
 * crash counts and progress agree, and a re-run skips exactly what was committed.
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { assert, ioError } from '../errors.ts';
import { MERGE_FAN_IN_MAX, STORE_BLOCK_RECORDS, STORE_TXN_BLOCKS } from '../limits.ts';
import { encodeBlockValue } from '../count/block-codec.ts';
import { fewerRuns } from '../count/fan-in.ts';
import { RunReader } from '../count/run-file.ts';
import { nodeFs, type StageFs } from '../job/fsio.ts';
import { mergeRuns, type BatchSource } from '../count/run-merge.ts';
import { FusedContinuation, readFusedContinuation } from './fused-continuation.ts';
import { localContinuationSource } from './local-continuation.ts';
import { ngramKey, PartitionStore, type KeySpace } from './store.ts';
import { SUFFIX_VECTOR_KEY, SuffixVector, unigramContinuationSource, type UnigramContinuation } from './suffix-vector.ts';
import { TallyBuilder, type OrderTally } from './tally.ts';

export const MERGE_PROGRESS_VERSION = 1;

/** The progress record of a partition's merge (JSON in the store). */
export interface MergeProgress {
  version: number;
  /** The order being merged; orderMax + 1 once the partition is done. */
  order: number;
  /** Records of that order already committed. */
  records: number;
  /** Finished orders' tallies. */
  tallies: OrderTally[];
  /** The tally state of the order being merged. */
  current: ReturnType<TallyBuilder['checkpoint']> | null;
  done: boolean;
}

export interface PartitionMergeTask {
  partition: number;
  /** Run files per order (index 0 = order 1), relative to the job directory. */
  files: string[][];
  /** Continuation space only: orders whose counts come from the partition's own raw n-grams of
   *  the next order (local-continuation.ts) besides any runs; order 1 from every partition's
   *  unigram continuation vector (suffix-vector.ts), kept by the raw merge. */
  localOrders?: number[];
  /** Continuation space with order 1 local: the partition's words' counts from the vectors. */
  unigrams?: UnigramContinuation;
  /** Raw space: bytes the merge may hold to make the continuation counts of orders 2 … N−1 from
   *  the rows it merges (fused-continuation.ts); absent: it makes none. */
  fuseBytesMax?: number;
}

/** Test hooks: smaller transactions, a callback after each commit (which may throw to stop), a
 *  smaller fan-in, and the file system the intermediate runs are written through. */
export interface MergeTuning {
  txnBlocks?: number;
  afterCommit?: () => void;
  fanIn?: number;
  fs?: StageFs;
}

/** Where a partition's intermediate runs live while one of its orders is merged (relative to the
 *  job directory): removed before the order's merge starts (they are made again, the same, when a
 *  merge resumes) and once it is committed. */
export const MERGE_SCRATCH_DIR = 'merge-scratch';

function partitionScratchOf(jobDir: string, space: KeySpace, partition: number): string {
  return path.join(jobDir, MERGE_SCRATCH_DIR, space, `p${String(partition).padStart(4, '0')}`);
}

/** Removes every partition's intermediate runs (a stage's end: its merges are all committed). */
export async function removeMergeScratch(jobDir: string): Promise<void> {
  await removeDir(path.join(jobDir, MERGE_SCRATCH_DIR));
}

async function removeDir(dir: string): Promise<void> {
  try {
    await fsp.rm(dir, { recursive: true, force: true });
  } catch (cause) {
    throw ioError('remove', dir, cause);
  }
}

/**
 * Merges (or finishes merging) one partition's runs into a key space of its store; returns the
 * tallies per order. An empty partition still gets its progress record, so 'done' is recorded.
 */
export async function mergePartition(
  jobDir: string,
  storeDir: string,
  task: PartitionMergeTask,
  space: KeySpace = 'raw',
  tuning: MergeTuning = {},
): Promise<OrderTally[]> {
  const orderMax = task.files.length;
  const store = PartitionStore.open(path.join(jobDir, storeDir), 'write');
  try {
    let progress = store.readProgress<MergeProgress>(space) ?? {
      version: MERGE_PROGRESS_VERSION, order: 1, records: 0, tallies: [], current: null, done: false,
    };
    assert(progress.version === MERGE_PROGRESS_VERSION, `merge progress version ${progress.version}`);
    // The raw merge makes the continuation counts it can from the rows it merges; the
    // continuation merge takes those orders' tallies as they are, and writes the other orders'
    // blocks below theirs, so not in append mode.
    const fused = space === 'raw' && task.fuseBytesMax !== undefined ? new FusedContinuation(task.fuseBytesMax, orderMax) : undefined;
    const made = space === 'continuation' ? readFusedContinuation(store) : new Map<number, OrderTally>();
    while (!progress.done) {
      const tally = made.get(progress.order);
      if (tally !== undefined) {
        assert(task.files[progress.order - 1].length === 0, `partition ${task.partition}: no runs for order ${progress.order}, whose continuation counts its raw merge made`);
        progress = { ...progress, order: progress.order + 1, records: 0, tallies: [...progress.tallies, tally], current: null, done: progress.order === orderMax };
        if (progress.done) store.commit([], progress, space, [], false);
        continue;
      }
      progress = await mergeOrder(jobDir, store, task, progress, orderMax, space, tuning, fused, made.size === 0);
    }
    // Each order removes its intermediates once committed; this catches a stop between the two.
    await removeDir(partitionScratchOf(jobDir, space, task.partition));
    return progress.tallies;
  } finally {
    await store.close();
  }
}

async function mergeOrder(
  jobDir: string,
  store: PartitionStore,
  task: PartitionMergeTask,
  progress: MergeProgress,
  orderMax: number,
  space: KeySpace,
  tuning: MergeTuning,
  fused: FusedContinuation | undefined,
  append: boolean,
): Promise<MergeProgress> {
  const txnBlocks = tuning.txnBlocks ?? STORE_TXN_BLOCKS;
  const order = progress.order;
  const tally = new TallyBuilder(order, progress.current ?? undefined);
  let skip = progress.records;
  let records = progress.records;
  const blockKeys = new Uint32Array(STORE_BLOCK_RECORDS * order);
  const blockCounts = new Float64Array(STORE_BLOCK_RECORDS);
  let blockSize = 0;
  let pending: Array<[Buffer, Buffer]> = [];

  const closeBlock = (): void => {
    pending.push([ngramKey(order, blockKeys, 0, space), encodeBlockValue(blockKeys, blockCounts, 0, blockSize, order)]);
    records += blockSize;
    blockSize = 0;
  };
  const commit = (next: MergeProgress): void => {
    store.commit(pending, next, space, [], append);
    pending = [];
    tuning.afterCommit?.();
  };
  const afterBlock = (): void => {
    if (pending.length === txnBlocks) commit({ ...progress, records, current: tally.checkpoint() });
  };

  // At most MERGE_FAN_IN_MAX sources at once (the local continuation counts take one slot).
  const local = task.localOrders?.includes(order) ?? false;
  const fanIn = tuning.fanIn ?? MERGE_FAN_IN_MAX;
  const scratch = path.join(partitionScratchOf(jobDir, space, task.partition), `o${order}`);
  await removeDir(scratch);
  const files = await fewerRuns({
    files: task.files[order - 1].map((file) => path.join(jobDir, file)), order, slots: local ? fanIn - 1 : fanIn, fanIn,
    scratchDir: scratch, partition: task.partition, fs: tuning.fs ?? nodeFs,
  });
  // Each run's blocks decoded into one pair of arrays: the merge is done with a batch when it asks for the next.
  const readers: BatchSource[] = await RunReader.openAll(files, { reuseBatches: true });
  if (local) {
    assert(space === 'continuation', 'local counts are continuation counts');
    const higherRows = store.readProgress<MergeProgress>('raw')?.tallies[order]?.distinct;
    assert(higherRows !== undefined, `partition ${task.partition}: the raw merge of order ${order + 1} is recorded`);
    if (order === 1) {
      assert(task.unigrams !== undefined, 'the unigram continuation counts of the partition');
      readers.push(unigramContinuationSource(store.dir, task.unigrams));
    } else {
      readers.push(localContinuationSource(store, order, higherRows));
    }
  }
  // The raw merge of bigrams keeps the unigram continuation counts of its stream (including the
  // records a resumed merge skips: they are merged again, only not stored again).
  const suffixes = space === 'raw' && order === 2 ? new SuffixVector() : undefined;
  // The suffixes of every row (again, the records a resumed merge skips included) for the
  // continuation counts of order − 1.
  const gather = fused?.gatherFor(order);
  for await (const batch of mergeRuns(readers, order)) {
    const { keys, counts, recordCount } = batch;
    suffixes?.addBigrams(keys, recordCount);
    gather?.add(keys, recordCount);
    let j = 0;
    if (skip > 0) {
      j = Math.min(skip, recordCount);
      skip -= j;
    }
    // The tally takes exactly the records placed in blocks so far: the checkpoint committed with a
    // transaction must describe the records committed with it.
    while (j < recordCount) {
      if (blockSize === 0 && recordCount - j >= STORE_BLOCK_RECORDS) {
        // A whole block inside the batch: encode it from the batch's arrays, without a copy.
        tally.addRows(keys, counts, j, j + STORE_BLOCK_RECORDS);
        pending.push([ngramKey(order, keys, j * order, space), encodeBlockValue(keys, counts, j, STORE_BLOCK_RECORDS, order)]);
        records += STORE_BLOCK_RECORDS;
        j += STORE_BLOCK_RECORDS;
        afterBlock();
        continue;
      }
      const take = Math.min(STORE_BLOCK_RECORDS - blockSize, recordCount - j);
      tally.addRows(keys, counts, j, j + take);
      blockKeys.set(keys.subarray(j * order, (j + take) * order), blockSize * order);
      blockCounts.set(counts.subarray(j, j + take), blockSize);
      blockSize += take;
      j += take;
      if (blockSize === STORE_BLOCK_RECORDS) {
        closeBlock();
        afterBlock();
      }
    }
  }
  assert(skip === 0, `partition ${task.partition} order ${order}: progress says ${progress.records} records were committed, the runs hold fewer`);
  if (blockSize > 0) closeBlock();
  const finished = tally.finish();
  const next: MergeProgress = {
    version: MERGE_PROGRESS_VERSION,
    order: order + 1,
    records: 0,
    tallies: [...progress.tallies, finished],
    current: null,
    done: order === orderMax,
  };
  if (gather !== undefined) fused!.keep(gather, finished.distinct);
  const meta: Array<[Buffer, Uint8Array]> = suffixes !== undefined && !suffixes.overflow ? [[SUFFIX_VECTOR_KEY, suffixes.encode()]] : [];
  // The continuation blocks made along the way go with the last order's commit: above every raw key.
  if (next.done && fused !== undefined) {
    pending.push(...fused.blocks());
    meta.push(...fused.meta());
  }
  store.commit(pending, next, space, meta, append);
  pending = [];
  tuning.afterCommit?.();
  await removeDir(scratch);
  return next;
}
