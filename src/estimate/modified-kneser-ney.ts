/**
 * Interpolated modified Kneser-Ney (Chen & Goodman 1998), exactly as DESIGN.md states it; the
 * default method.
 *
 * Counts as in kneser-ney.ts: raw at the highest order, continuation counts N1+(• x) at the lower
 * orders except for n-grams beginning with `<s>`, which keep their raw counts. With c these counts
 * at order n, three discounts per order, D(c) = D1 for c = 1, D2 for c = 2, D3+ for c ≥ 3:
 *
 *   p(w | h) = max(c(h w) − D(c(h w)), 0) / c(h) + γ(h)·p(w | h'),
 *   γ(h)     = (D1·N1(h •) + D2·N2(h •) + D3+·N3+(h •)) / c(h)   (plus dropped counts, back-off-form.ts),
 *   p(w)     = max(c(w) − D(c(w)), 0) / c(•) + γ(•)·1/V,
 *
 * with N_r(h •) the number of words w with c(h w) = r (N3+: ≥ 3), c(h) = Σ_w c(h w), and
 * Y = n1/(n1 + 2·n2), D1 = 1 − 2Y·n2/n1, D2 = 2 − 3Y·n3/n2, D3+ = 3 − 4Y·n4/n3 from the
 * count-of-counts of c at order n (`modifiedKneserNeyDiscounts` of src/stats/discounts.ts). Valid
 * ranges 0 < D1 < 1, 0 < D2 < 2, 0 < D3+ < 3; discount-choice.ts says what happens outside them.
 */
import { modifiedKneserNeyDiscounts } from '../stats/discounts.ts';
import type { CountOfCounts } from '../stats/types.ts';
import type { CountTables } from './counts.ts';
import type { FormulaDiscounts } from './discount-choice.ts';
import { countOfCountsRecord, type KneserNeyOptions } from './kneser-ney.ts';
import { estimatePlanned } from './method-plan.ts';
import type { LanguageModel } from './model.ts';

/** Options of modified Kneser-Ney: cutoffs; discounts [D1, D2, D3+] given per order, or fallback allowed. */
export type ModifiedKneserNeyOptions = KneserNeyOptions;

/** The three discounts of Chen & Goodman on the count-of-counts of the counts of an order. */
export function modifiedKneserNeyFormula(order: number, highest: boolean, countOfCounts: CountOfCounts): FormulaDiscounts {
  const result = modifiedKneserNeyDiscounts(countOfCounts);
  return {
    order,
    values: [result.d1, result.d2, result.d3Plus],
    undefinedReasons: result.notes,
    counts: highest ? 'raw' : 'continuation',
    countOfCounts: countOfCountsRecord(countOfCounts, 4),
    ngrams: countOfCounts.reduce((sum, [, n]) => sum + n, 0),
  };
}

/** Estimates interpolated modified Kneser-Ney (module comment). */
export function estimateModifiedKneserNey(counts: CountTables, options: ModifiedKneserNeyOptions = {}): LanguageModel {
  return estimatePlanned(counts, { ...options, method: 'modified-kneser-ney' });
}
