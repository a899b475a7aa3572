/**
 * Discounts read off a count-of-counts, as the estimate stage will compute them:
 *
 * - Katz (1987) discount ratios for r = 1..k: with the Good-Turing r* = (r+1)·n_{r+1}/n_r and
 *   A = (k+1)·n_{k+1}/n_1, d_r = (r* / r − A) / (1 − A). Counts above k are not discounted.
 * - Absolute discounting (Ney, Essen & Kneser 1994): one D = n_1/(n_1 + 2·n_2), the estimate that
 *   maximises the leaving-one-out likelihood approximately.
 * - Modified Kneser-Ney (Chen & Goodman 1998): Y = n_1/(n_1 + 2·n_2), D1 = 1 − 2Y·n_2/n_1,
 *   D2 = 2 − 3Y·n_3/n_2, D3+ = 3 − 4Y·n_4/n_3, for n-grams seen once, twice, and three times or more.
 *
 * A value the formula cannot give (a zero divisor) is null with the reason in plain words; a value
 * it gives but that is out of its valid range is returned as is and judged by the diagnostics, so
 * the report shows the number that would have been used.
 */
import { QuernError } from '../errors.ts';
import { checkCountOfCounts, countOfCountsMap, nOf } from './count-of-counts.ts';
import type { CountOfCounts, OrderStatsInput } from './types.ts';

/** Katz's k: counts above it are taken as reliable and not discounted; 5 is Katz's own choice. */
export const KATZ_K = 5;

/** Katz discount ratio for one r. */
export interface KatzDiscount {
  r: number;
  /** Good-Turing r*; null when n_r or n_{r+1} is 0. */
  rStar: number | null;
  /** d_r; null when undefined (see `note`). Valid range: 0 < d_r ≤ 1. */
  ratio: number | null;
  note: string | null;
}

/** Katz (1987) discount ratios of one count-of-counts. */
export interface KatzDiscounts {
  k: number;
  /** A = (k+1)·n_{k+1}/n_1; null when n_1 = 0. */
  cutoffShare: number | null;
  discounts: KatzDiscount[];
}

/** Absolute discount (Ney, Essen & Kneser 1994). */
export interface AbsoluteDiscount {
  n1: number;
  n2: number;
  /** D = n_1/(n_1 + 2·n_2); null when n_1 + n_2 = 0. Valid range: 0 < D < 1. */
  discount: number | null;
  note: string | null;
}

/** Modified Kneser-Ney discounts (Chen & Goodman 1998). */
export interface ModifiedKneserNeyDiscounts {
  n1: number;
  n2: number;
  n3: number;
  n4: number;
  /** Y = n_1/(n_1 + 2·n_2); null when n_1 + n_2 = 0. */
  y: number | null;
  /** D1 = 1 − 2Y·n_2/n_1; valid range 0 < D1 < 1. */
  d1: number | null;
  /** D2 = 2 − 3Y·n_3/n_2; valid range 0 < D2 < 2. */
  d2: number | null;
  /** D3+ = 3 − 4Y·n_4/n_3; valid range 0 < D3+ < 3. */
  d3Plus: number | null;
  /** Why a discount is null, one entry per null discount; empty when all are defined. */
  notes: string[];
}

/** The counts a discount discounts, i.e. the exclusive upper end of its valid range. */
export const MODIFIED_KNESER_NEY_DISCOUNT_RANGE_END = { d1: 1, d2: 2, d3Plus: 3 } as const;

/** Katz d_r for r = 1..k (k defaults to KATZ_K). */
export function katzDiscounts(countOfCounts: CountOfCounts, k: number = KATZ_K): KatzDiscounts {
  checkCountOfCounts(countOfCounts, 'katzDiscounts');
  if (!Number.isInteger(k) || k < 1) throw new QuernError('config', `k must be an integer ≥ 1 (got ${k})`);
  const byR = countOfCountsMap(countOfCounts);
  const n1 = nOf(byR, 1);
  const cutoffShare = n1 === 0 ? null : ((k + 1) * nOf(byR, k + 1)) / n1;
  const discounts: KatzDiscount[] = [];
  for (let r = 1; r <= k; r++) {
    const nR = nOf(byR, r);
    const nRNext = nOf(byR, r + 1);
    const rStar = nR === 0 || nRNext === 0 ? null : ((r + 1) * nRNext) / nR;
    let ratio: number | null = null;
    let note: string | null = null;
    if (cutoffShare === null) note = 'n1 = 0';
    else if (cutoffShare === 1) note = `(k+1)·n${k + 1}/n1 = 1, so the denominator 1 − (k+1)·n${k + 1}/n1 is 0`;
    else if (nR === 0) note = `n${r} = 0`;
    else if (nRNext === 0) note = `n${r + 1} = 0`;
    else ratio = ((rStar as number) / r - cutoffShare) / (1 - cutoffShare);
    discounts.push({ r, rStar, ratio, note });
  }
  return { k, cutoffShare, discounts };
}

/** Absolute discount D = n_1/(n_1 + 2·n_2). */
export function absoluteDiscount(countOfCounts: CountOfCounts): AbsoluteDiscount {
  checkCountOfCounts(countOfCounts, 'absoluteDiscount');
  const byR = countOfCountsMap(countOfCounts);
  const n1 = nOf(byR, 1);
  const n2 = nOf(byR, 2);
  if (n1 + n2 === 0) return { n1, n2, discount: null, note: 'n1 = n2 = 0' };
  return { n1, n2, discount: n1 / (n1 + 2 * n2), note: null };
}

/** Modified Kneser-Ney D1, D2, D3+ from n_1..n_4. */
export function modifiedKneserNeyDiscounts(countOfCounts: CountOfCounts): ModifiedKneserNeyDiscounts {
  checkCountOfCounts(countOfCounts, 'modifiedKneserNeyDiscounts');
  const byR = countOfCountsMap(countOfCounts);
  const [n1, n2, n3, n4] = [1, 2, 3, 4].map((r) => nOf(byR, r));
  const notes: string[] = [];
  const y = n1 + n2 === 0 ? null : n1 / (n1 + 2 * n2);
  let d1: number | null = null;
  let d2: number | null = null;
  let d3Plus: number | null = null;
  if (y === null) notes.push('Y, D1, D2 and D3+ are undefined: n1 = n2 = 0');
  else {
    if (n1 === 0) notes.push('D1 is undefined: n1 = 0');
    else d1 = 1 - (2 * y * n2) / n1;
    if (n2 === 0) notes.push('D2 is undefined: n2 = 0');
    else d2 = 2 - (3 * y * n3) / n2;
    if (n3 === 0) notes.push('D3+ is undefined: n3 = 0');
    else d3Plus = 3 - (4 * y * n4) / n3;
  }
  return { n1, n2, n3, n4, y, d1, d2, d3Plus, notes };
}

/** Which counts modified Kneser-Ney discounts at an order: continuation or raw. */
export type KneserNeySource = 'continuation' | 'raw';

/**
 * The count-of-counts modified Kneser-Ney uses at `order` (DESIGN.md): continuation counts at
 * the lower orders where the merge recorded them, raw counts at the highest order.
 */
export function kneserNeyCountOfCounts(input: OrderStatsInput, highestOrder: number): { source: KneserNeySource; countOfCounts: CountOfCounts } {
  if (input.order < highestOrder && input.continuation !== undefined) {
    return { source: 'continuation', countOfCounts: input.continuation };
  }
  return { source: 'raw', countOfCounts: input.raw };
}
