/**
 * Interpolated absolute discounting (Ney, Essen & Kneser 1994): raw counts at every order, one
 * discount per order,
 *
 *   p(w | h) = max(c(h w) − D_n, 0) / c(h) + γ(h)·p(w | h'),     γ(h) = D_n·N1+(h •) / c(h),
 *   p(w)     = max(c(w) − D_1, 0) / c(•) + γ(•)·1/V,
 *
 * c(h) = Σ_w c(h w), N1+(h •) the number of distinct words seen after h (dropped n-grams move their
 * counts to γ, back-off-form.ts), and D_n = n1/(n1 + 2·n2) of the raw count-of-counts of order n
 * (`absoluteDiscount` of src/stats/discounts.ts). Valid range 0 < D < 1 (discount-choice.ts). The
 * unigram level interpolates with the uniform distribution over the vocabulary, as Kneser-Ney does,
 * so that the two methods differ only in their counts.
 */
import type { CountTables } from './counts.ts';
import type { KneserNeyOptions } from './kneser-ney.ts';
import { estimatePlanned } from './method-plan.ts';
import type { LanguageModel } from './model.ts';

/** Options of absolute discounting: cutoffs; one discount per order given, or fallback allowed. */
export type AbsoluteDiscountingOptions = KneserNeyOptions;

/** Estimates interpolated absolute discounting (module comment). */
export function estimateAbsoluteDiscounting(counts: CountTables, options: AbsoluteDiscountingOptions = {}): LanguageModel {
  return estimatePlanned(counts, { ...options, method: 'absolute-discounting' });
}
