/**
 * Interpolated Kneser-Ney with one discount per order (Chen & Goodman 1998, "interpolated
 * Kneser-Ney"), and the counts both Kneser-Ney methods use.
 *
 * Counts (DESIGN.md): the highest order uses raw counts; each lower order uses continuation counts
 * N1+(• x), the number of distinct words seen right before x, except that an n-gram beginning with
 * `<s>` (which nothing precedes) keeps its raw count. With c these counts at order n:
 *
 *   p(w | h) = max(c(h w) − D_n, 0) / c(h) + γ(h)·p(w | h'),
 *   γ(h)     = D_n·N1+(h •) / c(h)          (plus the counts of n-grams dropped by a cutoff, see back-off-form.ts),
 *   p(w)     = max(c(w) − D_1, 0) / c(•) + γ(•)·1/V     (the unigram level interpolates with the uniform distribution),
 *
 * where c(h) = Σ_w c(h w) and D_n = n1/(n1 + 2·n2) of the count-of-counts of c at order n (the formula
 * of src/stats/discounts.ts, `absoluteDiscount`). Valid range 0 < D < 1; see discount-choice.ts for
 * what happens outside it.
 */
import { assert } from '../errors.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
import { absoluteDiscount } from '../stats/discounts.ts';
import type { CountOfCounts } from '../stats/types.ts';
import type { CutoffOptions, Level } from './back-off-form.ts';
import type { CountTables } from './counts.ts';
import type { DiscountOptions, FormulaDiscounts } from './discount-choice.ts';
import { estimatePlanned } from './method-plan.ts';
import type { LanguageModel } from './model.ts';

/** Options of interpolated Kneser-Ney: cutoffs, and discounts given or fallback allowed. */
export interface KneserNeyOptions extends CutoffOptions, DiscountOptions {}

/** The counts Kneser-Ney uses at a level (module comment): raw at the highest order, continuation below. */
export function kneserNeyCounts(level: Level): Float64Array {
  if (level.highest) return level.counts;
  assert(level.continuation !== null, `continuation counts of order ${level.order} are needed`);
  const continuation = level.continuation;
  if (level.order === 1) return continuation;
  const counts = level.countsScratch === undefined ? new Float64Array(level.rows) : level.countsScratch.subarray(0, level.rows);
  for (let row = 0; row < level.rows; row++) {
    counts[row] = level.ids[row * level.order] === BOS_ID ? level.counts[row] : continuation[row];
  }
  return counts;
}

/** Count-of-counts of the non-zero counts of a level. */
export function levelCountOfCounts(counts: Float64Array): CountOfCounts {
  const byR = new Map<number, number>();
  for (const count of counts) if (count > 0) byR.set(count, (byR.get(count) ?? 0) + 1);
  return [...byR.entries()].sort((a, b) => a[0] - b[0]);
}

/** n1..n`rMax` of a count-of-counts, by name. */
export function countOfCountsRecord(countOfCounts: CountOfCounts, rMax: number): Record<string, number> {
  const byR = new Map(countOfCounts);
  const record: Record<string, number> = {};
  for (let r = 1; r <= rMax; r++) record[`n${r}`] = byR.get(r) ?? 0;
  return record;
}

/** Distinct n-grams of a level with a non-zero count. */
export function ngramsOf(counts: Float64Array): number {
  let ngrams = 0;
  for (const count of counts) if (count > 0) ngrams++;
  return ngrams;
}

/** The one-discount formula D = n1/(n1 + 2·n2) on the count-of-counts of the counts of an order. */
export function singleDiscountFormula(order: number, countOfCounts: CountOfCounts, source: 'raw' | 'continuation'): FormulaDiscounts {
  const result = absoluteDiscount(countOfCounts);
  return {
    order,
    values: [result.discount],
    undefinedReasons: result.note === null ? [] : [`D is undefined: ${result.note}`],
    counts: source,
    countOfCounts: countOfCountsRecord(countOfCounts, 2),
    ngrams: countOfCounts.reduce((sum, [, n]) => sum + n, 0),
  };
}

/** Estimates interpolated Kneser-Ney with one discount per order (module comment). */
export function estimateKneserNey(counts: CountTables, options: KneserNeyOptions = {}): LanguageModel {
  return estimatePlanned(counts, { ...options, method: 'kneser-ney' });
}
