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
import { buildBackOffModel, discountedRule, prepareCounts } from './back-off-form.ts';
import type { CountTables } from './counts.ts';
import { checkDiscountOrders, chooseDiscounts, singleDiscountRule } from './discount-choice.ts';
import { singleDiscountFormula, type KneserNeyOptions } from './kneser-ney.ts';
import type { LanguageModel, OrderDiscounts } from './model.ts';

/** Options of absolute discounting: cutoffs; one discount per order given, or fallback allowed. */
export type AbsoluteDiscountingOptions = KneserNeyOptions;

/** Estimates interpolated absolute discounting (module comment). */
export function estimateAbsoluteDiscounting(counts: CountTables, options: AbsoluteDiscountingOptions = {}): LanguageModel {
  const prepared = prepareCounts(counts, options);
  checkDiscountOrders(options, prepared.order);
  const rule = singleDiscountRule('absolute discounting');
  const discounts: OrderDiscounts[] = prepared.levels.map((level) => chooseDiscounts(rule, singleDiscountFormula(level, level.counts, 'raw'), options));
  return buildBackOffModel(
    prepared,
    (level) => {
      const discount = discounts[level.order - 1].values[0];
      return discountedRule(level, level.counts, () => discount);
    },
    { parameters: { method: 'absolute-discounting', discounts }, normalised: true, log10UnseenContextWeight: 0 },
  );
}
