import { describe, expect, test } from 'vitest';
import { NgramCounter } from '../../src/count/counter.ts';
import { CounterSet } from '../../src/count/counter-set.ts';
import { ngramHash, partitionOf } from '../../src/count/hash.ts';
import { spillOrder } from '../../src/count/spill-sort.ts';
import { seededRandom } from '../support/seeded.ts';

/** Reads every entry of a counter into a Map keyed by the ids joined with ','. */
function entries(counter: NgramCounter): Map<string, number> {
  const map = new Map<string, number>();
  for (let slot = 0; slot < counter.slots; slot++) {
    const count = counter.counts[slot];
    if (count === 0) continue;
    map.set(Array.from(counter.keys.subarray(slot * counter.order, (slot + 1) * counter.order)).join(','), count);
  }
  return map;
}

describe('NgramCounter', () => {
  test('counts like a Map, through growth, for orders 1..7', () => {
    const random = seededRandom(7);
    for (let order = 1; order <= 7; order++) {
      const counter = new NgramCounter(order, 16);
      const naive = new Map<string, number>();
      const ids = new Uint32Array(order);
      for (let i = 0; i < 5000; i++) {
        for (let k = 0; k < order; k++) ids[k] = Math.floor(random() ** 3 * 50);
        const hash = ngramHash(ids, 0, order);
        if (!counter.add(ids, 0, hash)) {
          counter.grow(ngramHash);
          expect(counter.add(ids, 0, hash)).toBe(true);
        }
        const key = Array.from(ids).join(',');
        naive.set(key, (naive.get(key) ?? 0) + 1);
      }
      expect(entries(counter)).toEqual(naive);
      expect(counter.size).toBe(naive.size);
    }
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
  });
});

describe('spillOrder', () => {
  test('orders entries by partition, then lexicographically by ids', () => {
    const random = seededRandom(11);
    for (const order of [1, 2, 3, 5]) {
      const counter = new NgramCounter(order, 1 << 12);
      const ids = new Uint32Array(order);
      for (let i = 0; i < 2000; i++) {
        // ids up to 300000 so that the radix sort needs two digits per id
        for (let k = 0; k < order; k++) ids[k] = random() < 0.5 ? Math.floor(random() * 20) : Math.floor(random() * 300000);
        if (counter.free === 0) counter.grow(ngramHash);
        counter.add(ids, 0, ngramHash(ids, 0, order));
      }
      const partitions = 7;
      const { slots, partitionStarts } = spillOrder(counter, partitions, 300000);
      expect(slots.length).toBe(counter.size);
      expect(new Set(slots).size).toBe(counter.size);
      const rows = Array.from(slots, (slot) => Array.from(counter.keys.subarray(slot * order, (slot + 1) * order)));
      for (let p = 0; p < partitions; p++) {
        const part = rows.slice(partitionStarts[p], partitionStarts[p + 1]);
        for (const row of part) expect(partitionOf(row, 0, order, partitions)).toBe(p);
        const sorted = [...part].sort((a, b) => { for (let k = 0; k < order; k++) if (a[k] !== b[k]) return a[k] - b[k]; return 0; });
        expect(part).toEqual(sorted);
      }
      expect(partitionStarts[partitions]).toBe(counter.size);
    }
  });
});

describe('CounterSet', () => {
  test('counts every n-gram ending at a predicted position; <s> never predicted', () => {
    // <s>=0 a=1 b=2 </s>=3 : "<s> a b a </s>"
    const set = new CounterSet(3, 1 << 24);
    const ids = new Uint32Array([0, 1, 2, 1, 3]);
    expect(set.reserve(5)).toBe(true);
    set.addSentence(ids, 5);
    const [uni, bi, tri] = set.counters.map(entries);
    expect(uni).toEqual(new Map([['1', 2], ['2', 1], ['3', 1]]));
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
      set.addSentence(ids, 42);
      expect(set.chargedTotal()).toBeLessThanOrEqual(budget);
    }
    expect(refused).toBeGreaterThan(0);
  });
});
