/**
 * Bounding how many run files one merge reads at once (MERGE_FAN_IN_MAX): each open run holds a file
 * descriptor and its buffers, so a merge of every run of a corpus of thousands of chunks would run
 * out of either. Above the bound, runs are first merged in groups into intermediate runs.
 */
import * as path from 'node:path';
import { assert } from '../errors.ts';
import type { StageFs } from '../job/fsio.ts';
import { RunReader, writeRunFileFrom } from './run-file.ts';
import { mergeRuns, type BatchSource } from './run-merge.ts';

export interface FewerRunsRequest {
  /** The run files (absolute paths), all of `order`. */
  files: readonly string[];
  order: number;
  /** How many the caller will read at once (≤ fanIn). */
  slots: number;
  /** How many one intermediate merge reads at once (≥ 2). */
  fanIn: number;
  /** Where the intermediate runs go (created if needed; the caller removes it). */
  scratchDir: string;
  /** Written into the intermediates' headers (provenance only). */
  partition: number;
  fs: StageFs;
}

/**
 * The run files, at most `slots` of them: while there are more, the first `fanIn` (or as few as
 * bring the count down to `slots`) are merged into an intermediate run in `scratchDir`, which joins
 * the end of the list. Equal n-grams are added up there as in any merge, so merging the returned
 * files gives the same records as merging the given ones. Returns absolute paths.
 */
export async function fewerRuns(request: FewerRunsRequest): Promise<string[]> {
  const { order, slots, fanIn, scratchDir, partition, fs } = request;
  assert(fanIn >= 2 && slots >= 1 && slots <= fanIn, `fan-in ${fanIn} and slots ${slots}`);
  const queue = [...request.files];
  if (queue.length <= slots) return queue;
  await fs.mkdir(scratchDir);
  for (let made = 0; queue.length > slots; made++) {
    const group = queue.splice(0, Math.min(fanIn, queue.length - slots + 1));
    const target = path.join(scratchDir, `m${String(made).padStart(6, '0')}.run`);
    const readers: BatchSource[] = await RunReader.openAll(group, { reuseBatches: true });
    await writeRunFileFrom(fs, target, { order, partition, chunk: made, spill: 0 }, mergeRuns(readers, order));
    queue.push(target);
  }
  return queue;
}
