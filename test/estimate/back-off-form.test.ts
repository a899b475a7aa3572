/**
 * The back-off form gives exactly the probabilities of each method's formula: for every history h
 * (every context seen in training, and contexts never seen, which back off entirely) and every word
 * w of the vocabulary, the lookup in the model equals the formula evaluated directly on the n-gram
 * counts (the reference of support.ts, which shares no code with src/estimate), within 1e-12.
 * For the interpolated methods that is the interpolated formula p(w|h) = α(h,w) + γ(h)·p(w|h');
 * for Katz, its back-off formula.
 */
import { describe, expect, test } from 'vitest';
import { logProb } from '../../src/estimate/model.ts';
import { corpus, countsOf, estimateWith, histories, idsOf, NORMALISED_METHODS, randomCorpus, Reference } from './support.ts';

const CORPORA = [
  { name: 'tiny', sentences: corpus('a b c a\nb a c\na a b\nc b a b c\na b'), heldOut: corpus('a c b\nb b a c') },
  { name: 'random', sentences: randomCorpus(11, 120, 15, 10), heldOut: randomCorpus(12, 30, 15, 10) },
];

describe.each(CORPORA)('back-off form = formula on the $name corpus', ({ sentences, heldOut }) => {
  for (const method of NORMALISED_METHODS) {
    test.each([1, 2, 3, 4])(`${method}, order %i, without and with cutoffs`, (order) => {
      const counts = countsOf(sentences, order);
      const words = counts.vocabulary.words;
      for (const cutoffs of [undefined, [1, 2, 2, 3].slice(0, order)]) {
        const model = estimateWith(method, counts, heldOut, cutoffs);
        const reference = new Reference(sentences, order, words, cutoffs);
        let compared = 0;
        for (const history of histories(sentences, order, words, 20, 7 * order)) {
          const ids = idsOf(counts, history);
          for (let word = 1; word < words.length; word++) {
            const expected = reference.probability(model.parameters, history, words[word]);
            const actual = 10 ** logProb(model, ids, word).log10Prob;
            if (Math.abs(actual - expected) > 1e-12) {
              throw new Error(`${method} order ${order} cutoffs ${cutoffs}: p(${words[word]} | ${history.join(' ')}) = ${actual}, formula ${expected}`);
            }
            compared++;
          }
        }
        expect(compared).toBeGreaterThanOrEqual(words.length - 1);
      }
    });
  }
});
