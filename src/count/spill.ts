/**
 * Spilling a CounterSet: every non-empty counter is sorted (spill-sort.ts) and written as one run
 * file per partition, then the set is cleared. Used by the n-gram pass and by the continuation
 * pass, which differ only in where their runs go.
 */
import * as path from 'node:path';
import type { StageFs } from '../job/fsio.ts';
import type { RunRecord } from '../job/manifest.ts';
import type { CounterSet } from './counter-set.ts';
import { writeRunFile } from './run-file.ts';
import { spillOrder } from './spill-sort.ts';

export interface SpillTarget {
  fs: StageFs;
  jobDir: string;
  partitions: number;
  /** Largest word id + 1 (bounds the radix sort). */
  idMax: number;
  /** Provenance recorded in each run's header. */
  chunk: number;
  spill: number;
  /** Path of the run of (order, partition), relative to the job directory. */
  fileFor(order: number, partition: number): string;
}

export async function spillCounterSet(set: CounterSet, target: SpillTarget): Promise<RunRecord[]> {
  const runs: RunRecord[] = [];
  for (const counter of set.counters) {
    if (counter.size === 0) continue;
    const order = counter.order;
    const { slots, partitionStarts } = spillOrder(counter, target.partitions, target.idMax);
    for (let p = 0; p < target.partitions; p++) {
      const begin = partitionStarts[p];
      const records = partitionStarts[p + 1] - begin;
      if (records === 0) continue;
      const keys = new Uint32Array(records * order);
      const counts = new Uint32Array(records);
      for (let j = 0; j < records; j++) {
        const slot = slots[begin + j];
        keys.set(counter.keys.subarray(slot * order, slot * order + order), j * order);
        counts[j] = counter.counts[slot];
      }
      const file = target.fileFor(order, p);
      const absolute = path.join(target.jobDir, file);
      await target.fs.mkdir(path.dirname(absolute));
      const meta = { order, partition: p, chunk: target.chunk, spill: target.spill };
      const info = await writeRunFile(target.fs, absolute, meta, keys, counts, records);
      runs.push({ file, order, partition: p, records, bytes: info.fileBytes });
    }
  }
  set.clear();
  return runs;
}
