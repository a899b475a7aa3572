/**
 * The spill sort's packed keys sorted in WebAssembly (src/count/sort-wasm.ts, spill-sort.as.ts): the
 * committed module is what its source compiles to, and a spill sorted there gives the records the
 * JavaScript passes give, record for record, for every order and id width, in one partition or many,
 * including where the keys do not leave room for the WebAssembly passes (then the JavaScript ones
 * sort them).
 */
import { describe, expect, test } from 'vitest';
import { NgramCounter } from '../../src/count/counter.ts';
import { CounterSet } from '../../src/count/counter-set.ts';
import { ngramHash } from '../../src/count/hash.ts';
import { spillOrder } from '../../src/count/spill-sort.ts';
import { WasmSorter } from '../../src/count/sort-wasm.ts';
import type { RadixPass } from '../../src/count/radix.ts';
import { WASM_MEMORY_BYTES_MAX } from '../../src/limits.ts';
import { expectCommittedWasm } from '../support/committed-wasm.ts';
import { seededRandom } from '../support/seeded.ts';

test('the committed spill-sort.wasm is what asc (the pinned AssemblyScript) compiles from spill-sort.as.ts', () => {
  expectCommittedWasm('src/count/spill-sort.as.ts', 'src/count/asconfig.json', 'src/count/spill-sort.wasm');
});

/** A counter of `order` with `rows` n-grams, half their ids below 3 (so rows repeat), the rest
 *  anywhere below idMax (every bit in use): append-only (its spill sorts packed keys), or filtering
 *  (rows with counts, some n-grams both in the log and in the table). */
function filledCounter(order: number, idMax: number, rows: number, seed: number, appendOnly = true): NgramCounter {
  const random = seededRandom(seed);
  const counter = new NgramCounter(order, 16, 8, appendOnly ? 32 : 1 << 10);
  if (appendOnly) counter.setAppendOnly(true);
  const ids = new Uint32Array(order);
  for (let i = 0; i < rows; i++) {
    for (let k = 0; k < order; k++) ids[k] = random() < 0.5 ? Math.floor(random() * Math.min(3, idMax)) : Math.min(idMax - 1, Math.floor(random() * idMax));
    const hash = ngramHash(ids, 0, order);
    while (!counter.add(ids, 0, hash)) {
      if (counter.tableFree === 0) counter.grow(ngramHash);
      if (counter.logFree === 0) counter.resizeLog(2 * counter.logCapacity);
    }
  }
  return counter;
}

/** A counter's spill, partition by partition: [records, keys, counts]. */
function spilled(counter: NgramCounter, partitions: number, idMax: number, sorter?: WasmSorter): Array<[number, number[], number[]]> {
  const scratch = sorter?.words ?? new Uint32Array(counter.size * (counter.order + 1));
  const sorted = spillOrder(counter, partitions, idMax, scratch, sorter);
  return Array.from({ length: partitions }, (_, p) => [sorted.recordsOf(p), Array.from(sorted.keysOf(p)), Array.from(sorted.countsOf(p))]);
}

describe('a spill sorted in WebAssembly', () => {
  test('gives the records of the JavaScript passes, for orders 2 to 7, ids of 1 to 32 bits, 1 to 16 partitions', () => {
    let sortedInWasm = 0;
    let sortedInJs = 0;
    let packedInWasm = 0;
    let unpackedInWasm = 0;
    for (const idMax of [2, 30, 70_000, 300_000, 2 ** 31, 2 ** 32 - 1]) {
      for (let order = 2; order <= 7; order++) {
        for (const partitions of [1, 5, 16]) {
          const seed = idMax % 1000 + 10 * order + partitions;
          const expected = spilled(filledCounter(order, idMax, 1500, seed), partitions, idMax);
          const counter = filledCounter(order, idMax, 1500, seed);
          const sorter = WasmSorter.create(counter.size * (order + 1));
          if (!(sorter instanceof WasmSorter)) throw sorter;
          let calls = 0;
          const sortKeys = sorter.sortKeys.bind(sorter);
          sorter.sortKeys = (...args) => (calls++, sortKeys(...args));
          // Keys of up to 3 words are packed in the module too, through a stage of the rows in the
          // free half (smaller than the spill in most of these: several rounds).
          const packKeys3 = sorter.packKeys3.bind(sorter);
          sorter.packKeys3 = (...args) => (packedInWasm++, packKeys3(...args));
          const unpackKeys3 = sorter.unpackKeys3.bind(sorter);
          sorter.unpackKeys3 = (...args) => (unpackedInWasm++, unpackKeys3(...args));
          expect(spilled(counter, partitions, idMax, sorter)).toEqual(expected);
          // Keys of K words have room for the passes when K · (rows + the largest partition's) ≤ rows · (order + 1).
          const K = Math.ceil((order * Math.max(1, 32 - Math.clz32(idMax - 1))) / 32);
          if (K * 2 <= order + 1) expect(calls, `order ${order}, ids below ${idMax}, ${partitions} partitions`).toBeGreaterThan(0);
          if (calls > 0) sortedInWasm++;
          else sortedInJs++;
        }
      }
    }
    expect(sortedInWasm).toBeGreaterThan(50);
    expect(sortedInJs).toBeGreaterThan(5);
    expect(packedInWasm).toBeGreaterThan(30);
    expect(unpackedInWasm).toBeGreaterThan(100);
  });

  test('rows with counts (a filtering counter, orders 1 to 7) give the records of the JavaScript passes', () => {
    let sortedInWasm = 0;
    for (const idMax of [2, 30, 300_000, 2 ** 32 - 1]) {
      for (let order = 1; order <= 7; order++) {
        for (const partitions of [1, 5, 16]) {
          const seed = idMax % 1000 + 10 * order + partitions;
          const expected = spilled(filledCounter(order, idMax, 1500, seed, false), partitions, idMax);
          const counter = filledCounter(order, idMax, 1500, seed, false);
          // Room for the rows and the largest partition's again.
          const sorter = WasmSorter.create(2 * counter.size * (order + 1));
          if (!(sorter instanceof WasmSorter)) throw sorter;
          let calls = 0;
          const sortKeys = sorter.sortKeys.bind(sorter);
          sorter.sortKeys = (...args) => (calls++, sortKeys(...args));
          expect(spilled(counter, partitions, idMax, sorter)).toEqual(expected);
          expect(calls, `order ${order}, ids below ${idMax}, ${partitions} partitions`).toBeGreaterThan(0);
          sortedInWasm++;
        }
      }
    }
    expect(sortedInWasm).toBe(4 * 7 * 3);
  });

  test('a CounterSet keeps its spill scratch in a WebAssembly memory unless told not to, and drops it when cleared', () => {
    for (const sortEngine of ['auto', 'js'] as const) {
      const set = new CounterSet(3, 1 << 24, 1000, { appendFrom: 3, sortEngine });
      const ids = Uint32Array.from([0, 5, 6, 7, 8, 1]);
      expect(set.reserve(ids.length)).toBe(true);
      set.addSentence(ids, 0, ids.length);
      const scratch = set.sortScratch();
      expect(scratch.length).toBeGreaterThanOrEqual(set.counters[2].size * 4);
      expect(set.scratchSorter?.words === scratch).toBe(sortEngine === 'auto');
      set.clear();
      expect(set.scratchSorter).toBeUndefined();
    }
  });
});

describe('WasmSorter', () => {
  test('sorts keys of 1 to 8 words as an ordinary sort does, skipping passes whose digit is the same for every key', () => {
    const random = seededRandom(5);
    for (let keyWords = 1; keyWords <= 8; keyWords++) {
      const n = 3000;
      const sorter = WasmSorter.create(2 * n * keyWords + 7);
      if (!(sorter instanceof WasmSorter)) throw sorter;
      const keys: number[][] = [];
      for (let i = 0; i < n; i++) keys.push(Array.from({ length: keyWords }, (_, w) => (w === 0 ? 0x5000_0000 : 0) + Math.floor(random() * (random() < 0.3 ? 4 : 2 ** 32)) % 2 ** (w === 0 ? 28 : 32)));
      const at = 7; // not at word 0, and the other buffer below it
      keys.forEach((key, i) => sorter.words.set(key, at + i * keyWords));
      // 11-bit digits over every word; word 0's top bits (0101 in every key) are a pass that moves nothing.
      const passes: RadixPass[] = [];
      for (let w = keyWords - 1; w >= 0; w--) for (const [shift, bits] of [[0, 11], [11, 11], [22, 10]]) passes.push({ word: w, shift, bits });
      const inTarget = sorter.sortKeys(at, at + n * keyWords, n, keyWords, passes);
      const from = inTarget ? at + n * keyWords : at;
      const got = Array.from({ length: n }, (_, i) => Array.from(sorter.words.subarray(from + i * keyWords, from + (i + 1) * keyWords)));
      const expected = [...keys].sort((a, b) => { for (let w = 0; w < keyWords; w++) if (a[w] !== b[w]) return a[w] - b[w]; return 0; });
      expect(got).toEqual(expected);
    }
  });

  test('refuses overlapping buffers and passes it cannot hold; no memory over its limit', () => {
    const sorter = WasmSorter.create(100);
    if (!(sorter instanceof WasmSorter)) throw sorter;
    expect(() => sorter.sortKeys(0, 10, 10, 2, [{ word: 0, shift: 0, bits: 8 }])).toThrow(/apart/);
    expect(() => sorter.sortKeys(0, 50, 10, 2, [{ word: 2, shift: 0, bits: 8 }])).toThrow(/radix pass/);
    expect(() => sorter.sortKeys(0, 50, 10, 2, [{ word: 0, shift: 32, bits: 8 }])).toThrow(/radix pass/);
    expect(() => sorter.sortKeys(0, 95, 10, 2, [{ word: 0, shift: 0, bits: 8 }])).toThrow(/within a scratch/);
    const tooLarge = WasmSorter.create(WASM_MEMORY_BYTES_MAX / 4);
    expect(tooLarge).toBeInstanceOf(Error);
    expect((tooLarge as Error).message).toMatch(/over the WebAssembly memory/);
  });
});
