/**
 * A method's plan: its global parameters (discounts and the like, read off each order's
 * count-of-counts) and its per-context rule. Both drivers use it — the in-memory one
 * (`buildBackOffModel` over whole tables) and the streaming one (partition by partition, see
 * partition-estimate.ts) — so a method's arithmetic is written once.
 *
 * The plan needs only the count-of-counts of every order, never the tables: the in-memory path
 * reads them off its levels (`levelsCountOfCounts`), the streaming path off the job's stats.json
 * (`statsCountOfCounts`), and the two agree, so both give the same model.
 */
import { QuernError } from '../errors.ts';
import { KATZ_K } from '../stats/discounts.ts';
import type { CountOfCounts } from '../stats/types.ts';
import type { AbsoluteDiscountingOptions } from './absolute-discounting.ts';
import { buildBackOffModel, discountedRule, prepareCounts, type ContextRule, type CutoffOptions, type Level, type ModelHeader, type PreparedCounts } from './back-off-form.ts';
import { checkWeights, jelinekMercerRule } from './jelinek-mercer.ts';
import { withContinuationCounts, type CountTables } from './counts.ts';
import { checkDiscountOrders, chooseDiscounts, katzRule, MODIFIED_KNESER_NEY_RULE, singleDiscountRule } from './discount-choice.ts';
import type { EstimateRequest } from './estimate.ts';
import { katzContextRule, katzFormula } from './katz.ts';
import { kneserNeyCounts, levelCountOfCounts, singleDiscountFormula } from './kneser-ney.ts';
import type { InterpolationWeights, LanguageModel, OrderDiscounts } from './model.ts';
import { modifiedKneserNeyFormula } from './modified-kneser-ney.ts';
import { STUPID_BACKOFF_ALPHA } from './stupid-backoff.ts';
import { wittenBellRule } from './witten-bell.ts';

/** The count-of-counts of one order, as the methods read them. */
export interface OrderCountOfCounts {
  order: number;
  highest: boolean;
  /** Of the raw counts of every distinct n-gram of the order. */
  raw: CountOfCounts;
  /** Of the counts Kneser-Ney uses at the order (kneser-ney.ts): raw at the highest order; below
   *  it, continuation counts, except raw counts for the n-grams that begin with `<s>`. */
  kneserNey: CountOfCounts;
}

/** Jelinek-Mercer with its weights fitted already (fitting them needs held-out lookups, not a plan). */
export type FittedJelinekMercerRequest = { method: 'jelinek-mercer'; weights: InterpolationWeights } & CutoffOptions;

/** Requests that have a plan: every method, Jelinek-Mercer once its weights are fitted. */
export type PlannedRequest = Exclude<EstimateRequest, { method: 'jelinek-mercer' }> | FittedJelinekMercerRequest;

/** True when `request` has a plan (Jelinek-Mercer: when it gives the weights, not held-out text). */
export function isPlanned(request: EstimateRequest): request is PlannedRequest {
  return request.method !== 'jelinek-mercer' || (request.weights !== undefined && request.heldOut === undefined);
}

/** A method ready to estimate (module comment). */
export interface MethodPlan {
  /** Kneser-Ney methods read continuation counts at the orders below the highest. */
  usesContinuation: boolean;
  header: ModelHeader;
  /** The rule of a level (the whole table, or a window of whole contexts of it). */
  ruleFor(level: Level): ContextRule;
}

/** The count-of-counts of every level of prepared tables (continuation counts present where used). */
export function levelsCountOfCounts(prepared: PreparedCounts, usesContinuation: boolean): OrderCountOfCounts[] {
  return prepared.levels.map((level) => {
    const raw = levelCountOfCounts(level.counts);
    const kneserNey = usesContinuation ? levelCountOfCounts(kneserNeyCounts(level)) : raw;
    return { order: level.order, highest: level.highest, raw, kneserNey };
  });
}

function ngramsOf(countOfCounts: CountOfCounts): number {
  return countOfCounts.reduce((sum, [, n]) => sum + n, 0);
}

/**
 * The plan of a method: checks its options, reads its parameters off `orders` (one entry per order
 * 1..N) and returns its rule. `size` is V. Throws the methods' 'config' errors (bad option,
 * unusable discounts).
 */
export function planMethod(request: PlannedRequest, orders: OrderCountOfCounts[], size: number): MethodPlan {
  const order = orders.length;
  switch (request.method) {
    case undefined:
    case 'modified-kneser-ney': {
      checkDiscountOrders(request, order);
      const discounts: OrderDiscounts[] = orders.map((o) => chooseDiscounts(MODIFIED_KNESER_NEY_RULE, modifiedKneserNeyFormula(o.order, o.highest, o.kneserNey), request));
      return {
        usesContinuation: true,
        header: { parameters: { method: 'modified-kneser-ney', discounts }, normalised: true, log10UnseenContextWeight: 0 },
        ruleFor: (level) => {
          const [d1, d2, d3Plus] = discounts[level.order - 1].values;
          return discountedRule(level, kneserNeyCounts(level), (count) => (count === 1 ? d1 : count === 2 ? d2 : d3Plus));
        },
      };
    }
    case 'kneser-ney':
    case 'absolute-discounting': {
      checkDiscountOrders(request, order);
      const kneserNey = request.method === 'kneser-ney';
      const rule = singleDiscountRule(kneserNey ? 'Kneser-Ney' : 'absolute discounting');
      const discounts: OrderDiscounts[] = orders.map((o) =>
        chooseDiscounts(rule, singleDiscountFormula(o.order, kneserNey ? o.kneserNey : o.raw, kneserNey && !o.highest ? 'continuation' : 'raw'), request as AbsoluteDiscountingOptions),
      );
      return {
        usesContinuation: kneserNey,
        header: { parameters: { method: request.method, discounts }, normalised: true, log10UnseenContextWeight: 0 },
        ruleFor: (level) => {
          const discount = discounts[level.order - 1].values[0];
          return discountedRule(level, kneserNey ? kneserNeyCounts(level) : level.counts, () => discount);
        },
      };
    }
    case 'katz': {
      const k = request.k ?? KATZ_K;
      if (!Number.isInteger(k) || k < 1) throw new QuernError('config', `k must be an integer ≥ 1 (got ${k})`);
      checkDiscountOrders(request, order);
      const rule = katzRule(k);
      const discounts: OrderDiscounts[] = orders.map((o) => chooseDiscounts(rule, katzFormula(o.order, o.raw, k, ngramsOf(o.raw)), request));
      const parameters = {
        method: 'katz' as const,
        k,
        discounts,
        unigramLevel: 'unseen-words' as 'unseen-words' | 'renormalised',
        contextsDiscountedAboveK: orders.map((o) => ({ order: o.order, contexts: 0 })),
        contextsWithoutMass: orders.slice(1).map((o) => ({ order: o.order, contexts: 0 })),
      };
      return {
        usesContinuation: false,
        header: { parameters, normalised: true, log10UnseenContextWeight: 0 },
        ruleFor: (level) => katzContextRule(level, discounts[level.order - 1].values, k, size, parameters),
      };
    }
    case 'witten-bell':
      return { usesContinuation: false, header: { parameters: { method: 'witten-bell' }, normalised: true, log10UnseenContextWeight: 0 }, ruleFor: wittenBellRule };
    case 'jelinek-mercer':
      checkWeights(request.weights, order);
      return {
        usesContinuation: false,
        header: { parameters: { method: 'jelinek-mercer', weights: request.weights }, normalised: true, log10UnseenContextWeight: 0 },
        ruleFor: jelinekMercerRule(request.weights),
      };
    case 'stupid-backoff': {
      const alpha = request.alpha ?? STUPID_BACKOFF_ALPHA;
      if (!(alpha > 0 && alpha <= 1)) throw new QuernError('config', `alpha must lie in (0, 1] (got ${alpha})`);
      return {
        usesContinuation: false,
        header: { parameters: { method: 'stupid-backoff', alpha }, normalised: false, log10UnseenContextWeight: Math.log10(alpha) },
        ruleFor: (level) => (start, end, _lower, prob) => {
          let total = 0;
          for (let row = start; row < end; row++) total += level.counts[row];
          for (let row = start; row < end; row++) if (level.kept[row] === 1) prob[row] = level.counts[row] / total;
          return alpha;
        },
      };
    }
  }
}

/** The in-memory driver of a planned method: prepares the tables, plans, builds the back-off form. */
export function estimatePlanned(counts: CountTables, request: PlannedRequest): LanguageModel {
  const method = request.method ?? 'modified-kneser-ney';
  const usesContinuation = method === 'modified-kneser-ney' || method === 'kneser-ney';
  const prepared = prepareCounts(usesContinuation ? withContinuationCounts(counts) : counts, request);
  const plan = planMethod(request, levelsCountOfCounts(prepared, usesContinuation), prepared.size);
  return buildBackOffModel(prepared, plan.ruleFor, plan.header);
}
