/**
 * Count-of-counts: n_r, the number of distinct n-grams seen exactly r times.
 *
 * The stats stage receives them sparse ([r, n_r] for every r with n_r > 0, ascending r). This
 * module checks that shape, looks up n_r, sums them up, and groups them for reports: r = 1..10
 * one by one (the discounts and Good-Turing estimates read these), larger r in bins that double
 * in width ([11,16), [16,32), [32,64), …), because beyond r = 10 single values of n_r are small
 * and noisy and a doubling bin is one step on a log axis.
 */
import { assert } from '../errors.ts';
import type { CountOfCounts } from './types.ts';

/** Largest r listed on its own; counts above are binned. Ten covers every r any discount or
 *  Good-Turing estimate of the report reads (Katz reads up to k + 1 = 6, modified Kneser-Ney 4). */
export const COUNT_OF_COUNTS_LISTED_R_MAX = 10;

/** End (exclusive) of the first bin after the listed r: [11, 16) then doubling bins from 16, so
 *  every later bin starts at a power of two. */
export const COUNT_OF_COUNTS_FIRST_BIN_END = 16;

/** One bin of count-of-counts: the n-grams seen r times for rMin ≤ r < rEnd. */
export interface CountOfCountsBin {
  /** Smallest r of the bin (inclusive). */
  rMin: number;
  /** End of the bin (exclusive). */
  rEnd: number;
  /** Σ n_r over the bin: distinct n-grams whose count falls in the bin. */
  types: number;
  /** Σ r·n_r over the bin: occurrences of those n-grams. */
  occurrences: number;
}

/** A count-of-counts grouped for reading: listed r, then bins, and its totals. */
export interface CountOfCountsSummary {
  /** Σ n_r: distinct n-grams. */
  types: number;
  /** Σ r·n_r: n-gram occurrences. */
  occurrences: number;
  /** Largest r with n_r > 0 (0 when empty). */
  rMax: number;
  /** n_1/Σ n_r: share of the distinct n-grams seen once; null when there are none. */
  singletonShare: number | null;
  /** n_r for r = 1..COUNT_OF_COUNTS_LISTED_R_MAX, zeros included; index i holds n_{i+1}. */
  listed: number[];
  /** Bins above the listed r, up to the one holding rMax; empty bins in between included. */
  bins: CountOfCountsBin[];
  /** The sparse pairs themselves, for charts. */
  pairs: CountOfCounts;
}

/**
 * Asserts that `countOfCounts` has the documented shape: integer r ≥ 1 strictly ascending and
 * integer n_r ≥ 1. The merge stage builds these, so a bad one is a programmer error.
 */
export function checkCountOfCounts(countOfCounts: CountOfCounts, what: string): void {
  let rPrevious = 0;
  for (const pair of countOfCounts) {
    assert(Array.isArray(pair) && pair.length === 2, `${what}: each entry is an [r, n_r] pair`);
    const [r, n] = pair;
    assert(Number.isSafeInteger(r) && r > rPrevious, `${what}: r must be integers ≥ 1 in ascending order (got ${r} after ${rPrevious})`);
    assert(Number.isSafeInteger(n) && n >= 1, `${what}: n_${r} must be an integer ≥ 1 (got ${n})`);
    rPrevious = r;
  }
}

/** Builds the count-of-counts of a sequence of counts (each an integer ≥ 1). */
export function countOfCountsFromCounts(counts: Iterable<number>): CountOfCounts {
  const byR = new Map<number, number>();
  for (const count of counts) {
    if (!(Number.isSafeInteger(count) && count >= 1)) assert(false, `counts must be integers ≥ 1 (got ${count})`);
    byR.set(count, (byR.get(count) ?? 0) + 1);
  }
  return [...byR.entries()].sort((a, b) => a[0] - b[0]);
}

/** Map from r to n_r, for lookups; absent r means n_r = 0. */
export function countOfCountsMap(countOfCounts: CountOfCounts): Map<number, number> {
  return new Map(countOfCounts);
}

/** n_r from a map made by `countOfCountsMap` (0 when absent). */
export function nOf(byR: ReadonlyMap<number, number>, r: number): number {
  return byR.get(r) ?? 0;
}

/** Σ n_r (distinct n-grams) and Σ r·n_r (occurrences). */
export function countOfCountsTotals(countOfCounts: CountOfCounts): { types: number; occurrences: number } {
  let types = 0;
  let occurrences = 0;
  for (const [r, n] of countOfCounts) {
    types += n;
    occurrences += r * n;
  }
  assert(Number.isSafeInteger(occurrences), 'Σ r·n_r must stay below 2^53');
  return { types, occurrences };
}

/** The [rMin, rEnd) bounds of the bins above the listed r that are needed to hold `rMax`. */
export function binBounds(rMax: number): Array<[number, number]> {
  const bounds: Array<[number, number]> = [];
  let rMin = COUNT_OF_COUNTS_LISTED_R_MAX + 1;
  let rEnd = COUNT_OF_COUNTS_FIRST_BIN_END;
  while (rMin <= rMax) {
    bounds.push([rMin, rEnd]);
    rMin = rEnd;
    rEnd *= 2;
  }
  return bounds;
}

/** Groups a count-of-counts into listed r and doubling bins (see the module comment). */
export function summariseCountOfCounts(countOfCounts: CountOfCounts): CountOfCountsSummary {
  const { types, occurrences } = countOfCountsTotals(countOfCounts);
  const rMax = countOfCounts.length === 0 ? 0 : countOfCounts[countOfCounts.length - 1][0];
  const listed = new Array<number>(COUNT_OF_COUNTS_LISTED_R_MAX).fill(0);
  const bins: CountOfCountsBin[] = binBounds(rMax).map(([rMin, rEnd]) => ({ rMin, rEnd, types: 0, occurrences: 0 }));
  let binIndex = 0;
  for (const [r, n] of countOfCounts) {
    if (r <= COUNT_OF_COUNTS_LISTED_R_MAX) {
      listed[r - 1] = n;
      continue;
    }
    while (r >= bins[binIndex].rEnd) binIndex += 1;
    bins[binIndex].types += n;
    bins[binIndex].occurrences += r * n;
  }
  const singletonShare = types === 0 ? null : listed[0] / types;
  return { types, occurrences, rMax, singletonShare, listed, bins, pairs: countOfCounts.map(([r, n]) => [r, n]) };
}
