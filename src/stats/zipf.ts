/**
 * Zipf fit of the unigram distribution: the least-squares line log10 count = a − s·log10 rank over
 * the most frequent words, whose exponent s is close to 1 for natural-language text.
 *
 * The fit covers ranks 1..min(V, ZIPF_RANKS_MAX). The sentence-end marker `</s>` and `<unk>` are
 * part of the vocabulary counts and cannot be told apart from words there (the input holds counts
 * only), so they are fitted like any word: `</s>` is one point among the first ranks (it occurs
 * once per sentence), which moves the slope very little. Words with count 0 (possible for `<unk>`)
 * have no logarithm and are left out.
 */
import { QuernError } from '../errors.ts';
import { leastSquares } from './good-turing.ts';

/** Ranks fitted at most: the head of the distribution, where the power law holds best; the long
 *  tail of words seen once or twice forms flat steps that would dominate the fit by their number. */
export const ZIPF_RANKS_MAX = 10_000;

/** Ranks per factor of ten kept in the report's rank-frequency curve: enough for a smooth
 *  log-log plot, and the curve stays under 200 points even for a vocabulary of 10^9 words. */
export const ZIPF_CURVE_RANKS_PER_DECADE = 20;

/** A Zipf fit over the top ranks. */
export interface ZipfFit {
  /** s: count falls as rank^(−s). */
  exponent: number;
  /** log10 of the fitted count at rank 1 (a). */
  interceptLog10: number;
  /** Ranks that went into the fit (with count > 0). */
  ranksFitted: number;
  /** Highest rank considered, min(V, rankMax). */
  rankMax: number;
  /** Share of the variance of log10 count the line explains (R²). */
  rSquared: number;
  /** [rank, count] at about ZIPF_CURVE_RANKS_PER_DECADE log-spaced ranks, from rank 1 to the last
   *  word with a count > 0 (the last included), for charts. */
  curve: Array<[number, number]>;
}

/** Counts sorted from the largest, the rank order of the fit. */
export function rankedCounts(unigramCounts: readonly number[]): Float64Array {
  const sorted = Float64Array.from(unigramCounts).sort();
  return sorted.reverse();
}

/** [rank, count] at log-spaced ranks (see ZipfFit.curve) of counts sorted from the largest. */
export function rankFrequencyCurve(ranked: Float64Array): Array<[number, number]> {
  let rankLast = 0;
  while (rankLast < ranked.length && ranked[rankLast] > 0) rankLast += 1;
  const curve: Array<[number, number]> = [];
  let rankPrevious = 0;
  for (let step = 0; ; step++) {
    const rank = Math.min(rankLast, Math.round(10 ** (step / ZIPF_CURVE_RANKS_PER_DECADE)));
    if (rank > rankPrevious) {
      curve.push([rank, ranked[rank - 1]]);
      rankPrevious = rank;
    }
    if (rank >= rankLast) break;
  }
  return curve;
}

/** Fits the Zipf line to the unigram counts; null when fewer than two ranks have a count > 0. */
export function fitZipf(unigramCounts: readonly number[], rankMax: number = ZIPF_RANKS_MAX): ZipfFit | null {
  if (!Number.isInteger(rankMax) || rankMax < 2) throw new QuernError('config', `rankMax must be an integer ≥ 2 (got ${rankMax})`);
  const ranked = rankedCounts(unigramCounts);
  const rankLast = Math.min(ranked.length, rankMax);
  const xs: number[] = [];
  const ys: number[] = [];
  for (let index = 0; index < rankLast; index++) {
    if (ranked[index] <= 0) break;
    xs.push(Math.log10(index + 1));
    ys.push(Math.log10(ranked[index]));
  }
  if (xs.length < 2) return null;
  const { intercept, slope } = leastSquares(xs, ys);
  let yMean = 0;
  for (const y of ys) yMean += y;
  yMean /= ys.length;
  let residual = 0;
  let spread = 0;
  for (let i = 0; i < xs.length; i++) {
    residual += (ys[i] - (intercept + slope * xs[i])) ** 2;
    spread += (ys[i] - yMean) ** 2;
  }
  return {
    curve: rankFrequencyCurve(ranked),
    exponent: -slope,
    interceptLog10: intercept,
    ranksFitted: xs.length,
    rankMax: rankLast,
    rSquared: spread === 0 ? 1 : 1 - residual / spread,
  };
}
