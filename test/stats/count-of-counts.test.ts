import { describe, expect, test } from 'vitest';
import {
  binBounds,
  checkCountOfCounts,
  countOfCountsFromCounts,
  countOfCountsTotals,
  summariseCountOfCounts,
} from '../../src/stats/count-of-counts.ts';
import { seededRandom } from '../support/seeded.ts';

describe('count-of-counts', () => {
  test('builds sparse ascending [r, n_r] pairs from counts', () => {
    expect(countOfCountsFromCounts([3, 1, 1, 7, 3, 1])).toEqual([[1, 3], [3, 2], [7, 1]]);
    expect(countOfCountsFromCounts([])).toEqual([]);
    expect(() => countOfCountsFromCounts([0])).toThrow(/integers ≥ 1/);
    expect(() => countOfCountsFromCounts([1.5])).toThrow(/integers ≥ 1/);
  });

  test('Σ n_r = distinct and Σ r·n_r = tokens on random counts', () => {
    const random = seededRandom(11);
    for (let trial = 0; trial < 20; trial++) {
      const counts = new Map<number, number>();
      const tokenCount = 1 + Math.floor(random() * 20_000);
      for (let i = 0; i < tokenCount; i++) {
        const word = Math.floor(1 / (random() + 1e-4)); // heavy-tailed word ids
        counts.set(word, (counts.get(word) ?? 0) + 1);
      }
      const countOfCounts = countOfCountsFromCounts(counts.values());
      expect(countOfCountsTotals(countOfCounts)).toEqual({ types: counts.size, occurrences: tokenCount });
      const summary = summariseCountOfCounts(countOfCounts);
      const binnedTypes = summary.listed.reduce((a, b) => a + b, 0) + summary.bins.reduce((a, b) => a + b.types, 0);
      const binnedOccurrences = summary.listed.reduce((a, n, i) => a + (i + 1) * n, 0) + summary.bins.reduce((a, b) => a + b.occurrences, 0);
      expect(binnedTypes).toBe(counts.size);
      expect(binnedOccurrences).toBe(tokenCount);
    }
  });

  test('bins are [11,16), [16,32), [32,64), … up to the one holding rMax', () => {
    expect(binBounds(10)).toEqual([]);
    expect(binBounds(11)).toEqual([[11, 16]]);
    expect(binBounds(16)).toEqual([[11, 16], [16, 32]]);
    expect(binBounds(100)).toEqual([[11, 16], [16, 32], [32, 64], [64, 128]]);
  });

  test('summary lists r = 1..10 with zeros and sums each bin', () => {
    const summary = summariseCountOfCounts([[1, 50], [2, 20], [4, 9], [10, 2], [11, 3], [15, 1], [16, 2], [40, 1]]);
    expect(summary.listed).toEqual([50, 20, 0, 9, 0, 0, 0, 0, 0, 2]);
    expect(summary.bins).toEqual([
      { rMin: 11, rEnd: 16, types: 4, occurrences: 3 * 11 + 15 },
      { rMin: 16, rEnd: 32, types: 2, occurrences: 32 },
      { rMin: 32, rEnd: 64, types: 1, occurrences: 40 },
    ]);
    expect(summary.types).toBe(88);
    expect(summary.occurrences).toBe(50 + 40 + 36 + 20 + 33 + 15 + 32 + 40);
    expect(summary.rMax).toBe(40);
    expect(summary.singletonShare).toBe(50 / 88);
    expect(summariseCountOfCounts([]).singletonShare).toBeNull();
  });

  test('rejects malformed count-of-counts as programmer errors', () => {
    expect(() => checkCountOfCounts([[2, 1], [1, 3]], 'x')).toThrow(/ascending/);
    expect(() => checkCountOfCounts([[1, 1], [1, 3]], 'x')).toThrow(/ascending/);
    expect(() => checkCountOfCounts([[0, 1]], 'x')).toThrow(/ascending/);
    expect(() => checkCountOfCounts([[1, 0]], 'x')).toThrow(/n_1 must be an integer ≥ 1/);
    expect(() => checkCountOfCounts([[1, 2], [3, 1]], 'x')).not.toThrow();
  });
});
