/**
 * Choosing the discounts of an order: the values the published formula reads off the count-of-counts
 * (src/stats/discounts.ts), unless the user gave them, and what happens when the formula's values
 * cannot be used.
 *
 * A discount the formula cannot give (a zero divisor) or gives outside its valid range stops the
 * estimate with a 'config' error that states the count-of-counts, the values and what is wrong with
 * them, and the two choices the user has: give the discounts of that order, or allow the fallback
 * values. With the fallback allowed, an order whose discounts cannot all be used takes the whole
 * fallback set of its method (never a mix of formula and fallback values, which could break the
 * ordering the formula keeps between them), and the model records both the values used and the
 * formula's values with the reasons.
 *
 * Fallback values, and why:
 *  - modified Kneser-Ney: D1 = 0.5, D2 = 1, D3+ = 1.5: the middle of each valid range (0, 1), (0, 2),
 *    (0, 3), i.e. half of the smallest count each discount applies to;
 *  - Kneser-Ney and absolute discounting: D = 0.5, the middle of (0, 1);
 *  - Katz: d_r = (r − 1/2)/r for r = 1..k, i.e. half a count taken from every n-gram seen at most k
 *    times — the absolute-discounting fallback written as Katz's ratios; each lies in (0, 1).
 * None of them uses the count-of-counts that failed; they are plain, predictable defaults.
 */
import { QuernError } from '../errors.ts';
import type { OrderDiscounts } from './model.ts';

/** A method's discounts: names, valid ranges and fallback values. */
export interface DiscountRule {
  /** Method name in messages, e.g. 'modified Kneser-Ney'. */
  method: string;
  names: string[];
  /** Upper end of each value's valid range; the lower end is 0, excluded. */
  rangeEnds: number[];
  /** True when the upper end is itself valid (Katz's d_r ≤ 1), false when excluded. */
  rangeEndIncluded: boolean;
  fallback: number[];
}

/** Modified Kneser-Ney (Chen & Goodman 1998): 0 < D1 < 1, 0 < D2 < 2, 0 < D3+ < 3. */
export const MODIFIED_KNESER_NEY_RULE: DiscountRule = {
  method: 'modified Kneser-Ney',
  names: ['D1', 'D2', 'D3+'],
  rangeEnds: [1, 2, 3],
  rangeEndIncluded: false,
  fallback: [0.5, 1, 1.5],
};

/** One discount per order: 0 < D < 1. */
export function singleDiscountRule(method: string): DiscountRule {
  return { method, names: ['D'], rangeEnds: [1], rangeEndIncluded: false, fallback: [0.5] };
}

/** Katz (1987): 0 < d_r ≤ 1 for r = 1..k. */
export function katzRule(k: number): DiscountRule {
  const names: string[] = [];
  const fallback: number[] = [];
  for (let r = 1; r <= k; r++) {
    names.push(`d${r}`);
    fallback.push((r - 0.5) / r);
  }
  return { method: 'Katz back-off', names, rangeEnds: new Array<number>(k).fill(1), rangeEndIncluded: true, fallback };
}

/** Discounts as the user may give them, per order (index order − 1); absent entries are read off the counts. */
export interface DiscountOptions {
  /** discounts[n − 1]: the values for order n, in the method's order (D1, D2, D3+ / D / d1..dk). */
  discounts?: ReadonlyArray<readonly number[] | null | undefined>;
  /** Use the fallback values (module comment) where the formula's values cannot be used, instead of stopping. */
  fallback?: boolean;
}

/** What the formula gave for one order. */
export interface FormulaDiscounts {
  order: number;
  /** The formula's values (null: undefined). */
  values: Array<number | null>;
  /** Why each null value is undefined, in plain words. */
  undefinedReasons: string[];
  counts: 'raw' | 'continuation';
  countOfCounts: Record<string, number>;
  /** Distinct n-grams of the order: with none, no discount is needed. */
  ngrams: number;
}

function formatNumber(value: number): string {
  return Number.isInteger(value) ? String(value) : String(Number(value.toPrecision(6)));
}

function rangeText(rule: DiscountRule, index: number): string {
  return `0 < ${rule.names[index]} ${rule.rangeEndIncluded ? '≤' : '<'} ${rule.rangeEnds[index]}`;
}

function inRange(rule: DiscountRule, index: number, value: number): boolean {
  const end = rule.rangeEnds[index];
  return Number.isFinite(value) && value > 0 && (rule.rangeEndIncluded ? value <= end : value < end);
}

/** Checks discounts the user gave for `order`: one per name, each in its valid range. */
function checkGiven(rule: DiscountRule, order: number, given: readonly number[]): number[] {
  if (given.length !== rule.names.length) {
    throw new QuernError('config', `${rule.method}: give ${rule.names.length} discount${rule.names.length === 1 ? '' : 's'} for order ${order} (${rule.names.join(', ')}), got ${given.length}`);
  }
  given.forEach((value, index) => {
    if (!inRange(rule, index, value)) {
      throw new QuernError('config', `${rule.method}: the given ${rule.names[index]} of order ${order} is ${value}, outside its valid range ${rangeText(rule, index)}`);
    }
  });
  return [...given];
}

/** Checks that discounts were not given for orders the model does not have. */
export function checkDiscountOrders(options: DiscountOptions, order: number): void {
  const given = options.discounts;
  if (given !== undefined && given.length > order) {
    throw new QuernError('config', `discounts given for ${given.length} orders, but the model has ${order}`);
  }
}

/**
 * The discounts to use at one order (module comment): given ones if any, else the formula's when
 * usable, else the fallback when allowed; otherwise a 'config' QuernError with the numbers and the
 * choices.
 */
export function chooseDiscounts(rule: DiscountRule, formula: FormulaDiscounts, options: DiscountOptions): OrderDiscounts {
  const { order } = formula;
  const problems: string[] = [...formula.undefinedReasons];
  formula.values.forEach((value, index) => {
    if (value === null || inRange(rule, index, value)) return;
    const end = rule.rangeEnds[index];
    problems.push(`${rule.names[index]} = ${formatNumber(value)} is ${value <= 0 ? 'not above 0' : `${rule.rangeEndIncluded ? 'above' : 'not below'} ${end}`}`);
  });
  const base = { order, names: rule.names, fromCounts: formula.values, problems, counts: formula.counts, countOfCounts: formula.countOfCounts };
  const given = options.discounts?.[order - 1];
  if (given !== undefined && given !== null) return { ...base, values: checkGiven(rule, order, given), source: 'given' };
  if (formula.ngrams === 0) return { ...base, values: [], source: 'unused' };
  if (problems.length === 0) return { ...base, values: formula.values as number[], source: 'counts' };
  if (options.fallback === true) return { ...base, values: [...rule.fallback], source: 'fallback' };
  const numbers = Object.entries(formula.countOfCounts).map(([name, value]) => `${name} = ${value}`).join(', ');
  const ranges = rule.names.map((_, index) => rangeText(rule, index)).join(', ');
  const fallback = rule.names.map((name, index) => `${name} = ${formatNumber(rule.fallback[index])}`).join(', ');
  throw new QuernError(
    'config',
    `${rule.method} cannot use the discounts of order ${order}: from the ${formula.counts} counts of order ${order} (${numbers}), ${problems.join('; ')}. ` +
      `Choices: give the discounts of order ${order} yourself (${ranges}), or allow the documented fallback values (${fallback}).`,
  );
}
