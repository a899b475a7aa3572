/**
 * Orders a counter's entries for a spill: by partition, then lexicographically by word ids.
 *
 * The rows (count and ids) are moved, not a permutation of slot numbers, so every pass reads and
 * writes memory in order instead of gathering rows from all over the table:
 *  1. gathering: every row — the log's and the table's (counter.ts) — into one array, densely, each
 *     row's partition noted (two bytes per entry, charged with the scratch: `sortScratchBytes`);
 *  2. a counting pass by partition moves them into the scratch;
 *  3. each partition alone (a few MB: it stays in cache) goes through an LSD radix sort on its ids,
 *     last id first, as many passes per id as the largest id present needs, digits of at most
 *     RADIX_BITS_MAX bits; a pass whose digit is the same for every row is skipped. The histograms
 *     of all the passes come from one read of the rows before the first pass;
 *  4. the sorted rows are split into the ids and the counts the run-file writer takes; an n-gram
 *     with a row in both the log and the table becomes one record with the sum of the counts.
 * Rows all of count 1 with no table entry (an append-only counter's log) take steps 2–4 as packed
 * keys, without their counts (`packedOrder`).
 * The gathering array and the scratch take turns as source and target. The counter's contents are
 * destroyed: the owner must `clear()` it afterwards (spillCounterSet does). The counter keeps the
 * share of distinct n-grams among the entries added (`distinctShare`), for its owner to choose its
 * mode by (CounterSet.clear).
 */
import { assert } from '../errors.ts';
import { PARTITION_TABLE_IDS_MAX } from '../limits.ts';
import { partitionKeyIndex, partitionOf, partitionOfKey } from './hash.ts';
import { idRadixPasses, scatterRows, type RadixPass } from './radix.ts';
import type { NgramCounter } from './counter.ts';
import type { WasmSorter } from './sort-wasm.ts';

/** Widest radix digit: 2^11 histogram buckets stay in the first-level cache. */
const RADIX_BITS_MAX = 11;

export interface SpillOrder {
  /** N-grams (distinct, after equal rows were added up) of partition p. */
  recordsOf(partition: number): number;
  /** Partition p's n-grams, sorted: `order` ids each, row-major. */
  keysOf(partition: number): Uint32Array;
  /** Partition p's counts, in the same order. */
  countsOf(partition: number): Uint32Array;
}

/**
 * Sorts the entries of `counter` for `partitions` partitions. `idMax` bounds every id (exclusive);
 * `scratch` holds at least size × (order + 1) words (CounterSet.sortScratch); when it is `sorter`'s
 * memory, packed keys are sorted there by the WebAssembly passes (sort-wasm.ts).
 */
export function spillOrder(counter: NgramCounter, partitions: number, idMax: number, scratch: Uint32Array, sorter?: WasmSorter): SpillOrder {
  const order = counter.order;
  const stride = counter.stride;
  const m = counter.size;
  assert(scratch.length >= m * stride, `scratch of ${scratch.length} words for ${m} rows of ${stride}`);
  assert(Number.isInteger(partitions) && partitions >= 1 && partitions <= 0xffff, `partitions ${partitions} must be in 1..65535`);

  if (counter.dense) return denseOrder(counter, partitions, scratch);

  // 1. Gathering: every row into `front`, densely — the log's rows stay where they are and the
  // table's follow them (the log has room: counter.ts's invariant); an order-1 counter's table is
  // compacted in place. Each row's partition is noted, and the ids' bits, ORed, give the digits
  // the sort needs.
  const front = counter.logged ? counter.log : counter.table;
  const partitionOfRow = new Uint16Array(m);
  const partitionStarts = new Uint32Array(partitions + 1);
  let rows = 0;
  let idBitsAll = 0;
  let countsAllOne = true;
  // The partition depends on one id of the row (partitionOf): looked up in a table of every id's
  // when the vocabulary is small enough for one.
  const partitionOfId = partitionTable(idMax, partitions);
  const keyWord = 1 + partitionKeyIndex(order);
  for (; rows < counter.logCount; rows++) {
    const base = rows * stride;
    for (let w = 1; w < stride; w++) idBitsAll |= front[base + w];
    if (front[base] !== 1) countsAllOne = false;
    const partition = partitionOfId === undefined ? partitionOf(front, base + 1, order, partitions) : tablePartition(partitionOfId, front[base + keyWord]);
    partitionOfRow[rows] = partition;
    partitionStarts[partition + 1]++;
  }
  const table = counter.table;
  for (let from = 0; from < table.length; from += stride) {
    if (table[from] === 0) continue;
    const to = rows * stride;
    if (front !== table || from !== to) for (let w = 0; w < stride; w++) front[to + w] = table[from + w];
    for (let w = 1; w < stride; w++) idBitsAll |= front[to + w];
    const partition = partitionOfId === undefined ? partitionOf(front, to + 1, order, partitions) : tablePartition(partitionOfId, front[to + keyWord]);
    partitionOfRow[rows++] = partition;
    partitionStarts[partition + 1]++;
  }
  assert(rows === m, `counter size ${m} disagrees with the rows found, ${rows}`);
  const idBits = Math.max(1, 32 - Math.clz32(idBitsAll));
  assert(idMax > 0 && (idBitsAll >>> 0) < 2 ** Math.max(1, 32 - Math.clz32(idMax)), `ids within the bound idMax = ${idMax}`);

  for (let p = 0; p < partitions; p++) partitionStarts[p + 1] += partitionStarts[p];
  // Rows that are all of count 1 and hold no table entry (an append-only counter's log) are
  // sorted as packed keys, without their counts (packedOrder); the others as rows, below.
  const packed = counter.logged && counter.tableSize === 0 && countsAllOne && order >= 2;
  const inScratch = sorter?.words === scratch ? sorter : undefined;
  const { records, outputs } = packed
    ? packedOrder(front, scratch, m, order, idBits, partitions, partitionOfRow, partitionStarts, inScratch)
    : rowOrder(front, scratch, m, order, idBits, partitions, partitionOfRow, partitionStarts, counter.logged, inScratch);
  noteDistinctShare(counter, records);
  return {
    recordsOf: (p) => records[p],
    keysOf: (p) => outputs[p].subarray(partitionStarts[p] * stride, partitionStarts[p] * stride + records[p] * order),
    countsOf: (p) => {
      const countsAt = partitionStarts[p] * stride + (partitionStarts[p + 1] - partitionStarts[p]) * order;
      return outputs[p].subarray(countsAt, countsAt + records[p]);
    },
  };
}

/** The rows of the largest partition. */
function largestPartition(partitionStarts: Uint32Array, partitions: number): number {
  let largest = 0;
  for (let p = 0; p < partitions; p++) largest = Math.max(largest, partitionStarts[p + 1] - partitionStarts[p]);
  return largest;
}

/** Steps 2–4's result: the records per partition, and the array (front or scratch) each
 *  partition's output is in, from word partitionStarts[p]·(order + 1). */
interface RowOrder {
  records: Uint32Array;
  outputs: Uint32Array[];
}

/**
 * Steps 2–4 of the file's comment for rows with their counts (rows 0..m−1 of `front`). With
 * `sorter` (whose memory `scratch` is), each partition's rows are sorted by the WebAssembly passes,
 * between their place in the scratch and the scratch's words after all the rows, when the largest
 * partition's fit there (else by the JavaScript passes, as without `sorter`); the output goes to
 * `front` then.
 */
function rowOrder(
  front: Uint32Array, scratch: Uint32Array, m: number, order: number, idBits: number, partitions: number,
  partitionOfRow: Uint16Array, partitionStarts: Uint32Array, merge: boolean, sorter?: WasmSorter,
): RowOrder {
  const stride = order + 1;
  const wasm = sorter !== undefined && stride * (m + largestPartition(partitionStarts, partitions)) <= scratch.length ? sorter : undefined;
  // 2. By partition, front → scratch.
  const next = partitionStarts.slice(0, partitions);
  for (let j = 0; j < m; j++) {
    const from = j * stride;
    const to = next[partitionOfRow[j]]++ * stride;
    for (let w = 0; w < stride; w++) scratch[to + w] = front[from + w];
  }

  // 3. Radix passes per partition; 4. rows into ids and counts (into the other buffer), equal
  // n-grams (a log row and a table row) added up.
  // The ids are words 1..order of a row (word 0 is its count).
  const { passes: wasmPasses, passesPerId, digitBits } = idRadixPasses(idBits, 1, order, RADIX_BITS_MAX);
  const buckets = 1 << digitBits;
  // One histogram per pass, all filled by one read of the partition's rows (digitHistograms): a
  // pass then reads its rows once, to move them, instead of twice.
  const histograms = new Uint32Array(order * passesPerId * buckets);
  const outputs: Uint32Array[] = [];
  const records = new Uint32Array(partitions);
  for (let p = 0; p < partitions; p++) {
    const begin = partitionStarts[p];
    const end = partitionStarts[p + 1];
    if (wasm !== undefined) {
      // The sorted rows, wherever they end, seen as an array in which row `begin` is at begin·stride.
      const at = wasm.sortKeys(begin * stride, m * stride, end - begin, stride, wasmPasses) ? m * stride : begin * stride;
      records[p] = splitRows(scratch.subarray(at - begin * stride), front, begin, end, stride, order, merge);
      outputs.push(front);
      continue;
    }
    let source = scratch;
    let target = front;
    digitHistograms(source, begin, end, stride, order, passesPerId, digitBits, histograms);
    for (let k = order; k >= 1; k--) {
      for (let pass = 0; pass < passesPerId; pass++) {
        const histogram = histograms.subarray(((k - 1) * passesPerId + pass) * buckets, ((k - 1) * passesPerId + pass + 1) * buckets);
        if (radixPass(source, target, begin, end, stride, k, pass * digitBits, buckets - 1, histogram)) [source, target] = [target, source];
      }
    }
    records[p] = splitRows(source, target, begin, end, stride, order, merge);
    outputs.push(target);
  }
  return { records, outputs };
}
/**
 * The sort of rows whose counts are all 1 (rows 0..m−1 of `front`, count then `order` ids of
 * `idBits` bits), each row packed into K = ⌈order·idBits / 32⌉ words: its ids as one bit string,
 * the first id most significant, right-aligned in the words (the last word holds the low 32 bits).
 * The keys' numeric order is then the rows' order, and the LSD radix sort moves K words per row
 * instead of order + 1, in one pass per digit of the bits in use (at order 5 with 18-bit ids, 3
 * words and 9 passes against 6 words and 10). Partition p's keys and then its output lie from word
 * partitionStarts[p]·(order + 1) of either array, as in spillOrder; the output (ids row-major, then
 * the counts of the equal keys, added up) ends in `front`. Returns the records per partition.
 * With `sorter` (whose memory `scratch` is), the keys lie packed from word 0 of the scratch instead,
 * partition after partition, and the WebAssembly passes sort each partition's keys between there
 * and the scratch's words after all the keys, when the largest partition's fit there (else the
 * JavaScript passes sort them as without `sorter`).
 */
/** Rows packedOrder copies into the WebAssembly memory at a time to pack them there: 1.5 MiB at
 *  order 5, within the second-level cache. */
const PACK_STAGE_ROWS = 1 << 16;

function packedOrder(
  front: Uint32Array, scratch: Uint32Array, m: number, order: number, idBits: number, partitions: number,
  partitionOfRow: Uint16Array, partitionStarts: Uint32Array, sorter?: WasmSorter,
): RowOrder {
  const stride = order + 1;
  const keyBits = order * idBits;
  const K = Math.ceil(keyBits / 32);
  // Id i of a row: its low bit at bit (order − 1 − i)·idBits of the key, in key word idWord[i] at
  // idShift[i], its high bits in the word before when they do not fit (idSplit[i]).
  const idWord = new Int32Array(order);
  const idShift = new Int32Array(order);
  const idSplit = new Uint8Array(order);
  for (let i = 0; i < order; i++) {
    const low = (order - 1 - i) * idBits;
    idWord[i] = K - 1 - (low >>> 5);
    idShift[i] = low & 31;
    idSplit[i] = (low & 31) + idBits > 32 ? 1 : 0;
  }
  const largest = largestPartition(partitionStarts, partitions);
  const wasm = sorter !== undefined && K * (m + largest) <= scratch.length ? sorter : undefined;
  assert(wasm === undefined || scratch.buffer === wasm.words.buffer, 'the scratch is the sorter\'s memory');
  // Where partition p's keys lie in the scratch: packed one after the other for the WebAssembly
  // passes, else at partition p's rows.
  const keysAt = new Float64Array(partitions);
  for (let p = 0; p < partitions; p++) keysAt[p] = partitionStarts[p] * (wasm !== undefined ? K : stride);
  // 2. Packed, by partition, front → scratch.
  const placed = new Uint32Array(partitions);
  // In the module, through a stage in the sort's other half (free until the passes).
  const stageRows = wasm !== undefined && K <= 3 && idBits < 32 ? Math.min(m, PACK_STAGE_ROWS, Math.floor((scratch.length - K * m) / (stride + 1.5))) : 0;
  if (stageRows > 0) {
    const next = Uint32Array.from(keysAt);
    wasm!.packKeys3(front, m, order, idBits, K, partitionOfRow, next, K * m, stageRows);
    for (let p = 0; p < partitions; p++) assert(next[p] === keysAt[p] + K * (partitionStarts[p + 1] - partitionStarts[p]), `partition ${p}: every key packed`);
  } else if (K <= 3 && idBits < 32) {
    // The key built in three registers, id by id: (hi, mid, lo) ← (hi, mid, lo) · 2^idBits + id,
    // then its K low words written once.
    const up = 32 - idBits;
    for (let j = 0; j < m; j++) {
      const from = j * stride + 1;
      let hi = 0;
      let mid = 0;
      let lo = 0;
      for (let i = 0; i < order; i++) {
        hi = (hi << idBits) | (mid >>> up);
        mid = (mid << idBits) | (lo >>> up);
        lo = (lo << idBits) | front[from + i];
      }
      const p = partitionOfRow[j];
      const to = keysAt[p] + placed[p]++ * K;
      scratch[to + K - 1] = lo;
      if (K >= 2) scratch[to + K - 2] = mid;
      if (K === 3) scratch[to] = hi;
    }
  } else {
    for (let j = 0; j < m; j++) {
      const from = j * stride + 1;
      const p = partitionOfRow[j];
      const to = keysAt[p] + placed[p]++ * K;
      for (let w = 0; w < K; w++) scratch[to + w] = 0;
      for (let i = 0; i < order; i++) {
        const id = front[from + i];
        const word = to + idWord[i];
        const shift = idShift[i];
        scratch[word] |= id << shift;
        if (idSplit[i] !== 0) scratch[word - 1] |= id >>> (32 - shift);
      }
    }
  }
  // 3. The passes: each key word from the last, its bits in use in digits of at most RADIX_BITS_MAX.
  const passes: RadixPass[] = [];
  for (let w = K - 1; w >= 0; w--) {
    const bitsInUse = Math.min(32, keyBits - 32 * (K - 1 - w));
    const count = Math.ceil(bitsInUse / RADIX_BITS_MAX);
    const digitBits = Math.ceil(bitsInUse / count);
    for (let q = 0, shift = 0; q < count; q++, shift += digitBits) passes.push({ word: w, shift, bits: Math.min(digitBits, bitsInUse - shift) });
  }
  const histogram = new Uint32Array(1 << RADIX_BITS_MAX);
  const records = new Uint32Array(partitions);
  const idMask = idBits === 32 ? 0xffff_ffff : 2 ** idBits - 1;
  for (let p = 0; p < partitions; p++) {
    const base = partitionStarts[p] * stride;
    const n = partitionStarts[p + 1] - partitionStarts[p];
    let source = scratch.subarray(keysAt[p], keysAt[p] + n * K);
    // Where the sorted keys are in the scratch (the module's passes).
    let sortedAt = -1;
    if (wasm !== undefined) {
      sortedAt = wasm.sortKeys(keysAt[p], K * m, n, K, passes) ? K * m : keysAt[p];
      source = scratch.subarray(sortedAt, sortedAt + n * K);
    } else {
      let target = front.subarray(base, base + n * K);
      for (const pass of passes) {
        const mask = (1 << pass.bits) - 1;
        const digits = histogram.subarray(0, mask + 1);
        digits.fill(0);
        for (let at = pass.word; at < n * K; at += K) digits[(source[at] >>> pass.shift) & mask]++;
        if (radixPass(source, target, 0, n, K, pass.word, pass.shift, mask, digits)) [source, target] = [target, source];
      }
    }
    // 4. Into `front`: the ids of each distinct key row-major, then their counts; in the module
    // when the keys are there and the words after all keys and the largest partition's hold the
    // partition's rows.
    const unpackAt = K * (m + largest);
    if (wasm !== undefined && K <= 3 && idBits < 32 && unpackAt + n * stride <= scratch.length) {
      records[p] = wasm.unpackKeys3(sortedAt, n, K, order, idBits, unpackAt, front, base, base + n * order);
      continue;
    }
    if (source.buffer === front.buffer) {
      scratch.set(source, base);
      source = scratch.subarray(base, base + n * K);
    }
    const out = front;
    const countsAt = base + n * order;
    if (K <= 3 && idBits < 32) {
      records[p] = unpackKeys3(source, n, K, order, idBits, out, base, countsAt);
      continue;
    }
    let distinct = 0;
    for (let r = 0; r < n; r++) {
      const at = r * K;
      if (distinct > 0) {
        let w = 0;
        while (w < K && source[at + w] === source[at - K + w]) w++;
        if (w === K) {
          out[countsAt + distinct - 1]++;
          continue;
        }
      }
      const keyAt = base + distinct * order;
      for (let i = 0; i < order; i++) {
        const word = at + idWord[i];
        const shift = idShift[i];
        let id = source[word] >>> shift;
        if (idSplit[i] !== 0) id |= source[word - 1] << (32 - shift);
        out[keyAt + i] = (id & idMask) >>> 0;
      }
      out[countsAt + distinct] = 1;
      distinct++;
    }
    records[p] = distinct;
  }
  return { records, outputs: Array.from({ length: partitions }, () => front) };
}

/**
 * Step 4 of packedOrder for keys of at most 3 words and ids below 32 bits: the `n` sorted keys of
 * `source` → the ids of each distinct key row-major into `out` from `keysAt`, and how often it
 * occurs from `countsAt`; returns the distinct keys. A key is read into three registers and its ids
 * taken from the low end, idBits at a time.
 */
function unpackKeys3(source: Uint32Array, n: number, K: number, order: number, idBits: number, out: Uint32Array, keysAt: number, countsAt: number): number {
  const mask = 2 ** idBits - 1;
  const down = 32 - idBits;
  let distinct = 0;
  let lastHi = -1;
  let lastMid = -1;
  let lastLo = -1;
  for (let r = 0, at = 0; r < n; r++, at += K) {
    const lo = source[at + K - 1];
    const mid = K >= 2 ? source[at + K - 2] : 0;
    const hi = K === 3 ? source[at] : 0;
    if (distinct > 0 && lo === lastLo && mid === lastMid && hi === lastHi) {
      out[countsAt + distinct - 1]++;
      continue;
    }
    lastHi = hi;
    lastMid = mid;
    lastLo = lo;
    let h = hi;
    let m = mid;
    let l = lo;
    for (let i = keysAt + (distinct + 1) * order - 1, first = keysAt + distinct * order; i >= first; i--) {
      out[i] = (l & mask) >>> 0;
      l = (l >>> idBits) | (m << down);
      m = (m >>> idBits) | (h << down);
      h >>>= idBits;
    }
    out[countsAt + distinct] = 1;
    distinct++;
  }
  return distinct;
}

/** The last table `partitionTable` made, kept while its bound and partitions stay the same (a
 *  worker's spills all ask for one). */
let partitionTableCache: { idMax: number; partitions: number; table: Uint16Array } | undefined;

/**
 * partitionOf of every word id below `idMax` (the key id of an n-gram: its context's last word,
 * or a unigram's word), as a table: one load per row instead of a hash and a modulo. Undefined
 * when idMax is above PARTITION_TABLE_IDS_MAX.
 */
export function partitionTable(idMax: number, partitions: number): Uint16Array | undefined {
  if (idMax > PARTITION_TABLE_IDS_MAX) return undefined;
  const cached = partitionTableCache;
  if (cached !== undefined && cached.idMax === idMax && cached.partitions === partitions) return cached.table;
  assert(Number.isInteger(idMax) && idMax >= 1, `a partition table for ids below ${idMax}`);
  const table = new Uint16Array(idMax);
  for (let id = 0; id < idMax; id++) table[id] = partitionOfKey(id, partitions);
  partitionTableCache = { idMax, partitions, table };
  return table;
}

/** The partition of key id `key` from a partition table, which must cover it. */
function tablePartition(table: Uint16Array, key: number): number {
  if (!(key < table.length)) assert(false, `id ${key} within the partition table's bound ${table.length}`);
  return table[key];
}

/** Records on the counter the distinct n-grams per entry added since it was cleared. */
function noteDistinctShare(counter: NgramCounter, records: Uint32Array): void {
  let distinct = 0;
  for (const r of records) distinct += r;
  if (counter.added > 0) counter.distinctShare = distinct / counter.added;
}

/**
 * The spill order of a counter indexed by id: its ids are already in order, so one counting pass by
 * partition puts them, with their counts, straight into the layout the run-file writer takes.
 */
function denseOrder(counter: NgramCounter, partitions: number, scratch: Uint32Array): SpillOrder {
  const counts = counter.table;
  const m = counter.size;
  const partitionOfRow = new Uint16Array(m);
  const partitionStarts = new Uint32Array(partitions + 1);
  let rows = 0;
  for (let id = 0; id < counts.length; id++) {
    if (counts[id] === 0) continue;
    const partition = partitionOfKey(id, partitions);
    partitionOfRow[rows++] = partition;
    partitionStarts[partition + 1]++;
  }
  assert(rows === m, `counter size ${m} disagrees with the ids counted, ${rows}`);
  for (let p = 0; p < partitions; p++) partitionStarts[p + 1] += partitionStarts[p];
  // Partition p: its ids at scratch[2·begin ..), then its counts.
  const placed = new Uint32Array(partitions);
  rows = 0;
  for (let id = 0; id < counts.length; id++) {
    if (counts[id] === 0) continue;
    const p = partitionOfRow[rows++];
    const begin = partitionStarts[p];
    const size = partitionStarts[p + 1] - begin;
    const j = placed[p]++;
    scratch[2 * begin + j] = id;
    scratch[2 * begin + size + j] = counts[id];
  }
  const sizeOf = (p: number): number => partitionStarts[p + 1] - partitionStarts[p];
  return {
    recordsOf: sizeOf,
    keysOf: (p) => scratch.subarray(2 * partitionStarts[p], 2 * partitionStarts[p] + sizeOf(p)),
    countsOf: (p) => scratch.subarray(2 * partitionStarts[p] + sizeOf(p), 2 * partitionStarts[p + 1]),
  };
}

/**
 * The digit histograms of every radix pass over rows begin..end of `rows` (count, then `order`
 * ids): for id k (1-based word of the row) and pass q, the counts of the digit
 * (id >>> q·digitBits) & (2^digitBits − 1), at histograms[((k−1)·passesPerId + q) · 2^digitBits ..].
 * A pass only permutes rows, so the histograms hold for every pass whatever the order before it.
 */
function digitHistograms(
  rows: Uint32Array, begin: number, end: number, stride: number, order: number, passesPerId: number, digitBits: number, histograms: Uint32Array,
): void {
  histograms.fill(0);
  const mask = (1 << digitBits) - 1;
  const buckets = 1 << digitBits;
  const last = end * stride;
  if (passesPerId === 2) {
    // The usual case (ids of 12 to 22 bits), unrolled.
    for (let k = 1; k <= order; k++) {
      const low = (k - 1) * 2 * buckets;
      const high = low + buckets;
      for (let j = begin * stride + k; j < last; j += stride) {
        const id = rows[j];
        histograms[low + (id & mask)]++;
        histograms[high + ((id >>> digitBits) & mask)]++;
      }
    }
    return;
  }
  for (let k = 1; k <= order; k++) {
    for (let pass = 0; pass < passesPerId; pass++) {
      const at = ((k - 1) * passesPerId + pass) * buckets;
      const shift = pass * digitBits;
      for (let j = begin * stride + k; j < last; j += stride) histograms[at + ((rows[j] >>> shift) & mask)]++;
    }
  }
}

/**
 * One stable counting pass over rows begin..end of `source` by the digit (row[word] >>> shift) &
 * mask, into the same rows of `target`, given the digit's histogram over those rows (which it
 * turns into offsets). Returns false, moving nothing, when every row has the same digit (the order
 * would not change).
 */
function radixPass(
  source: Uint32Array, target: Uint32Array, begin: number, end: number, stride: number,
  word: number, shift: number, mask: number, histogram: Uint32Array,
): boolean {
  const rows = end - begin;
  let offset = begin;
  for (let b = 0; b <= mask; b++) {
    const n = histogram[b];
    if (n === rows) return false;
    histogram[b] = offset;
    offset += n;
  }
  scatterRows(source, target, begin, end, stride, word, shift, mask, histogram);
  return true;
}

/**
 * Rows begin..end of `rows` (count, ids), sorted, → in `target`'s same words: the ids row-major,
 * then (after room for every row's ids) the counts. With `merge`, equal adjacent n-grams become one
 * record with the sum of their counts. Returns the records written.
 */
function splitRows(rows: Uint32Array, target: Uint32Array, begin: number, end: number, stride: number, order: number, merge: boolean): number {
  const keysAt = begin * stride;
  const countsAt = keysAt + (end - begin) * order;
  let records = 0;
  for (let j = begin; j < end; j++) {
    const from = j * stride;
    if (merge && records > 0) {
      const previous = keysAt + (records - 1) * order;
      let k = 0;
      while (k < order && target[previous + k] === rows[from + 1 + k]) k++;
      if (k === order) {
        const sum = target[countsAt + records - 1] + rows[from];
        assert(sum <= 0xffff_ffff, 'counter overflow: spill before 2^32 occurrences');
        target[countsAt + records - 1] = sum;
        continue;
      }
    }
    target[countsAt + records] = rows[from];
    const keyAt = keysAt + records * order;
    for (let k = 0; k < order; k++) target[keyAt + k] = rows[from + 1 + k];
    records++;
  }
  return records;
}
