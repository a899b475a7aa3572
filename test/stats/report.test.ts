import { describe, expect, test } from 'vitest';
import { countOfCountsTotals } from '../../src/stats/count-of-counts.ts';
import { buildReport, REPORT_SCHEMA_VERSION } from '../../src/stats/report.ts';
import type { StatsInput } from '../../src/stats/types.ts';
import { statsInputOf, syntheticSentences } from './fixtures.ts';

describe('buildReport', () => {
  const input = statsInputOf(syntheticSentences(3, 1200), 3);
  const report = buildReport(input);

  test('one section per order with sizes, shares and the counts each method uses', () => {
    expect(report.schemaVersion).toBe(REPORT_SCHEMA_VERSION);
    expect(report.corpus).toEqual({ highestOrder: 3, vocabularySize: input.vocabularySize, tokens: input.tokens, sentences: 1200 });
    expect(report.orders.map((o) => o.order)).toEqual([1, 2, 3]);
    for (const [index, o] of report.orders.entries()) {
      const entry = input.orders[index];
      expect(o.distinct).toBe(entry.distinct);
      expect(o.total).toBe(entry.total);
      expect(o.raw.types).toBe(entry.distinct);
      expect(o.raw.occurrences).toBe(entry.total);
      expect(o.possibleLog10).toBeCloseTo(o.order * Math.log10(input.vocabularySize), 12);
      expect(o.observedShareLog10).toBeCloseTo(Math.log10(entry.distinct / input.vocabularySize ** o.order), 10);
      expect(o.observedShare).toBeCloseTo(entry.distinct / input.vocabularySize ** o.order, 15);
      expect(o.unseenMass).toBe(o.raw.listed[0] / entry.total);
      expect(o.goodTuring.map((e) => e.r)).toEqual([1, 2, 3, 4, 5]);
    }
    expect(report.orders.map((o) => o.discounts.kneserNeySource)).toEqual(['continuation', 'continuation', 'raw']);
    expect(report.orders[0].discounts.modifiedKneserNey.n1).toBe(report.orders[0].continuation!.listed[0]);
    expect(report.orders[2].discounts.modifiedKneserNey.n1).toBe(report.orders[2].raw.listed[0]);
    expect(report.orders[0].discounts.absolute.n1).toBe(report.orders[0].raw.listed[0]);
    expect(report.orders[0].contexts).toBeNull();
    expect(report.orders[2].contexts!.countOfCounts.occurrences).toBe(input.orders[2].total);
    expect(report.zipf).not.toBeNull();
  });

  test('is plain JSON: numbers stay numbers, nothing is NaN or infinite', () => {
    // JSON turns NaN and ±Infinity into null, so a round trip that changes nothing proves there are none.
    expect(JSON.parse(JSON.stringify(report))).toEqual(report);
  });

  test('the share of possible n-grams is computed in log space for huge V^n', () => {
    const raw: Array<[number, number]> = [[1, 900], [2, 80], [3, 20]];
    const { types, occurrences } = countOfCountsTotals(raw);
    const orders = Array.from({ length: 7 }, (_, i) => ({ order: i + 1, distinct: types, total: occurrences, raw }));
    const big: StatsInput = { order: 7, vocabularySize: 4_000_000_000, tokens: occurrences, sentences: 1, unigramCounts: [], orders };
    const result = buildReport(big);
    const seventh = result.orders[6];
    // V^7 = 1.6384e67 ... distinct/V^7 = 1000 / (4e9)^7: log10 = 3 − 7·log10(4e9) = 3 − 7·9.60206 = −64.2144.
    expect(seventh.possibleLog10).toBeCloseTo(7 * Math.log10(4e9), 12);
    expect(seventh.observedShareLog10).toBeCloseTo(3 - 7 * Math.log10(4e9), 10);
    expect(seventh.observedShare).toBeCloseTo(10 ** (3 - 7 * Math.log10(4e9)), 70);
    expect(result.zipf).toBeNull();
  });

  test('inconsistent merge bookkeeping is a programmer error', () => {
    const broken = structuredClone(input);
    broken.orders[1].total += 1;
    expect(() => buildReport(broken)).toThrow(/Σ r·n_r .* must equal total/);
    const wrongDistinct = structuredClone(input);
    wrongDistinct.orders[0].distinct -= 1;
    expect(() => buildReport(wrongDistinct)).toThrow(/must equal distinct/);
    const missing = structuredClone(input);
    missing.orders.pop();
    expect(() => buildReport(missing)).toThrow(/one entry per order/);
    const badContexts = structuredClone(input);
    badContexts.orders[2].contexts = [[1, 1]];
    expect(() => buildReport(badContexts)).toThrow(/context counts must sum to total/);
  });
});
