/**
 * Continuation counts of order m ≥ 2 computed inside one partition, without run files.
 *
 * The partition of an n-gram is that of its context's last word (count/hash.ts), so the suffix
 * w2…w(m+1) of every (m+1)-gram of partition P is an m-gram of P, and every m-gram x of P gets its
 * N1+(• x) from P's (m+1)-grams alone. With P's order-m keys in memory (sorted, as the store gives
 * them), each (m+1)-gram's suffix is found by a search among the rows that start with its first
 * word (an index by first id points at them) and its row's count raised by one; the counts
 * then come out in key order, ready for the store — no hashing, no sorting, no runs.
 *
 * Memory: `localContinuationBytes(rows, m)` for the m-grams' ids and counts. The stage chooses this
 * path per partition and order when that fits the worker's budget (continuation-stage.ts), and emits
 * runs otherwise (continuation.ts).
 */
import { assert, QuernError } from '../errors.ts';
import type { BatchSource } from '../count/run-merge.ts';
import type { RunBatch } from '../count/run-file.ts';
import type { PartitionStore } from './store.ts';

/** Records per batch handed to the merge. */
const LOCAL_BATCH_RECORDS = 8192;

/** Bytes the local computation of order `order` holds for `rows` n-grams of that order. */
export function localContinuationBytes(rows: number, order: number): number {
  return rows * (4 * order + 4);
}

/** Compares the suffix of `keys` row `row` (order+1 ids, from its second id) with table row `t`. */
function compareSuffix(keys: Uint32Array, base: number, table: Uint32Array, t: number, order: number): number {
  const tb = t * order;
  for (let k = 0; k < order; k++) {
    const a = keys[base + k];
    const b = table[tb + k];
    if (a !== b) return a < b ? -1 : 1;
  }
  return 0;
}

/**
 * Reads partition `store`'s n-grams of `order` (rows of them, as its merge tally says) and counts,
 * for each, the (order+1)-grams of the partition ending with it. Returns a source of the rows with a
 * non-zero count, in key order.
 */
export function localContinuationSource(store: PartitionStore, order: number, rows: number): BatchSource {
  assert(order >= 2, 'local continuation counts start at order 2');
  const table = new Uint32Array(rows * order);
  let filled = 0;
  for (const block of store.blocks(order)) {
    if (filled + block.recordCount > rows) throw new QuernError('corrupt', `${store.dir}: more n-grams of order ${order} than its merge recorded (${rows})`);
    table.set(block.keys.subarray(0, block.recordCount * order), filled * order);
    filled += block.recordCount;
  }
  if (filled !== rows) throw new QuernError('corrupt', `${store.dir}: ${filled} n-grams of order ${order}, its merge recorded ${rows}`);

  // Rows of the table by first id: a suffix starting with word w can only be among rows
  // [firstStart[w], firstStart[w+1]).
  let idEnd = 0;
  for (let r = 0; r < rows; r++) if (table[r * order] >= idEnd) idEnd = table[r * order] + 1;
  const firstStart = new Uint32Array(idEnd + 1);
  for (let r = 0; r < rows; r++) firstStart[table[r * order] + 1]++;
  for (let w = 0; w < idEnd; w++) firstStart[w + 1] += firstStart[w];

  const counts = new Uint32Array(rows);
  const higher = order + 1;
  let previousFirst = -1;
  let previousRow = -1;
  for (const block of store.blocks(higher)) {
    const keys = block.keys;
    for (let j = 0; j < block.recordCount; j++) {
      const base = j * higher;
      const w = keys[base + 1];
      let lo = w < idEnd ? firstStart[w] : rows;
      let hi = w < idEnd ? firstStart[w + 1] : rows;
      // Rows sharing their first id come with ascending suffixes: search after the last one found.
      if (keys[base] === previousFirst && previousRow >= lo) lo = previousRow + 1;
      while (lo < hi) {
        const mid = (lo + hi) >>> 1;
        if (compareSuffix(keys, base + 1, table, mid, order) > 0) lo = mid + 1;
        else hi = mid;
      }
      if (lo === rows || compareSuffix(keys, base + 1, table, lo, order) !== 0) {
        throw new QuernError('corrupt', `${store.dir}: an n-gram of order ${higher} has no suffix among the n-grams of order ${order} (the store is damaged, or was not partitioned by this version)`);
      }
      counts[lo]++;
      previousFirst = keys[base];
      previousRow = lo;
    }
  }

  let next = 0;
  return {
    name: `${store.dir} (order ${higher} suffixes)`,
    order,
    async nextBatch(): Promise<RunBatch | null> {
      const outKeys = new Uint32Array(LOCAL_BATCH_RECORDS * order);
      const outCounts = new Float64Array(LOCAL_BATCH_RECORDS);
      let size = 0;
      while (next < rows && size < LOCAL_BATCH_RECORDS) {
        const c = counts[next];
        if (c > 0) {
          for (let k = 0, from = next * order, to = size * order; k < order; k++) outKeys[to + k] = table[from + k];
          outCounts[size++] = c;
        }
        next++;
      }
      if (size === 0) return null;
      return { keys: outKeys.subarray(0, size * order), counts: outCounts.subarray(0, size), recordCount: size };
    },
    async close(): Promise<void> {
      next = rows;
    },
  };
}
