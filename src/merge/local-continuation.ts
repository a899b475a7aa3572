/**
 * Continuation counts of order m ≥ 2 computed inside one partition, without run files.
 *
 * The partition of an n-gram is that of its context's last word (count/hash.ts), so the suffix
 * w2…w(m+1) of every (m+1)-gram of partition P is an m-gram of P, and every m-gram x of P gets its
 * N1+(• x) from P's (m+1)-grams alone: their suffixes, sorted in memory (an LSD radix sort, whose
 * passes read and write in order) and counted where equal, come out in key order with their
 * counts, ready for the store — no hashing, no run files, no merge. (Finding each suffix among
 * P's m-grams by binary search or through a hash index was 2–3.5× slower on the 200 MB benchmark
 * job: the tables outgrow the caches, and every lookup waits on memory; npm run bench:continuation.)
 *
 * Memory: `localContinuationBytes(higherRows, m)`. The stage
 * chooses this path per partition and order when that fits the worker's budget
 * (continuation-stage.ts), and emits runs otherwise (continuation.ts).
 */
import { assert } from '../errors.ts';
import { MERGE_BATCH_RECORDS } from '../limits.ts';
import type { BatchSource } from '../count/run-merge.ts';
import { idRadixPasses, scatterRows } from '../count/radix.ts';
import type { RunBatch } from '../count/run-file.ts';
import type { PartitionStore } from './store.ts';
import { WasmSorter } from '../count/sort-wasm.ts';
import type { WasmEngine } from '../wasm-module.ts';

/** Records per batch handed to the merge. */
const LOCAL_BATCH_RECORDS = MERGE_BATCH_RECORDS;

/** Bytes the local computation of order `order` holds for `higherRows` n-grams of order+1: their
 *  suffixes twice (the radix sort's source and target) and a count per suffix. */
export function localContinuationBytes(higherRows: number, order: number): number {
  return higherRows * (8 * order + 4);
}

/**
 * Counts, for partition `store`, the (order+1)-grams ending with each n-gram of `order`: their
 * suffixes sorted and counted where equal (`higherRows` = the partition's n-grams of order+1, as
 * its merge recorded). Returns a source of the n-grams with their counts, in key order.
 */
export function localContinuationSource(store: PartitionStore, order: number, higherRows: number): BatchSource {
  assert(order >= 2, 'local continuation counts start at order 2');
  // Each block is decoded into the same arrays: the suffixes are copied out of it before the next.
  const { keys, counts, size } = suffixCountsBySort(store.blocks(order + 1, undefined, 'raw', true), higherRows, order);
  let next = 0;
  return {
    name: `${store.dir} (order ${order + 1} suffixes)`,
    order,
    madeInOrder: true,
    async nextBatch(): Promise<RunBatch | null> {
      if (next === size) return null;
      const end = Math.min(size, next + LOCAL_BATCH_RECORDS);
      const batch = { keys: keys.slice(next * order, end * order), counts: Float64Array.from(counts.subarray(next, end)), recordCount: end - next };
      next = end;
      return batch;
    },
    async close(): Promise<void> {
      next = size;
    },
  };
}

/** Widest radix digit of `sortRows`: 2^11 counters stay in the first-level cache. */
const SORT_DIGIT_BITS = 11;

/**
 * Sorts `n` rows of `width` ids (row-major in `rows`) lexicographically by an LSD radix sort, last
 * id first; `scratch` holds as many ids. Returns whichever of the two arrays holds the result.
 * Every pass reads and writes memory in order (one write stream per digit value), which keeps it
 * fast on tables far larger than the caches. `idBitsAll`, the OR of every id (computed when not
 * given), sets the digits: as few passes per id as ids of that many bits need, with digits of at
 * most SORT_DIGIT_BITS bits, balanced; the histograms of all passes come from one read of the rows,
 * and a pass whose digit is the same in every row is skipped.
 */
export function sortRows(rows: Uint32Array, scratch: Uint32Array, n: number, width: number, idBitsAll?: number): Uint32Array {
  if (idBitsAll === undefined) {
    idBitsAll = 0;
    for (let j = 0; j < n * width; j++) idBitsAll |= rows[j];
  }
  const { passesPerId, digitBits } = rowPasses(width, idBitsAll);
  const buckets = 1 << digitBits;
  const mask = buckets - 1;
  // histograms[((k · passesPerId) + q) · buckets + d]: rows whose id k has digit d in pass q.
  const histograms = new Uint32Array(width * passesPerId * buckets);
  const last = n * width;
  for (let k = 0; k < width; k++) {
    for (let q = 0; q < passesPerId; q++) {
      const at = (k * passesPerId + q) * buckets;
      const shift = q * digitBits;
      for (let j = k; j < last; j += width) histograms[at + ((rows[j] >>> shift) & mask)]++;
    }
  }
  let src = rows;
  let dst = scratch;
  for (let k = width - 1; k >= 0; k--) {
    for (let q = 0; q < passesPerId; q++) {
      const at = (k * passesPerId + q) * buckets;
      const shift = q * digitBits;
      let sum = 0;
      let skip = false;
      for (let d = 0; d < buckets; d++) {
        const c = histograms[at + d];
        if (c === n) {
          skip = true; // the same digit in every row: order unchanged
          break;
        }
        histograms[at + d] = sum;
        sum += c;
      }
      if (skip) continue;
      scatterRows(src, dst, 0, n, width, k, shift, mask, histograms.subarray(at, at + buckets));
      const t = src;
      src = dst;
      dst = t;
    }
  }
  return src;
}

/** The passes `sortRows` makes for rows of `width` ids whose bits, ORed, are `idBitsAll`. */
function rowPasses(width: number, idBitsAll: number): ReturnType<typeof idRadixPasses> {
  return idRadixPasses(Math.max(1, 32 - Math.clz32(idBitsAll)), 0, width, SORT_DIGIT_BITS);
}

/**
 * The suffixes (last `order` ids) of `n` rows of order+1 ids, sorted, with how often each occurs:
 * N1+(• x) for every x, since the rows are distinct. Holds 2 × n × order ids: in a WebAssembly
 * memory, where its passes sort them (sort-wasm.ts: the same passes as `sortRows`), unless `engine`
 * is 'js' or no such memory can be had.
 */
export function suffixCountsBySort(
  higher: Iterable<{ keys: Uint32Array; recordCount: number }>, n: number, order: number, engine: WasmEngine = 'auto',
): { keys: Uint32Array; counts: Uint32Array; size: number } {
  const sorter = engine === 'js' ? undefined : WasmSorter.create(2 * n * order + n);
  if (sorter instanceof WasmSorter) return suffixCountsInWasm(sorter, higher, n, order);
  const suffixes = new Uint32Array(n * order);
  const stride = order + 1;
  let filled = 0;
  let idBitsAll = 0;
  for (const block of higher) {
    assert(filled + block.recordCount <= n, `at most ${n} rows of order ${stride}`);
    const keys = block.keys;
    for (let j = 0; j < block.recordCount; j++) {
      const from = j * stride + 1;
      const to = (filled + j) * order;
      for (let k = 0; k < order; k++) {
        const id = keys[from + k];
        idBitsAll |= id;
        suffixes[to + k] = id;
      }
    }
    filled += block.recordCount;
  }
  assert(filled === n, `${n} rows of order ${stride} expected, ${filled} read`);
  const sorted = sortRows(suffixes, new Uint32Array(n * order), n, order, idBitsAll);
  // Equal suffixes are adjacent: compact them in place, with their multiplicity.
  const counts = new Uint32Array(n);
  let size = 0;
  for (let r = 0; r < n; r++) {
    const from = r * order;
    if (size > 0) {
      const last = (size - 1) * order;
      let k = 0;
      while (k < order && sorted[last + k] === sorted[from + k]) k++;
      if (k === order) {
        counts[size - 1]++;
        continue;
      }
    }
    const to = size * order;
    for (let k = 0; k < order; k++) sorted[to + k] = sorted[from + k];
    counts[size++] = 1;
  }
  return { keys: sorted, counts, size };
}

/**
 * `suffixCountsBySort` in one WebAssembly memory of 2 × n × order + n words: the blocks' rows
 * copied in and cut to their suffixes there (`takeSuffixes`), sorted by the same passes as
 * `sortRows`, and counted where equal (`countEqual`), the counts after both halves.
 */
function suffixCountsInWasm(
  sorter: WasmSorter, higher: Iterable<{ keys: Uint32Array; recordCount: number }>, n: number, order: number,
): { keys: Uint32Array; counts: Uint32Array; size: number } {
  let filled = 0;
  let idBitsAll = 0;
  for (const block of higher) {
    assert(filled + block.recordCount <= n, `at most ${n} rows of order ${order + 1}`);
    // A block's rows are order+1 ids wide: copied in at the next suffix's place, they reach at most
    // n words into the sort's other half, which is free until the sort.
    idBitsAll |= sorter.takeSuffixes(block.keys, block.recordCount, order, filled * order);
    filled += block.recordCount;
  }
  assert(filled === n, `${n} rows of order ${order + 1} expected, ${filled} read`);
  return countSortedSuffixes(sorter, n, order, idBitsAll);
}

/**
 * The `n` suffixes of `order` ids at word 0 of `sorter` (whose ids, ORed, are `idBitsAll`; at least
 * 2 × n × order + n words) sorted by `sortRows`' passes and counted where equal, the counts after
 * both halves: each distinct suffix once, in order, with how often it occurs.
 */
export function countSortedSuffixes(sorter: WasmSorter, n: number, order: number, idBitsAll: number): { keys: Uint32Array; counts: Uint32Array; size: number } {
  const at = sorter.sortKeys(0, n * order, n, order, rowPasses(order, idBitsAll >>> 0).passes) ? n * order : 0;
  const countsAt = 2 * n * order;
  const size = sorter.countEqual(at, n, order, countsAt);
  return { keys: sorter.words.subarray(at, at + size * order), counts: sorter.words.subarray(countsAt, countsAt + size), size };
}
