/**
 * Interpolated Witten-Bell smoothing (Witten & Bell 1991, in the interpolated form of Chen & Goodman
 * 1998), raw counts at every order:
 *
 *   p(w | h) = (c(h w) + N1+(h •)·p(w | h')) / (c(h) + N1+(h •)),
 *   p(w)     = (c(w)   + N1+(•)·1/V)       / (c(•) + N1+(•)),
 *
 * where c(h) = Σ_w c(h w) and N1+(h •) is the number of distinct words seen after h (N1+(•): distinct
 * words seen at all), both over every n-gram seen in training. In the back-off form the weight of the
 * shorter context is γ(h) = N1+(h •)/(c(h) + N1+(h •)); an n-gram dropped by a cutoff adds its count
 * to γ's numerator and gets nothing of its own, so that p(· | h) still sums to 1:
 *
 *   p(w | h) = c(h w)/(c(h) + N1+(h •)) + γ(h)·p(w | h')   for kept h w,
 *   γ(h)     = (N1+(h •) + Σ_dropped c(h w)) / (c(h) + N1+(h •)).
 */
import { assert } from '../errors.ts';
import type { ContextRule, CutoffOptions, Level } from './back-off-form.ts';
import { estimatePlanned } from './method-plan.ts';
import type { CountTables } from './counts.ts';
import type { LanguageModel } from './model.ts';

/** Options of Witten-Bell: cutoffs. */
export type WittenBellOptions = CutoffOptions;

/** The Witten-Bell rule of a level (module comment). */
export function wittenBellRule(level: Level): ContextRule {
  const counts = level.counts;
  return (start, end, lower, prob) => {
    let total = 0;
    let types = 0;
    for (let row = start; row < end; row++) {
      total += counts[row];
      if (counts[row] > 0) types++;
    }
    assert(total > 0, 'a Witten-Bell context has a positive count');
    const denominator = total + types;
    let moved = types;
    for (let row = start; row < end; row++) {
      if (level.kept[row] === 0) moved += counts[row];
      else prob[row] = counts[row] / denominator;
    }
    const weight = moved / denominator;
    for (let row = start; row < end; row++) if (level.kept[row] === 1) prob[row] += weight * lower[row];
    return weight;
  };
}

/** Estimates interpolated Witten-Bell (module comment). */
export function estimateWittenBell(counts: CountTables, options: WittenBellOptions = {}): LanguageModel {
  return estimatePlanned(counts, { ...options, method: 'witten-bell' });
}
