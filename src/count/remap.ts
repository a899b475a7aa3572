/**
 * Re-keys a chunk's run files after the vocabulary changed (inputs added to a finished job): every
 * n-gram's ids are mapped old → new, which changes both its partition and its sort position, so the
 * records go through a bounded CounterSet again and are spilled as new runs. Counts are unchanged.
 */
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import type { StageFs } from '../job/fsio.ts';
import type { RunRecord } from '../job/manifest.ts';
import { CounterSet } from './counter-set.ts';
import { RunReader } from './run-file.ts';
import { runFilePath } from './run-layout.ts';
import { spillCounterSet } from './spill.ts';

export interface RemapRequest {
  fs: StageFs;
  jobDir: string;
  chunk: number;
  /** The chunk's current run files, relative to the job directory. */
  files: string[];
  /** idMap[oldId] = newId. */
  idMap: Uint32Array;
  orderMax: number;
  partitions: number;
  idMax: number;
  counterBytesMax: number;
  /** First spill number of the new runs, so their names differ from the old ones. */
  spillBase: number;
}

export async function remapChunkRuns(request: RemapRequest): Promise<RunRecord[]> {
  const set = new CounterSet(request.orderMax, request.counterBytesMax);
  const runs: RunRecord[] = [];
  let spill = request.spillBase;
  const spillAll = async (): Promise<void> => {
    const seq = spill++;
    runs.push(...await spillCounterSet(set, {
      fs: request.fs, jobDir: request.jobDir, partitions: request.partitions, idMax: request.idMax,
      chunk: request.chunk, spill: seq,
      fileFor: (order, partition) => runFilePath(order, partition, request.chunk, seq),
    }));
  };
  const { idMap } = request;
  for (const file of request.files) {
    const reader = await RunReader.open(path.join(request.jobDir, file));
    const order = reader.order;
    const mapped = new Uint32Array(order);
    for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch()) {
      for (let j = 0; j < batch.recordCount; j++) {
        for (let k = 0; k < order; k++) mapped[k] = idMap[batch.keys[j * order + k]];
        const count = batch.counts[j];
        if (set.addNgram(mapped, 0, order, count)) continue;
        await spillAll();
        if (!set.addNgram(mapped, 0, order, count)) {
          throw new QuernError('limit', `re-keying the runs of chunk ${request.chunk} does not fit ${request.counterBytesMax} bytes per worker; raise --memory`);
        }
      }
    }
  }
  if (set.size > 0) await spillAll();
  return runs;
}
