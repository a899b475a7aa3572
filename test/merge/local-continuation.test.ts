/**
 * The radix sort and suffix counting behind the local continuation counts, against a plain
 * comparison sort and a Map, on seeded random rows (ids from small to the full 32 bits, so that
 * every digit width and the skipping of constant digits are exercised).
 */
import { describe, expect, it } from 'vitest';
import { sortRows, suffixCountsBySort } from '../../src/merge/local-continuation.ts';
import { seededRandom as prng } from '../support/seeded.ts';

function randomRows(seed: number, n: number, width: number, idBits: number): Uint32Array {
  const random = prng(seed);
  const rows = new Uint32Array(n * width);
  for (let i = 0; i < rows.length; i++) rows[i] = Math.floor(random() * 2 ** idBits) >>> 0;
  return rows;
}

function rowsOf(flat: Uint32Array, n: number, width: number): number[][] {
  return Array.from({ length: n }, (_, r) => Array.from(flat.subarray(r * width, r * width + width)));
}

const lexicographic = (a: number[], b: number[]): number => {
  for (let k = 0; k < a.length; k++) if (a[k] !== b[k]) return a[k] - b[k];
  return 0;
};

describe('sortRows', () => {
  for (const [width, idBits] of [[1, 3], [2, 11], [3, 12], [4, 18], [5, 32], [6, 20], [7, 9], [2, 0]] as const) {
    it(`sorts rows of ${width} ids of ${idBits} bits like a comparison sort`, () => {
      const n = 5000;
      const rows = randomRows(width * 100 + idBits, n, width, idBits);
      const expected = rowsOf(rows, n, width).sort(lexicographic);
      const sorted = sortRows(rows.slice(), new Uint32Array(rows.length), n, width);
      expect(rowsOf(sorted, n, width)).toEqual(expected);
    });
  }
});

describe('suffixCountsBySort', () => {
  it('gives each distinct suffix once, in order, with the number of rows ending with it', () => {
    const order = 3;
    const n = 20_000;
    // Distinct rows of order+1 ids with few distinct suffixes, as a partition's n-grams have.
    const random = prng(7);
    const seen = new Set<string>();
    const flat: number[] = [];
    while (seen.size < n) {
      const row = [Math.floor(random() * 500), Math.floor(random() * 4), Math.floor(random() * 9), Math.floor(random() * 3000)];
      const key = row.join(' ');
      if (seen.has(key)) continue;
      seen.add(key);
      flat.push(...row);
    }
    const expected = new Map<string, number>();
    for (const key of seen) {
      const suffix = key.split(' ').slice(1).join(' ');
      expected.set(suffix, (expected.get(suffix) ?? 0) + 1);
    }
    const blocks = [{ keys: Uint32Array.from(flat.slice(0, 4 * 7000)), recordCount: 7000 }, { keys: Uint32Array.from(flat.slice(4 * 7000)), recordCount: n - 7000 }];
    for (const engine of ['auto', 'js'] as const) {
      const { keys, counts, size } = suffixCountsBySort(blocks, n, order, engine);
      const got = rowsOf(keys, size, order);
      expect(got).toEqual([...got].sort(lexicographic));
      expect(new Map(got.map((row, i) => [row.join(' '), counts[i]]))).toEqual(expected);
      expect(size).toBe(expected.size);
    }
  });

  it('sorts in WebAssembly (sort-wasm.ts) what the JavaScript passes sort, for suffixes of 1 to 7 ids of 1 to 32 bits', () => {
    for (const [order, idBits] of [[1, 32], [2, 5], [3, 18], [4, 12], [5, 32], [6, 20], [7, 1]] as const) {
      const n = 3000;
      const flat = randomRows(order * 31 + idBits, n, order + 1, idBits);
      // A few rows share their suffix with the row before (counts above 1).
      for (let r = 1; r < n; r += 7) flat.copyWithin(r * (order + 1) + 1, (r - 1) * (order + 1) + 1, r * (order + 1));
      const blocks = [{ keys: flat, recordCount: n }];
      const js = suffixCountsBySort(blocks, n, order, 'js');
      const wasm = suffixCountsBySort(blocks, n, order, 'auto');
      expect(wasm.size).toBe(js.size);
      expect(js.size).toBeLessThan(n);
      expect(Array.from(wasm.keys.subarray(0, wasm.size * order))).toEqual(Array.from(js.keys.subarray(0, js.size * order)));
      expect(Array.from(wasm.counts.subarray(0, wasm.size))).toEqual(Array.from(js.counts.subarray(0, js.size)));
    }
  });

  it('in store blocks of 1,024 rows and in empty ones, and with no rows at all, both engines agree', () => {
    const order = 4;
    const n = 5000;
    const flat = randomRows(91, n, order + 1, 6);
    for (let r = 1; r < n; r += 3) flat.copyWithin(r * (order + 1) + 1, (r - 1) * (order + 1) + 1, r * (order + 1));
    const blocks = [{ keys: new Uint32Array(0), recordCount: 0 }];
    for (let r = 0; r < n; r += 1024) blocks.push({ keys: flat.slice(r * (order + 1), Math.min(n, r + 1024) * (order + 1)), recordCount: Math.min(1024, n - r) });
    const js = suffixCountsBySort(blocks, n, order, 'js');
    const wasm = suffixCountsBySort(blocks, n, order, 'auto');
    expect(wasm.size).toBe(js.size);
    expect(Array.from(wasm.keys.subarray(0, wasm.size * order))).toEqual(Array.from(js.keys.subarray(0, js.size * order)));
    expect(Array.from(wasm.counts.subarray(0, wasm.size))).toEqual(Array.from(js.counts.subarray(0, js.size)));
    expect(Array.from(js.counts.subarray(0, js.size)).reduce((a, b) => a + b, 0)).toBe(n);
    for (const engine of ['auto', 'js'] as const) expect(suffixCountsBySort([], 0, order, engine).size).toBe(0);
  });
});
