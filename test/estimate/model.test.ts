/**
 * The back-off lookup (DESIGN.md): the history is the last min(N−1, i) tokens; a context never seen
 * backs off entirely; at most N probes; the answering order is the longest n-gram in the model.
 * Stupid backoff: scores by Brants et al.'s rule, labelled as not normalised.
 */
import { describe, expect, test } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { estimate } from '../../src/estimate/estimate.ts';
import { checkModel, logProb, modelRowCount, sentenceLogProbs, uniformModel, type LanguageModel } from '../../src/estimate/model.ts';
import { searchRows } from '../../src/estimate/rows.ts';
import { perplexity } from '../../src/score/perplexity.ts';
import { seededRandom } from '../support/seeded.ts';
import { corpus, idsOf, randomCorpus } from './support.ts';

/** True when the n-gram `ids` is stored in the model's table of its order. */
function stored(model: LanguageModel, ids: number[]): boolean {
  const table = model.orders[ids.length - 1];
  return searchRows(table.ids, ids.length, modelRowCount(table), ids, 0) >= 0;
}

describe('back-off lookup', () => {
  const sentences = randomCorpus(31, 150, 14, 10);
  const counts = countCorpus(sentences, 4);
  const model = estimate(counts, { fallback: true });
  const size = counts.vocabulary.words.length - 1;
  const random = seededRandom(32);
  const randomHistory = (length: number): number[] => Array.from({ length }, (_, i) => (i === 0 && random() < 0.3 ? 0 : 1 + Math.floor(random() * size)));

  test('at most N probes; the order that answers is that of the longest stored n-gram h w', () => {
    checkModel(model);
    for (let trial = 0; trial < 2000; trial++) {
      const history = randomHistory(Math.floor(random() * 6));
      const word = 1 + Math.floor(random() * size);
      const result = logProb(model, history, word);
      expect(result.probes).toBeLessThanOrEqual(model.order);
      const context = history.slice(Math.max(0, history.length - (model.order - 1)));
      let longest = 1;
      for (let k = 1; k <= context.length; k++) if (stored(model, [...context.slice(context.length - k), word])) longest = k + 1;
      expect(result.order).toBe(longest);
    }
  });

  test('only the last N−1 tokens of the history count', () => {
    for (let trial = 0; trial < 300; trial++) {
      const history = randomHistory(3 + Math.floor(random() * 5));
      const word = 1 + Math.floor(random() * size);
      expect(logProb(model, history, word).log10Prob).toBe(logProb(model, history.slice(-3), word).log10Prob);
    }
  });

  test('a context never seen in training backs off entirely to the shorter one', () => {
    let checked = 0;
    for (let trial = 0; trial < 2000 && checked < 200; trial++) {
      const history = randomHistory(3);
      if (stored(model, history)) continue; // seen as a context (or at least as an n-gram)
      const table = model.orders[3];
      let isContext = false;
      for (let row = 0; row < modelRowCount(table) && !isContext; row++) {
        isContext = table.ids[row * 4] === history[0] && table.ids[row * 4 + 1] === history[1] && table.ids[row * 4 + 2] === history[2];
      }
      if (isContext) continue;
      for (let word = 1; word <= size; word++) expect(logProb(model, history, word).log10Prob).toBe(logProb(model, history.slice(1), word).log10Prob);
      checked++;
    }
    expect(checked).toBeGreaterThan(50);
  });

  test('<s> is never predicted; ids outside the vocabulary are refused', () => {
    expect(() => logProb(model, [0], 0)).toThrow(RangeError);
    expect(() => logProb(model, [0], size + 1)).toThrow(RangeError);
    expect(model.orders[0].log10Prob[0]).toBe(-Infinity);
  });

  test('a sentence is scored token by token with its wrapped history', () => {
    const words = idsOf(counts, sentences[0]);
    const scores = sentenceLogProbs(model, words);
    expect(scores.length).toBe(words.length + 1);
    const wrapped = [0, ...words, counts.vocabulary.eosId];
    scores.forEach((score, i) => expect(score).toBe(logProb(model, wrapped.slice(0, i + 1), wrapped[i + 1]).log10Prob));
  });
});

test('a model that gives every word of a V-word vocabulary the same probability has perplexity V (common practice, no source)', () => {
  const sentences = randomCorpus(41, 50, 30, 8);
  const model = uniformModel(countCorpus(sentences, 1).vocabulary);
  const size = model.vocabulary.words.length - 1;
  const text = [...randomCorpus(42, 40, 45, 8), ['never', 'seen', 'words']];
  const result = perplexity(model, text);
  expect(result.oov).toBeGreaterThan(0);
  expect(result.perplexity).toBeCloseTo(size, 9);
  expect(result.perplexityWithUnk).toBeCloseTo(size, 9);
});

describe('stupid backoff (Brants et al. 2007): scores, not probabilities', () => {
  // Corpus  <s> a b </s>   <s> a a b </s>   <s> b </s>;  α = 0.4.
  // S(w | h) = c(h w)/c(h) when seen, else α·S(w | h'); S(w) = c(w)/9 (9 predicted tokens).
  const counts = countCorpus(corpus('a b\na a b\nb'), 2);
  const model = estimate(counts, { method: 'stupid-backoff' });
  const score = (history: string, word: string): number => 10 ** logProb(model, idsOf(counts, history.split(' ')), idsOf(counts, [word])[0]).log10Prob;

  test('by hand', () => {
    expect(model.normalised).toBe(false);
    expect(model.parameters).toEqual({ method: 'stupid-backoff', alpha: 0.4 });
    expect(score('<s>', 'a')).toBeCloseTo(2 / 3, 12); // c(<s> a)/c(<s>) = 2/3
    expect(score('<s>', 'b')).toBeCloseTo(1 / 3, 12);
    expect(score('<s>', '</s>')).toBeCloseTo(0.4 * (3 / 9), 12); // α·S(</s>) = 2/15
    expect(score('b', '</s>')).toBeCloseTo(1, 12);
    // As in the paper, α applies on the step back from an unseen context too: S(a | <unk>) = α·S(a).
    expect(score('<unk>', 'a')).toBeCloseTo(0.4 * (3 / 9), 12);
    expect(score('<s>', '<unk>')).toBe(0); // never seen: log10 −∞
    // Not a distribution: after <s> the scores add up to 2/3 + 1/3 + 2/15 + 0 = 17/15.
    let sum = 0;
    for (const word of ['a', 'b', '</s>', '<unk>']) sum += score('<s>', word);
    expect(sum).toBeCloseTo(17 / 15, 12);
  });

  test('refused by perplexity, which needs a normalised model', () => {
    expect(() => perplexity(model, [['a', 'b']])).toThrow(QuernError);
    expect(() => perplexity(model, [['a', 'b']])).toThrow(/needs a normalised model; this stupid-backoff model gives scores, not probabilities/);
  });
});

describe('cutoffs and the vocabulary cap are applied and recorded', () => {
  const sentences = randomCorpus(51, 200, 20, 10);

  test('n-grams below the minimum count are not stored, and are predicted through the shorter context', () => {
    const counts = countCorpus(sentences, 3);
    const model = estimate(counts, { method: 'witten-bell', cutoffs: [1, 2, 3] });
    expect(model.cutoffs).toEqual([1, 2, 3]);
    for (let n = 2; n <= 3; n++) {
      const table = counts.tables[n - 1];
      let dropped = 0;
      for (let row = 0; row < table.counts.length; row++) {
        const ids = Array.from(table.ids.subarray(row * n, (row + 1) * n));
        expect(stored(model, ids)).toBe(table.counts[row] >= n);
        if (table.counts[row] < n) {
          dropped++;
          expect(logProb(model, ids.slice(0, n - 1), ids[n - 1]).order).toBeLessThan(n);
        }
      }
      expect(dropped).toBeGreaterThan(0);
    }
  });

  test('bad cutoffs are refused with the rule they break', () => {
    const counts = countCorpus(sentences, 3);
    expect(() => estimate(counts, { cutoffs: [1, 2] })).toThrow(/one minimum count per order, 3 in all/);
    expect(() => estimate(counts, { cutoffs: [2, 2, 2] })).toThrow(/order 1 takes no cutoff/);
    expect(() => estimate(counts, { cutoffs: [1, 3, 2] })).toThrow(/must not decrease with the order/);
    expect(() => estimate(counts, { cutoffs: [1, 1.5, 2] })).toThrow(/an integer ≥ 1/);
  });

  test('a vocabulary cap maps rare words to <unk>; the model records it; Katz then renormalises its unigrams', () => {
    const counts = countCorpus(sentences, 2, { top: 8 });
    expect(counts.vocabulary.words.length).toBe(8 + 3);
    const model = estimate(counts, { method: 'katz', fallback: true });
    expect(model.vocabularyCap).toEqual({ top: 8 });
    // Every vocabulary word, <unk> included, now has a count: the unigram level has no unseen word.
    expect(model.parameters).toMatchObject({ method: 'katz', unigramLevel: 'renormalised' });
    let sum = 0;
    for (let word = 1; word < model.vocabulary.words.length; word++) sum += 10 ** logProb(model, [], word).log10Prob;
    expect(sum).toBeCloseTo(1, 12);
  });
});
