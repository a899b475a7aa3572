/**
 * The back-off form gives exactly the probabilities of each method's formula: for every history h
 * (every context seen in training, and contexts never seen, which back off entirely) and every word
 * w of the vocabulary, the lookup in the model equals the formula evaluated directly on the n-gram
 * counts (the reference of support.ts, which shares no code with src/estimate), within 1e-12.
 * For the interpolated methods that is the interpolated formula p(w|h) = α(h,w) + γ(h)·p(w|h');
 * for Katz, its back-off formula.
 */
import { describe, expect, test } from 'vitest';
import { BackOffLog10Memo, log10BackOffOf } from '../../src/estimate/back-off-form.ts';
import { logProb } from '../../src/estimate/model.ts';
import { contextStarts } from '../../src/estimate/rows.ts';
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

describe('BackOffLog10Memo', () => {
  test('gives exactly log10BackOffOf for every weight, repeated or not, whatever shares its slot', () => {
    // 4,096 slots and 50,000 distinct weights: most slots are taken by several weights in turn, so a
    // memo that answered from a slot without checking whose weight it holds would fail here.
    const memo = new BackOffLog10Memo();
    let seed = 12345;
    const next = () => (seed = (Math.imul(seed, 1103515245) + 12345) >>> 0) / 2 ** 32;
    const weights = [0, 1, 0.5, 1e-300, Number.MIN_VALUE];
    for (let i = 0; i < 50_000; i++) weights.push(next());
    // Ratios of small counts, as contexts' weights are: these come back again and again.
    for (let d = 1; d <= 40; d++) for (let n = 1; n <= d; n++) weights.push(n / d);
    for (let round = 0; round < 3; round++) {
      for (const w of weights) expect(memo.log10(w)).toBe(log10BackOffOf(w));
    }
    expect(memo.log10(1)).toBe(0);
    expect(memo.log10(0)).toBe(-Infinity);
  });
});

describe('contextStarts into a scratch array', () => {
  test('gives the same starts as without one, for every order and for windows of every length', () => {
    for (const order of [2, 3, 4]) {
      const counts = countsOf(randomCorpus(order, 200, 6, 8), order);
      const table = counts.tables[order - 1];
      const rows = table.ids.length / order;
      const scratch = new Uint32Array(rows + 1).fill(7);
      for (const length of [0, 1, 2, Math.floor(rows / 3), rows]) {
        const expected = contextStarts(table.ids, order, length);
        expect(Array.from(contextStarts(table.ids, order, length, scratch))).toEqual(Array.from(expected));
      }
    }
  });
});
