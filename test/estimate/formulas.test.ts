/**
 * The estimators use the published discount formulas of src/stats/discounts.ts on the right counts:
 *  - Chen & Goodman 1998: D1, D2, D3+ of modified Kneser-Ney, from the continuation counts at the
 *    lower orders and the raw counts at the highest;
 *  - Kneser-Ney with one discount: D = n1/(n1 + 2·n2) of the same counts;
 *  - Ney, Essen & Kneser 1994: D = n1/(n1 + 2·n2) of the raw counts (absolute discounting);
 *  - Katz 1987: d_r = (r* / r − A)/(1 − A) of the raw counts.
 * Each test computes the count-of-counts itself from the naive counts of test/stats/fixtures.ts,
 * calls the stats functions, and checks both the recorded values and that the model's probabilities
 * are those of the formula with these values. Then the discount choices (undefined, out of range,
 * given, fallback), interpolation weights, and EM.
 */
import { describe, expect, test } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { estimateAbsoluteDiscounting } from '../../src/estimate/absolute-discounting.ts';
import { countCorpus, sentenceIds, wordIdMap } from '../../src/estimate/counts.ts';
import { chooseDiscounts, MODIFIED_KNESER_NEY_RULE } from '../../src/estimate/discount-choice.ts';
import { estimate } from '../../src/estimate/estimate.ts';
import { estimateJelinekMercer, formatInterpolationWeights } from '../../src/estimate/jelinek-mercer.ts';
import { estimateKatz } from '../../src/estimate/katz.ts';
import { estimateKneserNey } from '../../src/estimate/kneser-ney.ts';
import { logProb, modelRowCount, sentenceLogProbs, type InterpolationWeights, type LanguageModel, type MethodParameters, type OrderDiscounts } from '../../src/estimate/model.ts';
import { estimateModifiedKneserNey } from '../../src/estimate/modified-kneser-ney.ts';
import { countOfCountsFromCounts } from '../../src/stats/count-of-counts.ts';
import { absoluteDiscount, katzDiscounts, modifiedKneserNeyDiscounts } from '../../src/stats/discounts.ts';
import { corpus, estimateWith, histories, idsOf, markovCorpus, Reference } from './support.ts';

const ORDER = 3;
// Large enough that every discount of every order is defined and in range.
const SENTENCES = markovCorpus(21, 1500, 3000, 12);
const HELD_OUT = markovCorpus(22, 200, 3000, 12);
const COUNTS = countCorpus(SENTENCES, ORDER);
const REFERENCE = new Reference(SENTENCES, ORDER, COUNTS.vocabulary.words);
const WORDS = COUNTS.vocabulary.words;

/** The counts of `order` from the naive reference: Kneser-Ney's or raw. */
function referenceCounts(order: number, kind: 'raw' | 'kneser-ney'): number[] {
  return [...REFERENCE.raw[order - 1].keys()].map((key) => (kind === 'raw' ? REFERENCE.raw[order - 1].get(key)! : REFERENCE.kneserNeyCount(key, order)));
}

/** The model's probabilities equal the reference formula run with `parameters` (discounts computed by the test). */
function expectFormula(model: LanguageModel, parameters: MethodParameters): void {
  for (const history of histories(SENTENCES, ORDER, WORDS, 10, 5).filter((_, index) => index % 400 === 0)) {
    const ids = idsOf(COUNTS, history);
    for (let word = 1; word < WORDS.length; word++) {
      const expected = REFERENCE.probability(parameters, history, WORDS[word]);
      expect(Math.abs(10 ** logProb(model, ids, word).log10Prob - expected)).toBeLessThan(1e-12);
    }
  }
}

function discountsOf(model: LanguageModel): OrderDiscounts[] {
  const parameters = model.parameters;
  if (!('discounts' in parameters)) throw new Error(`${parameters.method} has no discounts`);
  return parameters.discounts;
}

describe('published discount formulas, read off the right counts', () => {
  test('modified Kneser-Ney: Chen & Goodman 1998, D1, D2, D3+ from n1..n4 of continuation (lower orders) and raw (highest) counts', () => {
    const model = estimateModifiedKneserNey(COUNTS);
    const discounts = discountsOf(model);
    for (let n = 1; n <= ORDER; n++) {
      const expected = modifiedKneserNeyDiscounts(countOfCountsFromCounts(referenceCounts(n, 'kneser-ney')));
      expect(discounts[n - 1]).toMatchObject({ source: 'counts', counts: n === ORDER ? 'raw' : 'continuation', problems: [] });
      expect(discounts[n - 1].values).toEqual([expected.d1, expected.d2, expected.d3Plus]);
    }
    // Kneser-Ney's counts differ from the raw ones, so the discounts do too.
    expect(discounts[0].values).not.toEqual(Object.values(modifiedKneserNeyDiscounts(countOfCountsFromCounts(referenceCounts(1, 'raw')))).slice(5, 8));
    expectFormula(model, { method: 'modified-kneser-ney', discounts });
  });

  test('Kneser-Ney with one discount per order: D = n1/(n1 + 2·n2) of the Kneser-Ney counts', () => {
    const model = estimateKneserNey(COUNTS);
    const discounts = discountsOf(model);
    for (let n = 1; n <= ORDER; n++) {
      const expected = absoluteDiscount(countOfCountsFromCounts(referenceCounts(n, 'kneser-ney')));
      expect(discounts[n - 1].values).toEqual([expected.discount]);
      expect(discounts[n - 1].source).toBe('counts');
    }
    expectFormula(model, { method: 'kneser-ney', discounts });
  });

  test('absolute discounting: Ney, Essen & Kneser 1994, D = n1/(n1 + 2·n2) of the raw counts', () => {
    const model = estimateAbsoluteDiscounting(COUNTS);
    const discounts = discountsOf(model);
    for (let n = 1; n <= ORDER; n++) {
      const expected = absoluteDiscount(countOfCountsFromCounts(referenceCounts(n, 'raw')));
      expect(discounts[n - 1].values).toEqual([expected.discount]);
      expect(discounts[n - 1].counts).toBe('raw');
    }
    expectFormula(model, { method: 'absolute-discounting', discounts });
  });

  test('Katz 1987: d_r = (r* / r − A)/(1 − A) of the raw counts, k = 5 by default and configurable', () => {
    for (const k of [5, 3]) {
      const model = estimateKatz(COUNTS, k === 5 ? {} : { k });
      const discounts = discountsOf(model);
      for (let n = 1; n <= ORDER; n++) {
        const expected = katzDiscounts(countOfCountsFromCounts(referenceCounts(n, 'raw')), k);
        expect(discounts[n - 1].values).toEqual(expected.discounts.map((d) => d.ratio));
        expect(discounts[n - 1]).toMatchObject({ source: 'counts', counts: 'raw' });
      }
      expect(model.parameters).toMatchObject({ method: 'katz', k });
      expectFormula(model, model.parameters);
    }
  });
});

describe('discounts that cannot be used', () => {
  const TINY = countCorpus(corpus('a b\na a b\nb'), 3);

  test('an undefined discount stops with the numbers and the two choices', () => {
    let error: unknown;
    try {
      estimateModifiedKneserNey(TINY);
    } catch (caught) {
      error = caught;
    }
    expect(error).toBeInstanceOf(QuernError);
    expect((error as QuernError).code).toBe('config');
    const message = (error as QuernError).message;
    // Order 1 is the first to fail: its continuation counts a 2, b 2, </s> 1 give n1 = 1, n2 = 2, n3 = n4 = 0.
    expect(message).toContain('modified Kneser-Ney cannot use the discounts of order 1');
    expect(message).toContain('continuation counts of order 1 (n1 = 1, n2 = 2, n3 = 0, n4 = 0)');
    expect(message).toContain('D3+ is undefined: n3 = 0');
    expect(message).toContain('give the discounts of order 1 yourself (0 < D1 < 1, 0 < D2 < 2, 0 < D3+ < 3)');
    expect(message).toContain('documented fallback values (D1 = 0.5, D2 = 1, D3+ = 1.5)');
  });

  test('a discount out of range stops too, saying which bound it breaks', () => {
    const formula = { order: 2, values: [0.4, 1.2, 3], undefinedReasons: [], counts: 'raw' as const, countOfCounts: { n1: 10, n2: 5, n3: 2, n4: 0 }, ngrams: 17 };
    expect(() => chooseDiscounts(MODIFIED_KNESER_NEY_RULE, formula, {})).toThrow(/D3\+ = 3 is not below 3/);
    const fine = chooseDiscounts(MODIFIED_KNESER_NEY_RULE, { ...formula, values: [0.4, 1.2, 2.9] }, {});
    expect(fine).toMatchObject({ source: 'counts', values: [0.4, 1.2, 2.9], problems: [] });
    // Katz: one sentence "a b c c d d" gives unigram counts a 1, b 1, </s> 1, c 2, d 2: n1 = 3, n2 = 2,
    // n3 = 0, so with k = 2, A = 0 and d1 = (2·2/3)/1 = 4/3 > 1, while d2 needs n3 > 0.
    const katzCounts = countCorpus([['a', 'b', 'c', 'c', 'd', 'd']], 1);
    expect(() => estimateKatz(katzCounts, { k: 2 })).toThrow(/d2 is undefined: n3 = 0; d1 = 1\.33333 is above 1\. Choices: give the discounts of order 1 yourself \(0 < d1 ≤ 1, 0 < d2 ≤ 1\)/);
  });

  test('with the fallback allowed, an order whose discounts cannot all be used takes the documented set, and says why', () => {
    const model = estimateModifiedKneserNey(TINY, { fallback: true });
    const discounts = discountsOf(model);
    // n3 = n4 = 0: D3+ divides by n3, and D2 = 2 − 3Y·0/n2 = 2 reaches the count it discounts.
    expect(discounts[0]).toMatchObject({ source: 'fallback', values: [0.5, 1, 1.5], problems: ['D3+ is undefined: n3 = 0', 'D2 = 2 is not below 2'] });
    expect(discounts[0].fromCounts[2]).toBeNull();
    const katz = estimateKatz(countCorpus([['a', 'b', 'c', 'c', 'd', 'd']], 1), { k: 2, fallback: true });
    expect(discountsOf(katz)[0]).toMatchObject({ source: 'fallback', values: [1 / 2, 3 / 4] });
    // Kneser-Ney's single discounts are defined here: D = n1/(n1 + 2·n2) = 1/(1 + 4) at order 1,
    // 2/(2 + 6) at order 2 (continuation counts), 4/(4 + 2) at order 3 (raw counts).
    const single = discountsOf(estimateKneserNey(TINY, { fallback: true }));
    expect(single.map((d) => d.source)).toEqual(['counts', 'counts', 'counts']);
    expect(single.map((d) => d.values[0])).toEqual([1 / 5, 2 / 8, 4 / 6]);
  });

  test('given discounts are checked: one per name, each in its range', () => {
    expect(() => estimateModifiedKneserNey(TINY, { discounts: [[0.5, 1]] })).toThrow(/give 3 discounts for order 1 \(D1, D2, D3\+\), got 2/);
    expect(() => estimateModifiedKneserNey(TINY, { fallback: true, discounts: [null, [0.5, 2.5, 1]] })).toThrow(/the given D2 of order 2 is 2\.5, outside its valid range 0 < D2 < 2/);
    expect(() => estimateKatz(TINY, { k: 0 })).toThrow(QuernError);
    expect(() => estimateKneserNey(TINY, { discounts: [[0.5], [0.5], [0.5], [0.5]] })).toThrow(/discounts given for 4 orders, but the model has 3/);
    expect(() => estimate(TINY, { method: 'stupid-backoff', alpha: 1.5 })).toThrow(/alpha must lie in \(0, 1\]/);
  });
});

describe('interpolation weights', () => {
  test('discounted methods: in every context, α(h, w) ≥ 0 for each kept w, γ(h) in [0, 1], Σ α + γ = 1', () => {
    for (const method of ['modified-kneser-ney', 'kneser-ney', 'absolute-discounting', 'witten-bell', 'jelinek-mercer'] as const) {
      const model = estimateWith(method, COUNTS, HELD_OUT, [1, 2, 2]);
      for (let n = 2; n <= ORDER; n++) {
        const table = model.orders[n - 1];
        const sums = new Map<number, number>();
        for (let row = 0; row < modelRowCount(table); row++) {
          const ids = Array.from(table.ids.subarray(row * n, (row + 1) * n));
          const context = table.contextRow[row];
          const gamma = 10 ** model.orders[n - 2].log10BackOff[context];
          expect(gamma).toBeGreaterThanOrEqual(0);
          expect(gamma).toBeLessThanOrEqual(1);
          const alpha = 10 ** table.log10Prob[row] - gamma * 10 ** logProb(model, ids.slice(1, n - 1), ids[n - 1]).log10Prob;
          expect(alpha).toBeGreaterThanOrEqual(-1e-15);
          sums.set(context, (sums.get(context) ?? gamma) + alpha);
        }
        for (const sum of sums.values()) expect(sum).toBeCloseTo(1, 9);
      }
    }
  });

  function heldOutIds(sentences: string[][]): number[][] {
    const idOf = wordIdMap(COUNTS.vocabulary);
    return sentences.map((words) => sentenceIds(idOf, COUNTS.vocabulary, words).ids);
  }

  /** Held-out log10 likelihood of a model, by scoring the held-out sentences with it. */
  function heldOutLikelihood(model: LanguageModel): number {
    let sum = 0;
    for (const sentence of heldOutIds(HELD_OUT)) for (const value of sentenceLogProbs(model, sentence)) sum += value;
    return sum;
  }

  function weightsOf(model: LanguageModel): InterpolationWeights {
    if (model.parameters.method !== 'jelinek-mercer') throw new Error('not Jelinek-Mercer');
    return model.parameters.weights;
  }

  test.each([
    { bucketed: false, cutoffs: undefined },
    { bucketed: true, cutoffs: undefined },
    { bucketed: true, cutoffs: [1, 2, 3] },
  ])('Jelinek-Mercer EM (bucketed: $bucketed, cutoffs: $cutoffs): the held-out likelihood never falls, and the fit is a maximum', ({ bucketed, cutoffs }) => {
    // A tight tolerance, so that the fit is close enough to the maximum for the check below.
    const model = estimateJelinekMercer(COUNTS, { heldOut: heldOutIds(HELD_OUT), bucketed, cutoffs, tolerance: 1e-10, iterationsMax: 1000 });
    const weights = weightsOf(model);
    const trace = weights.heldOutLog10Likelihood;
    expect(trace.length).toBe(weights.iterations + 1);
    expect(weights.iterations).toBeGreaterThan(2);
    for (let i = 1; i < trace.length; i++) expect(trace[i]).toBeGreaterThanOrEqual(trace[i - 1] - 1e-9 * Math.abs(trace[i - 1]));
    expect(trace[trace.length - 1]).toBeGreaterThan(trace[0]);
    // EM's own likelihood is that of the model it builds.
    const fitted = heldOutLikelihood(model);
    expect(fitted).toBeCloseTo(trace[trace.length - 1], 6);
    // Weights in [0, 1]; each order's weights, by bucket when bucketed.
    for (const { order, buckets } of weights.orders) {
      expect(buckets.length === 1 || (bucketed && order > 1)).toBe(true);
      for (const bucket of buckets) {
        expect(bucket.weight).toBeGreaterThanOrEqual(0);
        expect(bucket.weight).toBeLessThanOrEqual(1);
      }
    }
    // A maximum: moving any weight that held-out tokens informed by ±0.05 does not raise the
    // likelihood by more than EM's stopping tolerance (a weight whose contexts lost all their
    // n-grams to a cutoff has no effect at all).
    for (const [index, { buckets }] of weights.orders.entries()) {
      for (const [bucketIndex, bucket] of buckets.entries()) {
        if (bucket.heldOutTokens < 20) continue;
        for (const step of [-0.05, 0.05]) {
          const moved = structuredClone(weights);
          moved.orders[index].buckets[bucketIndex].weight = Math.min(1, Math.max(0, bucket.weight + step));
          expect(heldOutLikelihood(estimateJelinekMercer(COUNTS, { weights: moved, cutoffs }))).toBeLessThanOrEqual(fitted + 1e-6 * Math.abs(fitted));
        }
      }
    }
    const lines = formatInterpolationWeights(weights);
    expect(lines[0]).toContain(`${weights.heldOutTokens} held-out tokens in ${weights.iterations} EM iterations`);
    for (let n = 1; n <= ORDER; n++) expect(lines.some((line) => line.startsWith(`order ${n}, `))).toBe(true);
  });

  test('Jelinek-Mercer: the weights of the N orders and the uniform distribution are ≥ 0 and sum to 1 on every path', () => {
    const weights = weightsOf(estimateJelinekMercer(COUNTS, { heldOut: heldOutIds(HELD_OUT), bucketed: true }));
    // Every combination of buckets a history can meet at orders 3, 2, 1.
    for (const top of weights.orders[2].buckets) {
      for (const middle of weights.orders[1].buckets) {
        const lambdas = [top.weight, middle.weight, weights.orders[0].buckets[0].weight];
        const mixture: number[] = [];
        let rest = 1;
        for (const lambda of lambdas) {
          mixture.push(rest * lambda);
          rest *= 1 - lambda;
        }
        mixture.push(rest); // the uniform distribution
        for (const weight of mixture) expect(weight).toBeGreaterThanOrEqual(0);
        expect(mixture.reduce((a, b) => a + b, 0)).toBeCloseTo(1, 12);
      }
    }
  });

  test('Jelinek-Mercer needs held-out text or weights, not both', () => {
    expect(() => estimateJelinekMercer(COUNTS, {})).toThrow(/needs held-out text/);
    const weights = weightsOf(estimateJelinekMercer(COUNTS, { heldOut: heldOutIds(HELD_OUT) }));
    expect(() => estimateJelinekMercer(COUNTS, { weights, heldOut: heldOutIds(HELD_OUT) })).toThrow(/not both/);
    expect(() => estimateJelinekMercer(COUNTS, { heldOut: [] })).toThrow(/none was given/);
  });
});
