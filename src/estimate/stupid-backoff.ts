/**
 * Stupid backoff (Brants, Popat, Xu, Och & Dean 2007): relative frequencies and a fixed back-off
 * factor α (0.4 by default, the paper's value), raw counts at every order:
 *
 *   S(w | h) = c(h w)/c(h)        when h w was seen (and kept by the cutoffs),
 *            = α·S(w | h')        otherwise,
 *   S(w)     = c(w)/c(•)          (0, i.e. log10 −∞, for a vocabulary word never seen: usually `<unk>`).
 *
 * These are scores, not probabilities: they do not sum to 1. The model says so (`normalised: false`),
 * and perplexity and everything else that needs a normalised model refuse it. As in the paper, α
 * applies on every step back, whether or not the longer context was seen in training
 * (`log10UnseenContextWeight` = log10 α), so the score of h w does not depend on which contexts of h
 * the training text happened to contain.
 */
import type { CutoffOptions } from './back-off-form.ts';
import { estimatePlanned } from './method-plan.ts';
import type { CountTables } from './counts.ts';
import type { LanguageModel } from './model.ts';

/** Brants et al.'s α. */
export const STUPID_BACKOFF_ALPHA = 0.4;

/** Options of stupid backoff: cutoffs and α. */
export interface StupidBackoffOptions extends CutoffOptions {
  /** Back-off factor, 0 < α ≤ 1; 0.4 by default. */
  alpha?: number;
}

/** Estimates stupid-backoff scores (module comment); the rule is in method-plan.ts. */
export function estimateStupidBackoff(counts: CountTables, options: StupidBackoffOptions = {}): LanguageModel {
  return estimatePlanned(counts, { ...options, method: 'stupid-backoff' });
}
