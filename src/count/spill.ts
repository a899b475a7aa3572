/**
 * Spilling a CounterSet: every non-empty counter is sorted (spill-sort.ts) and written as one run
 * file per partition (up to SPILL_FILES_WRITING_MAX at once), then the set is cleared. When a write
 * fails, the writes in flight end before the error is thrown; as when files were written one by one,
 * the runs finished before a failure are left unrecorded, for the stage's clean-up of unrecorded
 * runs. Used by the n-gram pass and by the continuation pass, which differ only in where their runs
 * go.
 */
import * as path from 'node:path';
import type { StageFs } from '../job/fsio.ts';
import type { RunRecord } from '../job/manifest.ts';
import type { CounterSet } from './counter-set.ts';
import { writeRunFile } from './run-file.ts';
import { spillOrder } from './spill-sort.ts';
import { SPILL_FILES_WRITING_MAX } from '../limits.ts';

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
  // Sorting destroys a table's hash layout, so the set is cleared even when a write fails: its
  // entries are lost either way, and a worker must never count on top of a half-spilled set.
  try {
    for (const counter of set.counters) {
      if (counter.size === 0) continue;
      const order = counter.order;
      const sorted = spillOrder(counter, target.partitions, target.idMax, set.sortScratch(), set.scratchSorter);
      // Each run file is synced on its own; several in flight let the syncs overlap (with many small
      // chunks, waiting for them one by one was most of the count stage).
      const written: Array<RunRecord | undefined> = new Array(target.partitions);
      let next = 0;
      let failed = false;
      const writer = async (): Promise<void> => {
        while (!failed && next < target.partitions) {
          const p = next++;
          const records = sorted.recordsOf(p);
          if (records === 0) continue;
          const file = target.fileFor(order, p);
          const absolute = path.join(target.jobDir, file);
          try {
            await target.fs.mkdir(path.dirname(absolute));
            const meta = { order, partition: p, chunk: target.chunk, spill: target.spill };
            const info = await writeRunFile(target.fs, absolute, meta, sorted.keysOf(p), sorted.countsOf(p), records);
            written[p] = { file, order, partition: p, records, bytes: info.fileBytes };
          } catch (error) {
            failed = true;
            throw error;
          }
        }
      };
      const outcomes = await Promise.allSettled(Array.from({ length: Math.min(SPILL_FILES_WRITING_MAX, target.partitions) }, writer));
      const failure = outcomes.find((o): o is PromiseRejectedResult => o.status === 'rejected');
      if (failure) throw failure.reason;
      for (const run of written) if (run) runs.push(run);
    }
  } finally {
    set.clear();
  }
  return runs;
}
