/**
 * Groups the chunks of the count pass into units of work. A worker spills its counters at the end
 * of every unit, so that a finished unit is wholly in durable run files; a unit per chunk would make
 * a corpus of many small files write a run file per order and partition for each file (200 shards
 * of 1 MB: 9,600 files at order 3) and the merge read them all. Consecutive chunks are grouped up to
 * a byte target instead; a chunk larger than the target is a group of its own.
 *
 * The target is each worker's share of the input (one group per worker: every group ends with a
 * spill, and each spill is one more run per order and partition for the merge, holding one more copy
 * of every frequent n-gram), but no more than fits a worker's counter budget (a group that overflows
 * it spills in the middle after growing its counters by doublings, which costs more than the runs
 * it saves) and at most COUNT_GROUP_BYTES_MAX. Grouping changes which run files hold an n-gram,
 * never its count: the merged store is the same whatever the groups.
 */
import { assert } from '../errors.ts';
import { COUNT_GROUP_BYTES_MAX, COUNT_GROUP_MEMORY_HEADROOM, COUNTER_FILTER_BITS_PER_ENTRY } from '../limits.ts';
import type { Chunk } from '../corpus/types.ts';

/** Groups per worker the target aims at. */
export const GROUPS_PER_WORKER_MIN = 1;

/**
 * Counter bytes one predicted position (a token or a sentence end) of the input may take when
 * counting to `order`, at most: a log row (count and ids) and its filter bits at every order ≥ 2
 * (most n-grams of a chunk are new to it), the spill sort's row and partition number for the
 * highest order, and COUNT_GROUP_MEMORY_HEADROOM for the tables of repeated n-grams.
 */
export function counterBytesPerPosition(order: number): number {
  assert(Number.isInteger(order) && order >= 1, `order ${order} must be a positive integer`);
  let bytes = 4 * (order + 1) + 2;
  for (let n = 2; n <= order; n++) bytes += 4 * (n + 1) + COUNTER_FILTER_BITS_PER_ENTRY / 8;
  return COUNT_GROUP_MEMORY_HEADROOM * bytes;
}

/**
 * The byte target of a group: each worker's share of the input, at most COUNT_GROUP_BYTES_MAX and at
 * most the input whose counters are expected to fit `counterBytesMax` (with `positionsPerByte`
 * predicted positions per input byte, as the vocabulary pass found; 0 when unknown, which leaves
 * the budget out). A chunk larger than the target is a group of its own.
 */
export function groupBytesTarget(totalBytes: number, workers: number, order: number, counterBytesMax: number, positionsPerByte: number): number {
  assert(Number.isInteger(workers) && workers >= 1, `workers ${workers} must be a positive integer`);
  assert(counterBytesMax >= 1 && positionsPerByte >= 0, `budget ${counterBytesMax} and positions per byte ${positionsPerByte} must be positive`);
  const share = Math.ceil(totalBytes / (GROUPS_PER_WORKER_MIN * workers));
  const fits = positionsPerByte > 0 ? Math.floor(counterBytesMax / (positionsPerByte * counterBytesPerPosition(order))) : Infinity;
  return Math.max(1, Math.min(COUNT_GROUP_BYTES_MAX, share, fits));
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
