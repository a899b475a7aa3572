/**
 * Every normalised method gives a distribution that sums to 1 over the whole vocabulary (with `</s>`
 * and `<unk>`, without `<s>`), after every context seen in training and after contexts never seen,
 * at orders 1 to 5, with and without count cutoffs: exhaustively, within 1e-9.
 */
import { describe, expect, test } from 'vitest';
import { logProb } from '../../src/estimate/model.ts';
import { checkModel } from '../../src/estimate/model.ts';
import { corpus, countsOf, estimateWith, histories, idsOf, NORMALISED_METHODS, randomCorpus } from './support.ts';

const TINY = corpus(`
  the ferry left at dawn
  the ferry came back
  at dawn the gulls came
  gulls left
`);

const CORPORA: Array<{ name: string; sentences: string[][]; heldOut: string[][] }> = [
  { name: 'tiny', sentences: TINY, heldOut: corpus('the gulls left at dawn\nthe ferry came') },
  { name: 'random, 12 types', sentences: randomCorpus(1, 60, 12, 9), heldOut: randomCorpus(2, 15, 12, 9) },
  { name: 'random, 25 types', sentences: randomCorpus(3, 150, 25, 12), heldOut: randomCorpus(4, 30, 25, 12) },
];

const CUTOFFS = [1, 2, 2, 3, 3];

describe.each(CORPORA)('Σ_w p(w | h) = 1 on the $name corpus', ({ sentences, heldOut }) => {
  for (const method of NORMALISED_METHODS) {
    test.each([1, 2, 3, 4, 5])(`${method}, order %i, without and with cutoffs`, (order) => {
      const counts = countsOf(sentences, order);
      const words = counts.vocabulary.words;
      const size = words.length - 1;
      for (const cutoffs of [undefined, CUTOFFS.slice(0, order)]) {
        const model = estimateWith(method, counts, heldOut, cutoffs);
        checkModel(model);
        expect(model.normalised).toBe(true);
        const checked = histories(sentences, order, words, 25, order);
        expect(checked.length).toBeGreaterThan(order === 1 ? 0 : 5);
        for (const history of checked) {
          const ids = idsOf(counts, history);
          let sum = 0;
          for (let word = 1; word <= size; word++) sum += 10 ** logProb(model, ids, word).log10Prob;
          if (Math.abs(sum - 1) > 1e-9) throw new Error(`${method} order ${order} cutoffs ${cutoffs}: Σ p(· | ${history.join(' ')}) = ${sum}`);
        }
      }
    });
  }
});
