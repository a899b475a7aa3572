/**
 * Loads a counted job's store into count tables for the estimators: every order's n-grams in id
 * order (merged across partitions), raw counts, and the continuation counts of the lower orders.
 *
 * This holds all n-grams in memory (about 8 + 4·order bytes each, plus 8 for a continuation
 * count), so it refuses a job whose tables would not fit the memory budget. It is the path of
 * Jelinek-Mercer and of the library's in-memory estimators; every other method is estimated
 * partition by partition with bounded memory (stream-stage.ts).
 */
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import { readManifest } from '../job/manifest.ts';
import { readJobVocabulary } from '../count/stage.ts';
import { mergeRuns } from '../count/run-merge.ts';
import { PartitionStore, partitionStoreDir, StoreSource, type KeySpace } from '../merge/store.ts';
import type { CountTables, NgramTable } from './counts.ts';

/** Bytes the tables of a job take in memory. */
export function countTablesBytes(distinct: number[]): number {
  return distinct.reduce((sum, rows, i) => sum + rows * (8 + 4 * (i + 1) + (i + 1 < distinct.length ? 8 : 0)), 0);
}

async function readOrder(stores: PartitionStore[], order: number, rows: number, space: KeySpace): Promise<{ ids: Uint32Array; counts: Float64Array }> {
  const ids = new Uint32Array(rows * order);
  const counts = new Float64Array(rows);
  let row = 0;
  for await (const batch of mergeRuns(stores.map((s) => new StoreSource(s, order, undefined, space)), order)) {
    if (row + batch.recordCount > rows) throw new QuernError('corrupt', `the store holds more n-grams of order ${order} than stats.json records (${rows})`);
    ids.set(batch.keys.subarray(0, batch.recordCount * order), row * order);
    counts.set(batch.counts.subarray(0, batch.recordCount), row);
    row += batch.recordCount;
  }
  if (row !== rows) throw new QuernError('corrupt', `the store holds ${row} n-grams of order ${order}, stats.json records ${rows}`);
  return { ids, counts };
}

/** Reads the count tables of a finished job; `memoryBytes` bounds what may be loaded. */
export async function loadCountTables(jobDir: string, memoryBytes: number): Promise<CountTables> {
  const job = await readManifest(jobDir);
  if (!job) throw new QuernError('config', `${jobDir} is not a quern job (no job.json); run quern count first`);
  if (job.stages.continuation?.status !== 'done') {
    throw new QuernError('config', `the count in ${jobDir} has not finished; re-run the same quern count command to complete it`);
  }
  const distinct = job.stages.merge.distinct!;
  const bytes = countTablesBytes(distinct);
  if (bytes > memoryBytes) {
    throw new QuernError('limit', `estimating this job in memory needs about ${bytes} bytes, more than --memory ${memoryBytes}; raise --memory (every method but jelinek-mercer is estimated partition by partition, within any budget a partition fits)`);
  }
  const vocab = await readJobVocabulary(jobDir, job);
  const stores = Array.from({ length: job.config.partitions }, (_, p) => PartitionStore.open(path.join(jobDir, partitionStoreDir(p)), 'read'));
  try {
    const tables: NgramTable[] = [];
    for (let order = 1; order <= job.config.order; order++) {
      const raw = await readOrder(stores, order, distinct[order - 1], 'raw');
      let continuation: Float64Array | null = null;
      if (order < job.config.order) {
        // Continuation counts exist for the n-grams not starting with <s>: align them with the raw rows.
        continuation = new Float64Array(distinct[order - 1]);
        let row = 0;
        for await (const batch of mergeRuns(stores.map((s) => new StoreSource(s, order, undefined, 'continuation')), order)) {
          for (let j = 0; j < batch.recordCount; j++) {
            while (row < continuation.length && compare(raw.ids, row, batch.keys, j, order) < 0) row++;
            if (row === continuation.length || compare(raw.ids, row, batch.keys, j, order) !== 0) {
              throw new QuernError('corrupt', `a continuation count in ${jobDir} has no raw count of order ${order}`);
            }
            continuation[row++] = batch.counts[j];
          }
        }
      }
      tables.push({ order, ids: raw.ids, counts: raw.counts, continuation });
    }
    return {
      order: job.config.order,
      vocabulary: { words: vocab.words, eosId: vocab.eosId, unkId: vocab.unkId },
      vocabularyCap: job.config.vocabCap.top === undefined && job.config.vocabCap.minCount === undefined ? null : job.config.vocabCap,
      tables,
    };
  } finally {
    await Promise.all(stores.map((s) => s.close()));
  }
}

function compare(a: Uint32Array, aRow: number, b: Uint32Array, bRow: number, order: number): number {
  for (let k = 0; k < order; k++) {
    const x = a[aRow * order + k];
    const y = b[bRow * order + k];
    if (x !== y) return x < y ? -1 : 1;
  }
  return 0;
}
