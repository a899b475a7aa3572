/**
 * Good-Turing estimates from a count-of-counts.
 *
 * Plain Good-Turing: r* = (r+1)·n_{r+1}/n_r, and the mass left for unseen events n_1/N.
 *
 * Simple Good-Turing, as Gale & Sampson (1995, "Good-Turing frequency estimation without tears")
 * describe it:
 *  1. For the observed r in ascending order, Z_r = n_r / (0.5·(t − q)), where q and t are the
 *     previous and next observed r (for the first, q = 0; for the last, t = 2r − q). This spreads
 *     n_r over the gap of unobserved r around it.
 *  2. Least-squares line log Z_r = a + b·log r (natural logs here). The method needs b < −1;
 *     otherwise the smoothed estimates grow faster than r, and a warning is raised.
 *  3. The smoothed ("LGT") estimate is y = r·(1 + 1/r)^(b+1), which is (r+1)·S(r+1)/S(r) for
 *     S(r) = e^a·r^b.
 *  4. Starting at the smallest r, the Turing estimate x = (r+1)·n_{r+1}/n_r is used while it
 *     differs from y by more than 1.96·sqrt((r+1)²·(n_{r+1}/n_r²)·(1 + n_{r+1}/n_r)); from the
 *     first r where it does not, the LGT estimate is used for that r and every larger r (never back).
 *     When r+1 was not observed, the Turing estimate is unusable (it would be 0) and the switch
 *     happens there too.
 *  5. P0 = n_1/N for all unseen events together; the seen ones get p_r = (1 − P0)·r* / N' with
 *     N' = Σ n_r·r*, so the probabilities sum to one.
 */
import { assert, QuernError } from '../errors.ts';
import { checkCountOfCounts, countOfCountsMap, countOfCountsTotals, nOf } from './count-of-counts.ts';
import type { CountOfCounts } from './types.ts';

/** Largest r for which the report lists plain Good-Turing estimates: the estimates smoothing
 *  methods use (Katz reads r ≤ k = 5); above that n_{r+1}/n_r is too noisy to be worth showing. */
export const GOOD_TURING_R_MAX = 5;

/** Two-sided 95 % normal quantile of the switch rule (Gale & Sampson 1995, step 4). */
export const SGT_SWITCH_Z = 1.96;

/** Gale & Sampson's validity condition on the slope: the method needs b < −1. */
export const SGT_SLOPE_MAX = -1;

/** A plain Good-Turing estimate for one r. */
export interface GoodTuringEstimate {
  r: number;
  /** n_r. */
  nR: number;
  /** n_{r+1}. */
  nRNext: number;
  /** r* = (r+1)·n_{r+1}/n_r; null when n_r = 0 or n_{r+1} = 0 (see `note`). */
  rStar: number | null;
  /** Why `rStar` is null, in plain words; null when it is defined. */
  note: string | null;
}

/** Plain Good-Turing r* for r = 1..rMax (zeros in n_r or n_{r+1} are stated, not divided by). */
export function goodTuringEstimates(countOfCounts: CountOfCounts, rMax: number = GOOD_TURING_R_MAX): GoodTuringEstimate[] {
  if (!Number.isInteger(rMax) || rMax < 1) throw new QuernError('config', `rMax must be an integer ≥ 1 (got ${rMax})`);
  const byR = countOfCountsMap(countOfCounts);
  const estimates: GoodTuringEstimate[] = [];
  for (let r = 1; r <= rMax; r++) {
    const nR = nOf(byR, r);
    const nRNext = nOf(byR, r + 1);
    let rStar: number | null = null;
    let note: string | null = null;
    if (nR === 0) note = `no n-gram was seen ${r} time${r === 1 ? '' : 's'} (n${r} = 0)`;
    else if (nRNext === 0) note = `no n-gram was seen ${r + 1} times (n${r + 1} = 0): the estimate would be 0`;
    else rStar = ((r + 1) * nRNext) / nR;
    estimates.push({ r, nR, nRNext, rStar, note });
  }
  return estimates;
}

/** Good-Turing mass of unseen events, n_1/N; null when N = 0. */
export function unseenMass(countOfCounts: CountOfCounts): number | null {
  const { occurrences } = countOfCountsTotals(countOfCounts);
  if (occurrences === 0) return null;
  return nOf(countOfCountsMap(countOfCounts), 1) / occurrences;
}

/** One observed r of a Simple Good-Turing fit. */
export interface SimpleGoodTuringRow {
  r: number;
  nR: number;
  /** Z_r = n_r / (0.5·(t − q)). */
  z: number;
  /** Turing estimate (r+1)·n_{r+1}/n_r; null when r+1 was not observed. */
  turing: number | null;
  /** LGT estimate r·(1 + 1/r)^(b+1). */
  lgt: number;
  /** The estimate used: `turing` below the switch, `lgt` from it on. */
  rStar: number;
  /** Which of the two `rStar` is. */
  source: 'turing' | 'lgt';
  /** Renormalised probability of one n-gram seen r times: (1 − P0)·r* / N'. */
  probability: number;
}

/** A Simple Good-Turing fit that could be made. */
export interface SimpleGoodTuringFit {
  status: 'fitted';
  /** N = Σ r·n_r. */
  total: number;
  /** P0 = n_1/N: probability of all unseen events together. */
  unseenMass: number;
  /** a of log Z_r = a + b·log r (natural logarithms). */
  intercept: number;
  /** b of the same line. */
  slope: number;
  /** True when b > −1, which Gale & Sampson say makes the method invalid. */
  slopeWarning: boolean;
  /** Smallest r whose estimate is the LGT one (every larger r uses it too). Always set: the
   *  largest r has no r + 1, so the switch happens there at the latest. */
  switchR: number;
  /** N' = Σ n_r·r*, the renormalising total. */
  renormalisedTotal: number;
  rows: SimpleGoodTuringRow[];
}

/** A Simple Good-Turing fit that could not be made, and why. */
export interface SimpleGoodTuringUnavailable {
  status: 'unavailable';
  reason: string;
}

/** Result of `simpleGoodTuring`: a fit, or why there is none. */
export type SimpleGoodTuring = SimpleGoodTuringFit | SimpleGoodTuringUnavailable;

/** The Z_r of Gale & Sampson's step 1, one per observed r. */
export function averagingTransform(countOfCounts: CountOfCounts): number[] {
  const z: number[] = [];
  for (let j = 0; j < countOfCounts.length; j++) {
    const [r, n] = countOfCounts[j];
    const q = j === 0 ? 0 : countOfCounts[j - 1][0];
    const t = j === countOfCounts.length - 1 ? 2 * r - q : countOfCounts[j + 1][0];
    z.push(n / (0.5 * (t - q)));
  }
  return z;
}

/** Ordinary least-squares line y = intercept + slope·x. Needs two distinct x. */
export function leastSquares(xs: ArrayLike<number>, ys: ArrayLike<number>): { intercept: number; slope: number } {
  assert(xs.length === ys.length && xs.length >= 2, 'least squares needs at least two points');
  let xMean = 0;
  let yMean = 0;
  for (let i = 0; i < xs.length; i++) {
    xMean += xs[i];
    yMean += ys[i];
  }
  xMean /= xs.length;
  yMean /= ys.length;
  let sxy = 0;
  let sxx = 0;
  for (let i = 0; i < xs.length; i++) {
    sxy += (xs[i] - xMean) * (ys[i] - yMean);
    sxx += (xs[i] - xMean) ** 2;
  }
  assert(sxx > 0, 'least squares needs at least two distinct x');
  const slope = sxy / sxx;
  return { intercept: yMean - slope * xMean, slope };
}

/** Simple Good-Turing (Gale & Sampson 1995) of a count-of-counts; see the module comment. */
export function simpleGoodTuring(countOfCounts: CountOfCounts): SimpleGoodTuring {
  checkCountOfCounts(countOfCounts, 'simpleGoodTuring');
  if (countOfCounts.length < 2) {
    return { status: 'unavailable', reason: `the fit needs at least two distinct counts r; there ${countOfCounts.length === 1 ? 'is one' : 'are none'}` };
  }
  const byR = countOfCountsMap(countOfCounts);
  const { occurrences: total } = countOfCountsTotals(countOfCounts);
  const z = averagingTransform(countOfCounts);
  const { intercept, slope } = leastSquares(
    countOfCounts.map(([r]) => Math.log(r)),
    z.map((value) => Math.log(value)),
  );

  const rows: SimpleGoodTuringRow[] = [];
  let useTuring = true;
  let switchR: number | null = null;
  for (let j = 0; j < countOfCounts.length; j++) {
    const [r, nR] = countOfCounts[j];
    const nRNext = nOf(byR, r + 1);
    const lgt = r * (1 + 1 / r) ** (slope + 1);
    const turing = nRNext > 0 ? ((r + 1) * nRNext) / nR : null;
    if (useTuring) {
      if (turing === null) {
        useTuring = false;
      } else {
        const bound = SGT_SWITCH_Z * Math.sqrt((r + 1) ** 2 * (nRNext / nR ** 2) * (1 + nRNext / nR));
        if (Math.abs(turing - lgt) <= bound) useTuring = false;
      }
      if (!useTuring) switchR = r;
    }
    const rStar = useTuring ? (turing as number) : lgt;
    rows.push({ r, nR, z: z[j], turing, lgt, rStar, source: useTuring ? 'turing' : 'lgt', probability: 0 });
  }

  assert(switchR !== null, 'the largest r has no r + 1, so the switch must have happened');
  const unseen = nOf(byR, 1) / total;
  let renormalisedTotal = 0;
  for (const row of rows) renormalisedTotal += row.nR * row.rStar;
  for (const row of rows) row.probability = ((1 - unseen) * row.rStar) / renormalisedTotal;

  return {
    status: 'fitted',
    total,
    unseenMass: unseen,
    intercept,
    slope,
    slopeWarning: slope > SGT_SLOPE_MAX,
    switchR,
    renormalisedTotal,
    rows,
  };
}

/** S(r) = e^a·r^b: the fitted count-of-counts density of a Simple Good-Turing fit at r. */
export function smoothedCountOfCounts(fit: SimpleGoodTuringFit, r: number): number {
  return Math.exp(fit.intercept + fit.slope * Math.log(r));
}
