import { describe, expect, test } from 'vitest';
import { ZIPF_CURVE_RANKS_PER_DECADE, ZIPF_RANKS_MAX, fitZipf, rankFrequencyCurve, rankedCounts } from '../../src/stats/zipf.ts';
import { QuernError } from '../../src/errors.ts';

describe('Zipf fit', () => {
  test('recovers the exponent of an exact power law, whatever the input order', () => {
    const counts = Array.from({ length: 500 }, (_, i) => 1e6 * (i + 1) ** -1.2);
    const fit = fitZipf([...counts].reverse());
    expect(fit).not.toBeNull();
    expect(fit!.exponent).toBeCloseTo(1.2, 12);
    expect(fit!.interceptLog10).toBeCloseTo(6, 12);
    expect(fit!.rSquared).toBeCloseTo(1, 12);
    expect(fit!.ranksFitted).toBe(500);
  });

  test('fits only the top ranks and leaves out words with count 0', () => {
    // Head: exponent 1 over ranks 1..10; tail: exponent 3. With rankMax = 10 only the head counts.
    const counts = Array.from({ length: 40 }, (_, i) => (i < 10 ? 1000 / (i + 1) : 1000 * 10 ** 2 / (i + 1) ** 3));
    expect(fitZipf(counts, 10)!.exponent).toBeCloseTo(1, 12);
    expect(fitZipf(counts)!.exponent).toBeGreaterThan(1.5);
    const withZeros = fitZipf([100, 50, 0, 0]);
    expect(withZeros!.ranksFitted).toBe(2);
    expect(withZeros!.exponent).toBeCloseTo(1, 12); // log10(100/50)/log10(2) = 1
    expect(fitZipf([5])).toBeNull();
    expect(fitZipf([5, 0])).toBeNull();
    expect(ZIPF_RANKS_MAX).toBe(10_000);
    expect(() => fitZipf([1, 2], 1)).toThrow(QuernError);
  });

  test('the rank-frequency curve is log-spaced, ascending, and ends at the last word with a count', () => {
    const counts = Array.from({ length: 12_345 }, (_, i) => Math.max(1, Math.floor(50_000 / (i + 1))));
    counts.push(0);
    const curve = rankFrequencyCurve(rankedCounts(counts));
    expect(curve[0]).toEqual([1, 50_000]);
    expect(curve[curve.length - 1][0]).toBe(12_345);
    for (let i = 1; i < curve.length; i++) expect(curve[i][0]).toBeGreaterThan(curve[i - 1][0]);
    // At most ZIPF_CURVE_RANKS_PER_DECADE per factor of ten (+1 for the last rank).
    expect(curve.length).toBeLessThanOrEqual(Math.ceil(Math.log10(12_345) * ZIPF_CURVE_RANKS_PER_DECADE) + 2);
    expect(curve.every(([rank, count]) => count === Math.max(1, Math.floor(50_000 / rank)))).toBe(true);
  });
});
