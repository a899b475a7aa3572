/**
 * Continuation counts N1+(• x): for every n-gram x of order m below the highest, the number of
 * distinct words seen before it — the counts Kneser-Ney uses at the lower orders.
 *
 * Two partition-independent passes after the merge (orders the stage computes inside their
 * partition, local-continuation.ts, skip the first pass):
 *  1. emit: each partition's n-grams w1..wn (n ≥ 2) emit their suffix w2..wn once; the suffixes are
 *     counted in a bounded CounterSet and spilled as run files partitioned by the suffix's own
 *     partition (runs/cont/…);
 *  2. merge: each partition merges its continuation runs into the 'continuation' key space of its
 *     store, with the same resumable, progress-in-the-transaction merge as the raw counts.
 * Σ over x of N1+(• x) at order m equals the distinct n-grams of order m+1 (checked by the stage).
 */
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import type { StageFs } from '../job/fsio.ts';
import type { RunRecord } from '../job/manifest.ts';
import { CounterSet } from '../count/counter-set.ts';
import { RUNS_DIR } from '../count/run-layout.ts';
import { spillCounterSet } from '../count/spill.ts';
import { PartitionStore, partitionStoreDir } from './store.ts';

export const CONTINUATION_RUNS_DIR = path.join(RUNS_DIR, 'cont');

/** Path of a continuation run, relative to the job directory. */
export function continuationRunPath(order: number, partition: number, sourcePartition: number, spill: number): string {
  const p = String(partition).padStart(4, '0');
  return path.join(CONTINUATION_RUNS_DIR, `o${order}`, `p${p}`, `s${String(sourcePartition).padStart(4, '0')}-${String(spill).padStart(3, '0')}.run`);
}

export interface EmitRequest {
  fs: StageFs;
  jobDir: string;
  partition: number;
  orderMax: number;
  partitions: number;
  idMax: number;
  counterBytesMax: number;
  /** Orders of suffixes (≥ 2) not to emit: the target partition computes them itself. */
  localOrders: number[];
}

/** Pass 1 for one source partition: returns the continuation runs it wrote. */
export async function emitContinuations(request: EmitRequest): Promise<RunRecord[]> {
  const { jobDir, partition, orderMax } = request;
  const store = PartitionStore.open(path.join(jobDir, partitionStoreDir(partition)), 'read');
  // Suffixes are word ids below idMax: unigram suffixes go to an array indexed by id when it fits
  // (CounterSet's dense order 1), with no hashing or probing per bigram.
  const set = new CounterSet(orderMax - 1, request.counterBytesMax, request.idMax);
  const runs: RunRecord[] = [];
  let spill = 0;
  const spillAll = async (): Promise<void> => {
    const seq = spill++;
    runs.push(...await spillCounterSet(set, {
      fs: request.fs, jobDir, partitions: request.partitions, idMax: request.idMax, chunk: partition, spill: seq,
      fileFor: (order, target) => continuationRunPath(order, target, partition, seq),
    }));
  };
  try {
    for (let n = 2; n <= orderMax; n++) {
      if (request.localOrders.includes(n - 1)) continue;
      // Decoded into the same arrays block after block: addNgram copies what it keeps.
      for (const block of store.blocks(n, undefined, 'raw', true)) {
        for (let j = 0; j < block.recordCount; j++) {
          const start = j * n + 1;
          if (set.addNgram(block.keys, start, n - 1)) continue;
          await spillAll();
          if (!set.addNgram(block.keys, start, n - 1)) {
            throw new QuernError('limit', `the continuation counters do not fit ${request.counterBytesMax} bytes per worker; raise --memory`);
          }
        }
      }
    }
    if (set.size > 0) await spillAll();
    return runs;
  } finally {
    await store.close();
  }
}
