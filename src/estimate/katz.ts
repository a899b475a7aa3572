/**
 * Katz back-off with Good-Turing discounts (Katz 1987).
 *
 * At every order n, raw counts, c(h) = Σ_w c(h w), and the discount ratios d_r (r = 1..k) of the raw
 * count-of-counts of order n (`katzDiscounts` of src/stats/discounts.ts: with r* = (r+1)·n_{r+1}/n_r
 * and A = (k+1)·n_{k+1}/n_1, d_r = (r* / r − A)/(1 − A)); k = 5 by default:
 *
 *   p(w | h) = c(h w)/c(h)              when c(h w) > k       (counts above k are not discounted),
 *            = d_c·c(h w)/c(h)          when 1 ≤ c(h w) ≤ k,
 *            = α(h)·p(w | h')           when h w was not seen (or was dropped by a cutoff),
 *
 *   α(h) = β(h) / (1 − Σ_{w seen after h} p(w | h')),    β(h) = 1 − Σ_{w seen after h} p(w | h),
 *
 * so each distribution sums to 1; n-grams dropped by a cutoff count as unseen (their share is in β).
 *
 * Conventions (Katz's paper leaves these open; Quern decides them so):
 *  - Unigram level and `<unk>`: the unigram counts are discounted the same way (c(•) = all predicted
 *    tokens, `</s>` included), and the left-over mass β(•) is shared equally by the vocabulary words
 *    never seen in training — `<unk>` when no word was mapped to it at count time. This is Katz
 *    back-off from the unigrams to the uniform distribution over the vocabulary. When every
 *    vocabulary word was seen (a vocabulary cap gave `<unk>` a count), no word is left to take β(•):
 *    the unigram probabilities are divided by their sum 1 − β(•) (`unigramLevel: 'renormalised'`).
 *  - A context whose n-grams all have counts above k (and none dropped) has β(h) = 0 (at the unigram
 *    level: every word seen more than k times, and some vocabulary word never): Katz's formula
 *    leaves nothing for the words not seen after it, which would get probability 0, and any text
 *    with one such event an infinite perplexity (trained on 80 % of the Brown corpus, 1,534 trigram
 *    contexts are like this, "the importance" → "of" (26 times, nothing else) among them). Quern takes from each n-gram of such a context the
 *    absolute amount a count of k gives up, (1 − d_k)·k, so that p(w | h) = (c(h w) − (1 − d_k)·k)/c(h)
 *    there: the discount continues that of the largest discounted count, and counts above k stay
 *    undiscounted in every other context. The model counts these contexts per order
 *    (`contextsDiscountedAboveK`). Only when d_k = 1 (given so) does such a context keep nothing for
 *    the unseen words, which then get probability 0 (`contextsWithoutMass`).
 *  - A context after which every word with a non-zero lower-order probability was seen has nowhere
 *    to put β(h) (the denominator of α vanishes): its seen probabilities are divided by their sum.
 *  - d_r outside (0, 1] (or undefined, when some n_r is 0): a d_r above 1 would make a count grow,
 *    one at or below 0 would take it all. Either stops the estimate with the count-of-counts and the
 *    choices — give d_1..d_k for that order, or allow the fallback d_r = (r − 1/2)/r
 *    (discount-choice.ts) — and the model records which was used.
 */
import { katzDiscounts } from '../stats/discounts.ts';
import type { CountOfCounts } from '../stats/types.ts';
import type { ContextRule, CutoffOptions, Level } from './back-off-form.ts';
import type { CountTables } from './counts.ts';
import type { DiscountOptions, FormulaDiscounts } from './discount-choice.ts';
import { countOfCountsRecord } from './kneser-ney.ts';
import { estimatePlanned } from './method-plan.ts';
import type { LanguageModel } from './model.ts';

/** Options of Katz back-off: cutoffs; k; d_1..d_k given per order, or fallback allowed. */
export interface KatzOptions extends CutoffOptions, DiscountOptions {
  /** Counts above k are not discounted; an integer ≥ 1, 5 by default (Katz's own choice). */
  k?: number;
}

/** A denominator 1 − Σ p(w | h') below this has no room left for the unseen words (rounding of the sum). */
export const KATZ_DENOMINATOR_MIN = 1e-12;

/** Katz's d_r of the raw count-of-counts of an order. */
export function katzFormula(order: number, countOfCounts: CountOfCounts, k: number, ngrams: number): FormulaDiscounts {
  const result = katzDiscounts(countOfCounts, k);
  return {
    order,
    values: result.discounts.map((d) => d.ratio),
    undefinedReasons: result.discounts.filter((d) => d.ratio === null).map((d) => `d${d.r} is undefined: ${d.note}`),
    counts: 'raw',
    countOfCounts: countOfCountsRecord(countOfCounts, k + 1),
    ngrams,
  };
}

/** What the Katz rule records as it goes (the model's parameters; see the module comment). */
export interface KatzTallies {
  unigramLevel: 'unseen-words' | 'renormalised';
  contextsDiscountedAboveK: Array<{ order: number; contexts: number }>;
  contextsWithoutMass: Array<{ order: number; contexts: number }>;
}

/**
 * Katz's rule for the contexts of a level (module comment), with discount ratios d_1..d_k of its
 * order and V = `size`; counts the special contexts into `tallies`.
 */
export function katzContextRule(level: Level, ratios: number[], k: number, size: number, tallies: KatzTallies): ContextRule {
  const counts = level.counts;
  return (start, end, lower, prob) => {
    let total = 0;
    for (let row = start; row < end; row++) total += counts[row];
    // β(h) summed from what each n-gram gives up, so that it is exactly 0 when nothing is given up.
    let left = 0;
    let seenMass = 0;
    let lowerSeen = 0;
    let unseen = 0;
    for (let row = start; row < end; row++) {
      const count = counts[row];
      if (count === 0 || level.kept[row] === 0) {
        left += count;
        unseen++;
        continue;
      }
      const kept = count <= k ? ratios[count - 1] * count : count;
      prob[row] = kept / total;
      left += count - kept;
      seenMass += prob[row];
      lowerSeen += lower[row];
    }
    // Words with nothing of their own here: order 1, those never seen; above, all but the kept rows.
    const wordsLeft = level.order === 1 ? unseen : size - (end - start - unseen);
    if (left === 0 && wordsLeft > 0) {
      const amount = (1 - ratios[k - 1]) * k;
      if (amount > 0) {
        tallies.contextsDiscountedAboveK[level.order - 1].contexts++;
        seenMass = 0;
        for (let row = start; row < end; row++) {
          if (level.kept[row] === 0) continue;
          if (counts[row] > k) {
            prob[row] = (counts[row] - amount) / total;
            left += amount;
          }
          seenMass += prob[row];
        }
      }
    }
    const beta = left / total;
    if (level.order === 1) {
      // Unseen words of the vocabulary share β(•) equally; with none, renormalise.
      if (unseen > 0) {
        for (let row = start; row < end; row++) if (counts[row] === 0) prob[row] = beta / unseen;
      } else {
        tallies.unigramLevel = 'renormalised';
        for (let row = start; row < end; row++) prob[row] /= seenMass;
      }
      return 1;
    }
    if (beta === 0) {
      tallies.contextsWithoutMass[level.order - 2].contexts++;
      return 0;
    }
    const denominator = 1 - lowerSeen;
    if (denominator < KATZ_DENOMINATOR_MIN) {
      for (let row = start; row < end; row++) if (level.kept[row] === 1) prob[row] /= seenMass;
      return 0;
    }
    return beta / denominator;
  };
}

/** Estimates Katz back-off (module comment). */
export function estimateKatz(counts: CountTables, options: KatzOptions = {}): LanguageModel {
  return estimatePlanned(counts, { ...options, method: 'katz' });
}
