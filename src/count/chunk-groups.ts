/**
 * Groups the chunks of the count pass into units of work. A worker spills its counters at the end
 * of every unit, so that a finished unit is wholly in durable run files; a unit per chunk would make
 * a corpus of many small files write a run file per order and partition for each file (200 shards
 * of 1 MB: 9,600 files at order 3) and the merge read them all. Consecutive chunks are grouped up to
 * a byte target instead; a chunk larger than the target is a group of its own.
 *
 * The target is the planner's chunk size, but small enough that every worker gets several groups
 * (the last groups to finish decide the stage's end). Grouping changes which run files hold an
 * n-gram, never its count: the merged store is the same whatever the groups.
 */
import { assert } from '../errors.ts';
import type { Chunk } from '../corpus/types.ts';

/** Groups per worker the target aims at, so that no worker idles long at the end of the pass. */
export const GROUPS_PER_WORKER_MIN = 4;

/** The byte target of a group: the chunk size, or less when that leaves a worker few groups. */
export function groupBytesTarget(totalBytes: number, workers: number, chunkBytes: number): number {
  assert(Number.isInteger(workers) && workers >= 1, `workers ${workers} must be a positive integer`);
  assert(chunkBytes >= 1, `chunk bytes ${chunkBytes} must be positive`);
  return Math.max(1, Math.min(chunkBytes, Math.ceil(totalBytes / (GROUPS_PER_WORKER_MIN * workers))));
}

/** Splits `chunks` (in plan order) into runs of consecutive chunks of at most `targetBytes` bytes
 *  together, or of one chunk larger than that. */
export function groupChunks(chunks: readonly Chunk[], targetBytes: number): Chunk[][] {
  const groups: Chunk[][] = [];
  let group: Chunk[] = [];
  let bytes = 0;
  for (const chunk of chunks) {
    const size = chunk.byteEnd - chunk.byteStart;
    if (group.length > 0 && bytes + size > targetBytes) {
      groups.push(group);
      group = [];
      bytes = 0;
    }
    group.push(chunk);
    bytes += size;
  }
  if (group.length > 0) groups.push(group);
  return groups;
}
