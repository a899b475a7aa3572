import { describe, expect, test } from 'vitest';
import { filterBitsFor, NgramCounter } from '../../src/count/counter.ts';
import { chargedBytes, counterBytes, CounterSet, slotsFor, sortScratchBytes, type CounterShape } from '../../src/count/counter-set.ts';
import { ngramHash, partitionOf } from '../../src/count/hash.ts';
import { partitionTable, spillOrder } from '../../src/count/spill-sort.ts';
import { COUNTER_FILTER_BITS_PER_ENTRY, COUNTER_LOG_ROWS_MIN, COUNTER_PRESIZE_SHRINK_FACTOR, COUNTER_SLOTS_MIN, PARTITION_TABLE_IDS_MAX } from '../../src/limits.ts';
import { seededRandom } from '../support/seeded.ts';

/** Every n-gram of a counter with its count (log and table rows of one n-gram added up), keyed by the ids joined with ','. */
function entries(counter: NgramCounter): Map<string, number> {
  const map = new Map<string, number>();
  for (const [key, count] of counter.entries()) map.set(key, (map.get(key) ?? 0) + count);
  return map;
}

/** Adds one n-gram, growing whatever is full (as CounterSet.reserve would). */
function addGrowing(counter: NgramCounter, ids: Uint32Array, start: number, increment = 1): void {
  const hash = ngramHash(ids, start, counter.order);
  while (!counter.add(ids, start, hash, increment)) {
    if (counter.tableFree === 0) counter.grow(ngramHash);
    if (counter.logFree === 0) counter.resizeLog(2 * counter.logCapacity);
  }
}

describe('NgramCounter', () => {
  test('counts like a Map, through growth, for orders 1..7 and filters from tiny to ample', () => {
    const random = seededRandom(7);
    for (let order = 1; order <= 7; order++) {
      for (const filterBits of [32, 1 << 10, 1 << 16]) {
        const counter = new NgramCounter(order, 16, 8, filterBits);
        const naive = new Map<string, number>();
        const ids = new Uint32Array(order);
        for (let i = 0; i < 5000; i++) {
          for (let k = 0; k < order; k++) ids[k] = Math.floor(random() ** 3 * 50);
          const increment = 1 + (i % 3);
          addGrowing(counter, ids, 0, increment);
          const key = Array.from(ids).join(',');
          naive.set(key, (naive.get(key) ?? 0) + increment);
        }
        expect(entries(counter)).toEqual(naive);
        expect(counter.size).toBeGreaterThanOrEqual(naive.size);
        expect(counter.logCapacity).toBeGreaterThanOrEqual(order === 1 ? 0 : counter.size);
        // Resizing the table, the log or the filter keeps every count.
        const before = entries(counter);
        counter.resize(slotsFor(counter.tableSize), ngramHash);
        expect(entries(counter)).toEqual(before);
        counter.resize(4 * counter.slots, ngramHash);
        if (counter.logged) {
          counter.resizeLog(counter.size);
          counter.resizeFilter(1 << 12, ngramHash);
        }
        expect(entries(counter)).toEqual(before);
        for (let k = 0; k < order; k++) ids[k] = 7;
        addGrowing(counter, ids, 0);
        before.set(Array.from(ids).join(','), (before.get(Array.from(ids).join(',')) ?? 0) + 1);
        expect(entries(counter)).toEqual(before);
      }
    }
  });

  test('order ≥ 2: first occurrences go to the log, repeats to the table', () => {
    const counter = new NgramCounter(2, 64, 64, 1 << 16);
    const ids = new Uint32Array([1, 2, 3, 1, 2]);
    for (const start of [0, 1, 2, 3]) expect(counter.add(ids, start, ngramHash(ids, start, 2))).toBe(true);
    expect([counter.logCount, counter.tableSize]).toEqual([3, 1]); // 1,2 · 2,3 · 3,1 · then 1,2 again
    expect(entries(counter)).toEqual(new Map([['1,2', 2], ['2,3', 1], ['3,1', 1]]));
    counter.clear();
    expect([counter.size, counter.logCount, counter.tableSize]).toEqual([0, 0, 0]);
    expect(counter.add(ids, 0, ngramHash(ids, 0, 2))).toBe(true);
    expect(counter.logCount).toBe(1); // the filter was cleared too
  });

  test('order ≥ 2: a full log refuses new n-grams and keeps counting known ones', () => {
    const counter = new NgramCounter(2, 64, 2, 1 << 16);
    const ids = new Uint32Array([1, 2, 3, 4]);
    expect(counter.add(ids, 0, ngramHash(ids, 0, 2))).toBe(true);
    expect(counter.add(ids, 0, ngramHash(ids, 0, 2))).toBe(true); // into the table: the log's room is used
    expect(counter.logFree).toBe(0);
    expect(counter.add(ids, 1, ngramHash(ids, 1, 2))).toBe(false);
    expect(counter.add(ids, 0, ngramHash(ids, 0, 2))).toBe(true);
    expect(entries(counter)).toEqual(new Map([['1,2', 3]]));
    expect(() => counter.resizeLog(1)).toThrow(/cannot hold/);
  });

  test('refuses a new n-gram when full and keeps counting known ones', () => {
    const counter = new NgramCounter(1, 4); // load limit 0.7 → 2 entries
    const ids = new Uint32Array([1, 2, 3]);
    expect(counter.add(ids, 0, ngramHash(ids, 0, 1))).toBe(true);
    expect(counter.add(ids, 1, ngramHash(ids, 1, 1))).toBe(true);
    expect(counter.free).toBe(0);
    expect(counter.add(ids, 2, ngramHash(ids, 2, 1))).toBe(false);
    expect(counter.add(ids, 0, ngramHash(ids, 0, 1))).toBe(true);
    expect(entries(counter)).toEqual(new Map([['1', 2], ['2', 1]]));
    expect(() => counter.resize(2, ngramHash)).toThrow(/cannot hold/);
  });

  test('probing wraps around the end of the table', () => {
    const counter = new NgramCounter(2, 8);
    const ids = new Uint32Array([5, 6, 7, 8, 9, 10]);
    for (let k = 0; k < 5; k++) expect(counter.add(ids, k, 7)).toBe(true); // every one hashed to the last slot
    for (let k = 0; k < 5; k++) expect(counter.add(ids, k, 7)).toBe(true);
    expect([...entries(counter).values()]).toEqual([2, 2, 2, 2, 2]);
  });
});

describe('NgramCounter, append-only', () => {
  test('every occurrence is a row of the log, counted like a Map; the spill adds up equal rows and notes the distinct share', () => {
    const random = seededRandom(31);
    for (let order = 2; order <= 6; order++) {
      const counter = new NgramCounter(order, 16, 8, 32);
      counter.setAppendOnly(true);
      const naive = new Map<string, number>();
      const ids = new Uint32Array(order);
      const occurrences = 3000;
      for (let i = 0; i < occurrences; i++) {
        for (let k = 0; k < order; k++) ids[k] = Math.floor(random() ** 3 * 30);
        addGrowing(counter, ids, 0);
        const key = Array.from(ids).join(',');
        naive.set(key, (naive.get(key) ?? 0) + 1);
      }
      expect(counter.tableSize).toBe(0);
      expect(counter.logCount).toBe(occurrences);
      expect(counter.added).toBe(occurrences);
      expect(naive.size).toBeLessThan(occurrences); // repeats, which the sort must add up
      expect(entries(counter)).toEqual(naive);
      const sorted = spillOrder(counter, 3, 30, new Uint32Array(counter.size * (order + 1)));
      const seen = new Map<string, number>();
      for (let p = 0; p < 3; p++) {
        const keys = sorted.keysOf(p);
        for (let j = 0; j < sorted.recordsOf(p); j++) seen.set(Array.from(keys.subarray(j * order, (j + 1) * order)).join(','), sorted.countsOf(p)[j]);
      }
      expect(seen).toEqual(naive);
      expect(counter.distinctShare).toBe(naive.size / occurrences);
    }
  });

  test('a spill sorts append-only rows as packed keys: the records of a filtering counter, for ids of 1 to 32 bits', () => {
    const random = seededRandom(37);
    for (const idMax of [2, 30, 70_000, 300_000, 2 ** 31, 2 ** 32 - 1]) {
      for (let order = 2; order <= 7; order++) {
        const appended = new NgramCounter(order, 16, 8, 32);
        appended.setAppendOnly(true);
        const filtered = new NgramCounter(order, 16, 8, 1 << 10);
        const ids = new Uint32Array(order);
        for (let i = 0; i < 1500; i++) {
          // Half the ids small, so that rows repeat; the rest up to idMax − 1 (every bit in use).
          for (let k = 0; k < order; k++) ids[k] = random() < 0.5 ? Math.floor(random() * Math.min(3, idMax)) : Math.min(idMax - 1, Math.floor(random() * idMax));
          addGrowing(appended, ids, 0);
          addGrowing(filtered, ids, 0);
        }
        const partitions = 5;
        const a = spillOrder(appended, partitions, idMax, new Uint32Array(appended.size * (order + 1)));
        const f = spillOrder(filtered, partitions, idMax, new Uint32Array(filtered.size * (order + 1)));
        for (let p = 0; p < partitions; p++) {
          expect(a.recordsOf(p)).toBe(f.recordsOf(p));
          expect(Array.from(a.keysOf(p))).toEqual(Array.from(f.keysOf(p)));
          expect(Array.from(a.countsOf(p))).toEqual(Array.from(f.countsOf(p)));
        }
      }
    }
  });

  test('the mode is set on an empty counter of order ≥ 2 only', () => {
    const counter = new NgramCounter(2);
    counter.add(new Uint32Array([1, 2]), 0, 5);
    expect(() => counter.setAppendOnly(true)).toThrow(/empty/);
    expect(() => new NgramCounter(1).setAppendOnly(true)).toThrow(/order-1/);
  });
});

describe('spillOrder', () => {
  test('orders entries by partition, then lexicographically by ids, with their counts', () => {
    const random = seededRandom(11);
    for (const [order, idMax, filterBits] of [[1, 300_000, 32], [2, 40, 32], [2, 40, 1 << 16], [3, 300_000, 1 << 10], [4, 300_000, 1 << 12], [5, 300_000, 1 << 16], [6, 5_000, 1 << 12], [3, 2 ** 31, 1 << 12]] as const) {
      // Orders 1..6: rows of 2..7 words, every case of the radix move (count/radix.ts) and its fallback.
      const counter = new NgramCounter(order, 1 << 8, 1 << 8, filterBits);
      const ids = new Uint32Array(order);
      const naive = new Map<string, number>();
      for (let i = 0; i < 2000; i++) {
        // ids up to idMax, so that the radix sort needs one to three digits per id
        for (let k = 0; k < order; k++) ids[k] = random() < 0.5 ? Math.floor(random() * Math.min(20, idMax)) : Math.floor(random() * idMax);
        addGrowing(counter, ids, 0);
        const key = Array.from(ids).join(',');
        naive.set(key, (naive.get(key) ?? 0) + 1);
      }
      const partitions = 7;
      const sorted = spillOrder(counter, partitions, idMax, new Uint32Array(counter.size * (order + 1)));
      const seen = new Map<string, number>();
      let total = 0;
      for (let p = 0; p < partitions; p++) {
        const keys = sorted.keysOf(p);
        const counts = sorted.countsOf(p);
        const records = sorted.recordsOf(p);
        total += records;
        expect(keys.length).toBe(records * order);
        expect(counts.length).toBe(records);
        const rows = Array.from({ length: records }, (_, j) => Array.from(keys.subarray(j * order, (j + 1) * order)));
        for (const row of rows) expect(partitionOf(row, 0, order, partitions)).toBe(p);
        const ordered = [...rows].sort((a, b) => { for (let k = 0; k < order; k++) if (a[k] !== b[k]) return a[k] - b[k]; return 0; });
        expect(rows).toEqual(ordered);
        // Distinct: a log row and a table row of one n-gram became one record.
        expect(new Set(rows.map((row) => row.join(','))).size).toBe(records);
        rows.forEach((row, j) => seen.set(row.join(','), counts[j]));
      }
      expect(total).toBe(naive.size);
      expect(seen).toEqual(naive);
    }
  });

  test('the partition table gives partitionOf of every id, and is not made for a vocabulary above its limit', () => {
    for (const partitions of [1, 7, 16]) {
      const table = partitionTable(5000, partitions)!;
      expect(table.length).toBe(5000);
      for (let id = 0; id < 5000; id++) expect(table[id]).toBe(partitionOf([id], 0, 1, partitions));
    }
    expect(partitionTable(PARTITION_TABLE_IDS_MAX + 1, 16)).toBeUndefined();
  });

  test('one partition, and a counter whose ids all share their high digits', () => {
    const counter = new NgramCounter(2, 64);
    const ids = new Uint32Array([1 << 20, (1 << 20) + 3, 1 << 20, (1 << 20) + 1]);
    for (let k = 0; k < 3; k++) counter.add(ids, k, ngramHash(ids, k, 2));
    const sorted = spillOrder(counter, 1, 1 << 21, new Uint32Array(counter.size * 3));
    expect(Array.from(sorted.keysOf(0))).toEqual([1 << 20, (1 << 20) + 1, 1 << 20, (1 << 20) + 3, (1 << 20) + 3, 1 << 20]);
    expect(Array.from(sorted.countsOf(0))).toEqual([1, 1, 1]);
  });
});

describe('CounterSet', () => {
  test('counts every n-gram ending at a predicted position; <s> never predicted', () => {
    // <s>=0 a=1 b=2 </s>=3 : "<s> a b a </s>", placed after other ids in the array
    const set = new CounterSet(3, 1 << 24);
    const ids = new Uint32Array([9, 9, 0, 1, 2, 1, 3, 9]);
    expect(set.reserve(5)).toBe(true);
    set.addSentence(ids, 2, 5);
    const [uni, bi, tri] = set.counters.map(entries);
    expect(uni).toEqual(new Map([['1', 2], ['2', 1], ['3', 1]]));
    expect(set.counters[0].logged).toBe(false);
    expect(bi).toEqual(new Map([['0,1', 1], ['1,2', 1], ['2,1', 1], ['1,3', 1]]));
    expect(tri).toEqual(new Map([['0,1,2', 1], ['1,2,1', 1], ['2,1,3', 1]]));
  });

  test('reserve refuses when growth would pass the budget, and the charge stays within it', () => {
    const budget = 1 << 20;
    const set = new CounterSet(5, budget);
    const random = seededRandom(3);
    let refused = 0;
    const ids = new Uint32Array(42);
    for (let s = 0; s < 2000; s++) {
      ids[0] = 0;
      for (let i = 1; i < 41; i++) ids[i] = 1 + Math.floor(random() * 100000);
      ids[41] = 1;
      if (!set.reserve(42)) {
        refused++;
        set.clear();
        expect(set.reserve(42)).toBe(true);
      }
      set.addSentence(ids, 0, 42);
      expect(set.chargedTotal()).toBeLessThanOrEqual(budget);
    }
    expect(refused).toBeGreaterThan(0);
  });

  test('the charge is every structure plus the larger of the sort scratch and a resize\'s old array', () => {
    const shapes: CounterShape[] = [
      { order: 1, slots: 1 << 12, logRows: 0, filterBits: 0 },
      { order: 2, slots: 1 << 12, logRows: 1 << 16, filterBits: filterBitsFor(1 << 16) },
      { order: 3, slots: 1 << 13, logRows: 1 << 15, filterBits: filterBitsFor(1 << 15) },
    ];
    expect(counterBytes(shapes[0])).toBe((1 << 12) * 8);
    expect(counterBytes(shapes[1])).toBe((1 << 12) * 12 + (1 << 16) * 12 + filterBitsFor(1 << 16) / 8);
    expect(filterBitsFor(1 << 16)).toBeGreaterThanOrEqual(COUNTER_FILTER_BITS_PER_ENTRY << 16);
    const structures = shapes.reduce((sum, s) => sum + counterBytes(s), 0);
    expect(sortScratchBytes(shapes[1])).toBe((1 << 16) * 14);
    expect(chargedBytes(shapes)).toBe(structures + sortScratchBytes(shapes[1]));
    expect(chargedBytes(shapes, 1 << 30)).toBe(structures + (1 << 30));
  });

  test('presize sizes empty counters within the budget, shrinks oversized ones, and counting still works', () => {
    const budget = 64 << 20;
    const set = new CounterSet(3, budget);
    const need = (entries: number, tableEntries: number) => ({ entries, tableEntries });
    set.presize([need(1000, 1000), need(100_000, 20_000), need(200_000, 30_000)]);
    expect(set.counters.map((c) => c.slots)).toEqual([slotsFor(1000), slotsFor(20_000), slotsFor(30_000)]);
    expect(set.counters.map((c) => c.logCapacity)).toEqual([0, 100_000, 200_000]);
    expect(set.counters[2].filterBits).toBe(filterBitsFor(200_000));
    expect(set.chargedTotal()).toBeLessThanOrEqual(budget);
    // Far more than the budget allows: the largest structures are halved until the set fits.
    set.presize([need(10_000_000, 10_000_000), need(10_000_000, 5_000_000), need(10_000_000, 5_000_000)]);
    expect(set.chargedTotal()).toBeLessThanOrEqual(budget);
    expect(set.chargedTotal()).toBeGreaterThan(budget / 4);
    // A modest need shrinks what is more than the shrink factor too large.
    set.presize([need(10, 10), need(10, 10), need(10, 10)]);
    expect(set.counters.map((c) => c.slots)).toEqual([COUNTER_SLOTS_MIN, COUNTER_SLOTS_MIN, COUNTER_SLOTS_MIN]);
    expect(set.counters.map((c) => c.logCapacity)).toEqual([0, COUNTER_LOG_ROWS_MIN, COUNTER_LOG_ROWS_MIN]);
    set.presize([need(2 * slotsFor(1), 0), need(0, 0), need(0, 0)]);
    expect(set.counters[0].slots).toBeLessThanOrEqual(COUNTER_PRESIZE_SHRINK_FACTOR * slotsFor(1));
    const ids = new Uint32Array([0, 1, 2, 3, 4]);
    expect(set.reserve(5)).toBe(true);
    set.addSentence(ids, 0, 5);
    expect(set.size).toBe(4 + 4 + 3);
    expect(() => set.presize([need(1, 1), need(1, 1), need(1, 1)])).toThrow(/must be empty/);
  });

  test('addSentences (order by order over a batch) counts what addSentence counts sentence by sentence', () => {
    const random = seededRandom(21);
    for (const order of [1, 2, 3, 5]) {
      for (const idMax of [undefined, 60]) {
        const lengths = Array.from({ length: 300 }, () => 2 + Math.floor(random() * 12));
        const starts = new Uint32Array(lengths.length + 1);
        lengths.forEach((length, s) => { starts[s + 1] = starts[s] + length; });
        const ids = new Uint32Array(starts[lengths.length]);
        for (let s = 0; s < lengths.length; s++) {
          ids[starts[s]] = 0;
          for (let i = starts[s] + 1; i < starts[s + 1] - 1; i++) ids[i] = 2 + Math.floor(random() ** 2 * 57);
          ids[starts[s + 1] - 1] = 1;
        }
        const batched = new CounterSet(order, 1 << 24, idMax);
        const single = new CounterSet(order, 1 << 24);
        expect(batched.counters[0].dense).toBe(idMax !== undefined);
        expect(batched.reserve(ids.length - lengths.length + 1)).toBe(true);
        batched.addSentences(ids, starts, 0, 100);
        batched.addSentences(ids, starts, 100, lengths.length);
        for (let s = 0; s < lengths.length; s++) {
          expect(single.reserve(lengths[s])).toBe(true);
          single.addSentence(ids, starts[s], lengths[s]);
        }
        expect(batched.counters.map(entries)).toEqual(single.counters.map(entries));
      }
    }
  });

  test('a dense unigram counter spills sorted by partition and id; without room in the budget the set hashes instead', () => {
    const set = new CounterSet(1, 1 << 24, 1000);
    const ids = new Uint32Array([0, 999, 5, 7, 5, 1]);
    expect(set.reserve(6)).toBe(true);
    set.addSentence(ids, 0, 6);
    const counter = set.counters[0];
    expect(counter.dense).toBe(true);
    expect(entries(counter)).toEqual(new Map([['999', 1], ['5', 2], ['7', 1], ['1', 1]]));
    const sorted = spillOrder(counter, 3, 1000, set.sortScratch());
    const seen: Array<[number, number]> = [];
    for (let p = 0; p < 3; p++) {
      const keys = Array.from(sorted.keysOf(p));
      expect(keys).toEqual([...keys].sort((a, b) => a - b));
      for (const key of keys) expect(partitionOf([key], 0, 1, 3)).toBe(p);
      keys.forEach((key, j) => seen.push([key, sorted.countsOf(p)[j]]));
    }
    expect(new Map(seen)).toEqual(new Map([[999, 1], [5, 2], [7, 1], [1, 1]]));
    set.clear();
    expect(entries(set.counters[0]).size).toBe(0);
    expect(new CounterSet(2, 4 << 20, 1_000_000).counters[0].dense).toBe(false);
  });

  test('an adaptive set starts orders ≥ appendFrom append-only, then sets each mode from its last spill, counting the same', () => {
    const random = seededRandom(41);
    /** `count` sentences of `length` words drawn by `word`, wrapped in <s> = 0 and </s> = 1. */
    const batch = (count: number, length: number, word: () => number): { ids: Uint32Array; starts: Uint32Array } => {
      const starts = new Uint32Array(count + 1);
      for (let s = 0; s < count; s++) starts[s + 1] = starts[s] + length + 2;
      const ids = new Uint32Array(starts[count]);
      for (let s = 0; s < count; s++) {
        ids[starts[s]] = 0;
        for (let i = 1; i <= length; i++) ids[starts[s] + i] = word();
        ids[starts[s + 1] - 1] = 1;
      }
      return { ids, starts };
    };
    const adaptive = new CounterSet(4, 1 << 24, undefined, { appendFrom: 3 });
    const plain = new CounterSet(4, 1 << 24);
    const modes = (): boolean[] => adaptive.counters.map((c) => c.appendOnly);
    expect(modes()).toEqual([false, false, true, true]);
    expect(plain.counters.map((c) => c.appendOnly)).toEqual([false, false, false, false]);
    const countBoth = (ids: Uint32Array, starts: Uint32Array, sentences: number): void => {
      for (const set of [adaptive, plain]) {
        expect(set.reserve(ids.length)).toBe(true);
        set.addSentences(ids, starts, 0, sentences);
      }
      expect(adaptive.counters.map(entries)).toEqual(plain.counters.map(entries));
    };
    const spill = (set: CounterSet): void => {
      for (const c of set.counters) spillOrder(c, 5, 1 << 20, set.sortScratch());
      set.clear();
    };
    // Three words over and over: at every order most n-grams repeat, so the spill turns the
    // append-only orders into filtering ones, with a filter of their bits per log row.
    const repetitive = batch(200, 12, () => 2 + Math.floor(random() * 3));
    countBoth(repetitive.ids, repetitive.starts, 200);
    spill(adaptive);
    spill(plain);
    expect(adaptive.counters[2].distinctShare).toBeLessThan(0.1);
    expect(modes()).toEqual([false, false, false, false]);
    for (const c of adaptive.counters.slice(1)) expect(c.filterBits).toBe(filterBitsFor(c.logCapacity));
    // A million words: nearly every n-gram is new, so every order ≥ 2 turns append-only, its filter
    // shrunk to the least.
    const fresh = batch(200, 12, () => 2 + Math.floor(random() * 1_000_000));
    countBoth(fresh.ids, fresh.starts, 200);
    spill(adaptive);
    expect(modes()).toEqual([false, true, true, true]);
    for (const c of adaptive.counters.slice(1)) expect(c.filterBits).toBe(filterBitsFor(0));
    spill(plain);
    countBoth(repetitive.ids, repetitive.starts, 200);
  });

  test('sortScratch fits the largest counter\'s rows; clear drops it', () => {
    const set = new CounterSet(2, 1 << 24);
    const ids = new Uint32Array([0, 1, 2, 3, 4, 5]);
    set.reserve(6);
    set.addSentence(ids, 0, 6);
    expect(set.sortScratch().length).toBeGreaterThanOrEqual(5 * 3);
    set.clear();
    expect(set.size).toBe(0);
    expect(set.sortScratch().length).toBe(0);
  });
});
