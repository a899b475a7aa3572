import { describe, expect, test } from 'vitest';
import { countOfCountsTotals } from '../../src/stats/count-of-counts.ts';
import {
  CONTEXTS_SEEN_ONCE_SHARE_MAX,
  SINGLETON_SHARE_LOW,
  type Diagnostic,
  type DiagnosticCode,
} from '../../src/stats/diagnostics.ts';
import { buildReport } from '../../src/stats/report.ts';
import type { CountOfCounts, OrderStatsInput, StatsInput } from '../../src/stats/types.ts';
import { statsInputOf, syntheticSentences } from './fixtures.ts';

/** n_r = round(c·r^−s) for r = 1..rMax (zeros left out): a smooth, natural-looking count-of-counts. */
function powerLaw(c: number, s: number, rMax = 300): CountOfCounts {
  const pairs: CountOfCounts = [];
  for (let r = 1; r <= rMax; r++) {
    const n = Math.round(c * r ** -s);
    if (n > 0) pairs.push([r, n]);
  }
  return pairs;
}

function orderOf(order: number, raw: CountOfCounts, extra: Partial<OrderStatsInput> = {}): OrderStatsInput {
  const { types, occurrences } = countOfCountsTotals(raw);
  return { order, distinct: types, total: occurrences, raw, ...extra };
}

/** Unigram counts falling as 1/rank: Zipf exponent 1. */
const ZIPF_ONE = Array.from({ length: 2000 }, (_, i) => Math.round(1e5 / (i + 1)));

function inputOf(orders: OrderStatsInput[], unigramCounts: number[] = ZIPF_ONE): StatsInput {
  return { order: orders.length, vocabularySize: unigramCounts.length, tokens: 1000, sentences: 10, unigramCounts, orders };
}

const codes = (diagnostics: Diagnostic[]): DiagnosticCode[] => diagnostics.map((d) => d.code);

describe('diagnostics', () => {
  test('a smooth natural-looking count-of-counts gives notes only', () => {
    const report = buildReport(inputOf([orderOf(1, powerLaw(1e5, 2.2)), orderOf(2, powerLaw(3e5, 2.5))]));
    expect(codes(report.diagnostics).sort()).toEqual(['unseen-mass', 'zipf-exponent']);
    expect(report.diagnostics.every((d) => d.severity === 'info')).toBe(true);
    const unseen = report.diagnostics.find((d) => d.code === 'unseen-mass')!;
    expect(unseen.values.order1).toBe(report.orders[0].unseenMass);
    expect(unseen.values.order2).toBe(report.orders[1].unseenMass);
    const zipf = report.diagnostics.find((d) => d.code === 'zipf-exponent')!;
    expect(zipf.values.exponent).toBeCloseTo(1, 2);
    expect(zipf.message).toMatch(/count falls as rank\^−1 \(R² = 1\)/);
  });

  test('undefined and out-of-range discounts are problems and say what estimation does', () => {
    // Highest order without n-grams seen 3 times: D3+ undefined (n3 = 0), D2 = 2 (not below 2).
    const raw: CountOfCounts = [[1, 500], [2, 100], [4, 30], [5, 20], [6, 12], [8, 4]];
    const report = buildReport(inputOf([orderOf(1, powerLaw(1e5, 2.2)), orderOf(2, raw)]));
    const undefinedOnes = report.diagnostics.filter((d) => d.code === 'discount-undefined' && d.order === 2);
    const outOfRange = report.diagnostics.filter((d) => d.code === 'discount-out-of-range' && d.order === 2);
    const kneserNey = undefinedOnes.find((d) => d.title.includes('modified Kneser-Ney'))!;
    expect(kneserNey.severity).toBe('problem');
    expect(kneserNey.message).toMatch(/D3\+ is undefined: n3 = 0/);
    expect(kneserNey.message).toMatch(/raw counts of order 2/);
    expect(kneserNey.action).toMatch(/stops .* asks for explicit discounts or the documented fallback/);
    expect(kneserNey.values).toMatchObject({ n1: 500, n2: 100, n3: 0, n4: 30, D2: 2, 'D3+': null });
    expect(outOfRange.find((d) => d.title.includes('modified Kneser-Ney'))!.message).toMatch(/D2 = 2 is not below 2/);
    // Katz: n3 = 0 leaves d2 and d3 undefined.
    expect(undefinedOnes.find((d) => d.title.includes('Katz'))!.message).toMatch(/d2 is undefined: n3 = 0; d3 is undefined: n3 = 0/);
    // Problems come first.
    expect(report.diagnostics[0].severity).toBe('problem');
  });

  test('lower orders judge the continuation counts, and name them', () => {
    // Continuation counts with n2 = 0 at order 1 of 2: D2 undefined, D1 = 1 (not below 1).
    const raw = powerLaw(1e5, 2.2);
    const { types } = countOfCountsTotals(raw);
    const continuation: CountOfCounts = [[1, types - 40], [3, 30], [4, 10]];
    const report = buildReport(inputOf([orderOf(1, raw, { continuation }), orderOf(2, powerLaw(3e5, 2.5))]));
    const found = report.diagnostics.filter((d) => d.order === 1 && d.code.startsWith('discount-'));
    expect(found.map((d) => d.code).sort()).toEqual(['discount-out-of-range', 'discount-undefined']);
    expect(found.every((d) => /continuation counts of order 1/.test(d.message))).toBe(true);
    expect(found.find((d) => d.code === 'discount-out-of-range')!.message).toMatch(/D1 = 1 is not below 1/);
  });

  test('duplicated documents: a bump in the middle counts of the highest order', () => {
    // Every n-gram of 300 of 3,000 sentences repeated 4 more times: n-grams seen once become
    // n-grams seen 5 times.
    const base = syntheticSentences(1, 3000);
    const repeated = [...base];
    for (let copy = 0; copy < 4; copy++) repeated.push(...base.slice(0, 300));
    const clean = buildReport(statsInputOf(base, 3));
    const duplicated = buildReport(statsInputOf(repeated, 3));
    expect(codes(clean.diagnostics)).not.toContain('duplicated-documents');
    const found = duplicated.diagnostics.find((d) => d.code === 'duplicated-documents')!;
    expect(found).toMatchObject({ severity: 'warning', order: 3 });
    expect(found.message).toMatch(/n5 = [\d,]+ is above n4 = [\d,]+/);
    expect(found.message).toMatch(/n5 = [\d,]+ is [\d.]+ times the fitted line/);
    expect(found.values.n5).toBe(duplicated.orders[2].raw.listed[4]);
    expect(found.values.n4).toBe(duplicated.orders[2].raw.listed[3]);
  });

  test('duplicated documents: a small chance rise is not reported; only the highest order is checked', () => {
    // n7 > n6 by 6, 1.5 standard deviations (√16 = 4); n7 = 11 is 2.8 times the fitted line
    // (3.86) but only 3.6 standard deviations above it (< DUPLICATE_BUMP_Z): chance, not duplicates.
    const wobble: CountOfCounts = [[1, 120], [2, 40], [3, 24], [4, 13], [5, 15], [6, 5], [7, 11], [8, 2], [9, 2], [10, 1], [12, 3]];
    expect(codes(buildReport(inputOf([orderOf(1, wobble)])).diagnostics)).not.toContain('duplicated-documents');
    // A strong rise at order 1 of 2 is not looked at (the highest order is).
    const bumped = powerLaw(1e5, 2.2).map(([r, n]): [number, number] => [r, r === 4 ? n * 5 : n]);
    const report = buildReport(inputOf([orderOf(1, bumped), orderOf(2, powerLaw(3e5, 2.5))]));
    expect(codes(report.diagnostics)).not.toContain('duplicated-documents');
    const atTop = buildReport(inputOf([orderOf(1, powerLaw(3e5, 2.5)), orderOf(2, bumped)]));
    expect(atTop.diagnostics.find((d) => d.code === 'duplicated-documents')!.order).toBe(2);
  });

  test('too few singletons: n1 < n2, or a singleton share far below typical', () => {
    const pruned = powerLaw(1e5, 2.2).filter(([r]) => r >= 2);
    const fewer: CountOfCounts = [[1, 1000], ...powerLaw(1e5, 2.2).filter(([r]) => r >= 2)];
    const reportPruned = buildReport(inputOf([orderOf(1, [[1, 1], ...pruned])]));
    const found = reportPruned.diagnostics.find((d) => d.code === 'few-singletons')!;
    expect(found.severity).toBe('warning');
    expect(found.values.singletonShare).toBeLessThan(SINGLETON_SHARE_LOW);
    expect(found.message).toMatch(/fewer n-grams were seen once \(n1 = 1\) than twice \(n2 = 21,764\)/);
    expect(found.message).toMatch(/pruned/);
    const reportFewer = buildReport(inputOf([orderOf(1, fewer)]));
    expect(reportFewer.diagnostics.find((d) => d.code === 'few-singletons')!.message).toMatch(/n1 = 1,000\) than twice/);
  });

  test('too little data for the order: most contexts seen once', () => {
    const raw = powerLaw(1e5, 2.2);
    const { occurrences } = countOfCountsTotals(raw);
    // 700 contexts seen once and 300 seen (occurrences − 700)/300 times each: 70 % seen once.
    const rest = occurrences - 700;
    const q = Math.floor(rest / 300);
    const sparse: CountOfCounts = [[1, 700], [q, 300 - (rest - q * 300)], [q + 1, rest - q * 300]].filter(([, n]) => n > 0) as CountOfCounts;
    // 10 contexts seen once and 990 seen (occurrences − 10)/990 times each: 1 % seen once.
    const denseRest = occurrences - 10;
    const dq = Math.floor(denseRest / 990);
    const dense: CountOfCounts = [[1, 10], [dq, 990 - (denseRest - dq * 990)], [dq + 1, denseRest - dq * 990]].filter(([, n]) => n > 0) as CountOfCounts;
    const sparseReport = buildReport(inputOf([orderOf(1, powerLaw(1e5, 2.2)), orderOf(2, raw, { contexts: sparse })]));
    const found = sparseReport.diagnostics.find((d) => d.code === 'sparse-contexts')!;
    expect(found).toMatchObject({ severity: 'warning', order: 2 });
    expect(found.values).toEqual({ contexts: 1000, contextsSeenOnce: 700, seenOnceShare: 0.7 });
    expect(found.message).toMatch(/70\.0% of the 1,000 distinct 1-word contexts were seen once/);
    expect(0.7).toBeGreaterThan(CONTEXTS_SEEN_ONCE_SHARE_MAX);
    const denseReport = buildReport(inputOf([orderOf(1, powerLaw(1e5, 2.2)), orderOf(2, raw, { contexts: dense })]));
    expect(codes(denseReport.diagnostics)).not.toContain('sparse-contexts');
  });

  test('Zipf exponent outside the natural range is a warning; a slope above −1 is flagged', () => {
    const flat = Array.from({ length: 500 }, () => 7);
    const report = buildReport(inputOf([orderOf(1, powerLaw(1e5, 2.2))], flat));
    const zipf = report.diagnostics.find((d) => d.code === 'zipf-exponent')!;
    expect(zipf.severity).toBe('warning');
    expect(zipf.values.exponent).toBeCloseTo(0, 12);
    expect(zipf.message).toMatch(/check the tokenisation/);
    // n_r = 100·r^−0.5: slope of log Z about −0.5.
    const shallow = buildReport(inputOf([orderOf(1, powerLaw(100, 0.5, 30))]));
    const sgt = shallow.diagnostics.find((d) => d.code === 'sgt-slope')!;
    expect(sgt.severity).toBe('warning');
    expect(sgt.values.slope).toBeGreaterThan(-1);
    expect(sgt.message).toMatch(/needs b < −1/);
  });

  test('ordered problems, warnings, notes; each with numbers', () => {
    const report = buildReport(statsInputOf(syntheticSentences(2, 1500), 3));
    const ranks = report.diagnostics.map((d) => ({ problem: 0, warning: 1, info: 2 })[d.severity]);
    expect(ranks).toEqual([...ranks].sort((a, b) => a - b));
    for (const d of report.diagnostics) {
      expect(Object.keys(d.values).length).toBeGreaterThan(0);
      expect(d.message.length).toBeGreaterThan(20);
    }
  });
});
