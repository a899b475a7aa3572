/**
 * Modified Kneser-Ney and Katz back-off on a three-sentence corpus, every probability and back-off
 * weight worked out by hand below as a fraction, and asserted to 1e-12.
 *
 * Corpus (DESIGN.md wrapping):   <s> a b </s>      <s> a a b </s>      <s> b </s>
 * Vocabulary: a, b, </s>, <unk>, so V = 4 (`<unk>` never seen).
 *
 * Raw counts
 *   unigrams  a 3, b 3, </s> 3                                    (`<s>` is never a unigram)
 *   bigrams   <s> a 2, <s> b 1, a a 1, a b 2, b </s> 3
 *   trigrams  <s> a a 1, <s> a b 1, a a b 1, a b </s> 2, <s> b </s> 1
 * Continuation counts N1+(• x)
 *   bigrams   a a 1 (<s>), a b 2 (<s>, a), b </s> 2 (a, <s>)      (<s> a, <s> b keep raw counts 2, 1)
 *   unigrams  a 2 (<s>, a), b 2 (a, <s>), </s> 1 (b), <unk> 0
 */
import { describe, expect, test } from 'vitest';
import { countCorpus, type CountTables } from '../../src/estimate/counts.ts';
import { estimateKatz } from '../../src/estimate/katz.ts';
import { logProb, modelRowCount, type LanguageModel } from '../../src/estimate/model.ts';
import { estimateModifiedKneserNey } from '../../src/estimate/modified-kneser-ney.ts';
import { corpus, idsOf } from './support.ts';

const SENTENCES = corpus('a b\na a b\nb');

/** p(word | history) by the model's lookup, history and word as text. */
function p(model: LanguageModel, counts: CountTables, history: string, word: string): number {
  const ids = idsOf(counts, history === '' ? [] : history.split(' '));
  return 10 ** logProb(model, ids, idsOf(counts, [word])[0]).log10Prob;
}

/** Every row of every order of the model, as text → [probability, back-off weight]. */
function storedRows(model: LanguageModel): Map<string, [number, number]> {
  const rows = new Map<string, [number, number]>();
  for (const table of model.orders) {
    for (let row = 0; row < modelRowCount(table); row++) {
      const words = Array.from(table.ids.subarray(row * table.order, (row + 1) * table.order), (id) => model.vocabulary.words[id]);
      rows.set(words.join(' '), [10 ** table.log10Prob[row], 10 ** table.log10BackOff[row]]);
    }
  }
  return rows;
}

function expectRows(model: LanguageModel, expected: Record<string, [number, number]>): void {
  const rows = storedRows(model);
  expect([...rows.keys()].sort()).toEqual(Object.keys(expected).sort());
  for (const [ngram, [probability, backOff]] of Object.entries(expected)) {
    const [actualProbability, actualBackOff] = rows.get(ngram)!;
    expect(actualProbability, `p of ${ngram}`).toBeCloseTo(probability, 12);
    expect(actualBackOff, `back-off weight of ${ngram}`).toBeCloseTo(backOff, 12);
  }
}

describe('modified Kneser-Ney, order 3, by hand', () => {
  // Discounts given (the counts of so small a corpus leave D3+ undefined):
  //   orders 1 and 2: D1 = 1/2, D2 = 1, D3+ = 3/2;   order 3: D1 = 1/4, D2 = 1/2, D3+ = 1.
  // p(w | h) = max(c − D(c), 0)/c(h) + γ(h)·p(w | h'),  γ(h) = Σ_w D(c(h w))/c(h).
  //
  // Order 1 (continuation counts a 2, b 2, </s> 1, <unk> 0; total 5):
  //   γ(•) = (D2 + D2 + D1)/5 = (1 + 1 + 1/2)/5 = 1/2, and the uniform 1/V = 1/4:
  //   p(a) = (2 − 1)/5 + 1/2·1/4 = 1/5 + 1/8 = 13/40 = p(b)
  //   p(</s>) = (1 − 1/2)/5 + 1/8 = 1/10 + 1/8 = 9/40
  //   p(<unk>) = 0 + 1/8 = 5/40                                         (13 + 13 + 9 + 5 = 40)
  // Order 2 (counts <s> a 2, <s> b 1 raw; a a 1, a b 2, b </s> 2 continuation):
  //   h = <s>: total 3, γ = (D2 + D1)/3 = (1 + 1/2)/3 = 1/2
  //     p(a | <s>) = (2 − 1)/3 + 1/2·13/40 = 1/3 + 13/80 = 119/240
  //     p(b | <s>) = (1 − 1/2)/3 + 13/80 = 1/6 + 13/80 = 79/240
  //     unseen: p(</s> | <s>) = 1/2·9/40 = 27/240, p(<unk> | <s>) = 1/2·5/40 = 15/240   (Σ = 240/240)
  //   h = a: total 3, γ = (D1 + D2)/3 = 1/2
  //     p(a | a) = (1 − 1/2)/3 + 13/80 = 79/240,  p(b | a) = (2 − 1)/3 + 13/80 = 119/240
  //   h = b: total 2, γ = D2/2 = 1/2
  //     p(</s> | b) = (2 − 1)/2 + 1/2·9/40 = 1/2 + 9/80 = 49/80
  //     unseen: p(a | b) = p(b | b) = 13/80, p(<unk> | b) = 5/80                         (Σ = 80/80)
  // Order 3 (raw counts):
  //   h = <s> a: <s> a a 1, <s> a b 1; total 2, γ = (1/4 + 1/4)/2 = 1/4
  //     p(a | <s> a) = (1 − 1/4)/2 + 1/4·p(a | a) = 3/8 + 1/4·79/240 = 360/960 + 79/960 = 439/960
  //     p(b | <s> a) = 3/8 + 1/4·119/240 = 360/960 + 119/960 = 479/960
  //     unseen: p(</s> | <s> a) = 1/4·27/240 = 27/960, p(<unk> | <s> a) = 15/960          (Σ = 960/960)
  //   h = a a: a a b 1; total 1, γ = 1/4
  //     p(b | a a) = 3/4 + 1/4·119/240 = 720/960 + 119/960 = 839/960
  //     unseen: p(a | a a) = 1/4·79/240 = 79/960, p(<unk> | a a) = 15/960
  //   h = a b: a b </s> 2; total 2, γ = D2/2 = 1/4
  //     p(</s> | a b) = (2 − 1/2)/2 + 1/4·49/80 = 240/320 + 49/320 = 289/320
  //     unseen: p(a | a b) = 1/4·13/80 = 13/320
  //   h = <s> b: <s> b </s> 1; total 1, γ = D1/1 = 1/4
  //     p(</s> | <s> b) = 3/4 + 1/4·49/80 = 289/320
  const counts = countCorpus(SENTENCES, 3);
  const model = estimateModifiedKneserNey(counts, { discounts: [[1 / 2, 1, 3 / 2], [1 / 2, 1, 3 / 2], [1 / 4, 1 / 2, 1]] });

  test('every stored probability and back-off weight', () => {
    expectRows(model, {
      '<s>': [0, 1 / 2],
      a: [13 / 40, 1 / 2],
      b: [13 / 40, 1 / 2],
      '</s>': [9 / 40, 1],
      '<unk>': [5 / 40, 1],
      '<s> a': [119 / 240, 1 / 4],
      '<s> b': [79 / 240, 1 / 4],
      'a a': [79 / 240, 1 / 4],
      'a b': [119 / 240, 1 / 4],
      'b </s>': [49 / 80, 1],
      '<s> a a': [439 / 960, 1],
      '<s> a b': [479 / 960, 1],
      'a a b': [839 / 960, 1],
      'a b </s>': [289 / 320, 1],
      '<s> b </s>': [289 / 320, 1],
    });
  });

  test('lookups of unseen n-grams and unseen contexts', () => {
    expect(p(model, counts, '<s> a', '</s>')).toBeCloseTo(27 / 960, 12);
    expect(p(model, counts, '<s> a', '<unk>')).toBeCloseTo(15 / 960, 12);
    expect(p(model, counts, 'a a', 'a')).toBeCloseTo(79 / 960, 12);
    expect(p(model, counts, 'a b', 'a')).toBeCloseTo(13 / 320, 12);
    expect(p(model, counts, '<s>', '</s>')).toBeCloseTo(27 / 240, 12);
    expect(p(model, counts, 'b', '<unk>')).toBeCloseTo(5 / 80, 12);
    // "b a" and "<unk> a" never occur: the history backs off entirely to "a".
    expect(p(model, counts, 'b a', 'a')).toBeCloseTo(79 / 240, 12);
    expect(p(model, counts, '<unk> a', 'b')).toBeCloseTo(119 / 240, 12);
    // "<unk>" is no context either: down to the unigrams.
    expect(p(model, counts, 'b <unk>', 'b')).toBeCloseTo(13 / 40, 12);
  });

  test('the model records the discounts, their source and the count-of-counts they would come from', () => {
    if (model.parameters.method !== 'modified-kneser-ney') throw new Error('method');
    const discounts = model.parameters.discounts;
    expect(discounts.map((d) => d.source)).toEqual(['given', 'given', 'given']);
    expect(discounts.map((d) => d.counts)).toEqual(['continuation', 'continuation', 'raw']);
    expect(discounts[0].countOfCounts).toEqual({ n1: 1, n2: 2, n3: 0, n4: 0 });
    expect(discounts[1].countOfCounts).toEqual({ n1: 2, n2: 3, n3: 0, n4: 0 });
    expect(discounts[2].countOfCounts).toEqual({ n1: 4, n2: 1, n3: 0, n4: 0 });
    expect(discounts[2].values).toEqual([1 / 4, 1 / 2, 1]);
  });
});

describe('Katz back-off, order 2, by hand', () => {
  // p(w | h) = d_c·c/c(h) for 1 ≤ c ≤ k, c/c(h) above k; unseen: α(h)·p(w),
  // α(h) = β(h)/(1 − Σ_{w seen after h} p(w)), β(h) = 1 − Σ_{w seen after h} p(w | h).
  // Unigram level: the same discounting, and β(•) goes to the words never seen (here <unk>).
  const counts = countCorpus(SENTENCES, 2);

  test('k = 3, d1 = 1/2, d2 = 2/3, d3 = 5/6 at both orders', () => {
    // Unigrams (a 3, b 3, </s> 3; total 9): p = d3·3/9 = 5/6·1/3 = 5/18 each; β(•) = 1 − 15/18 = 1/6 → p(<unk>) = 1/6.
    // h = <s> (<s> a 2, <s> b 1; total 3): p(a | <s>) = d2·2/3 = 4/9, p(b | <s>) = d1·1/3 = 1/6;
    //   β = 1 − 4/9 − 1/6 = 7/18; Σ seen p(w) = 5/18 + 5/18 = 5/9; α = (7/18)/(4/9) = 7/8.
    //   p(</s> | <s>) = 7/8·5/18 = 35/144, p(<unk> | <s>) = 7/8·1/6 = 21/144    (64 + 24 + 35 + 21 = 144)
    // h = a (a a 1, a b 2; total 3): p(a | a) = 1/6, p(b | a) = 4/9, α = 7/8 as for <s>.
    // h = b (b </s> 3; total 3): p(</s> | b) = d3·3/3 = 5/6; β = 1/6; Σ seen p(w) = 5/18;
    //   α = (1/6)/(13/18) = 3/13; p(a | b) = p(b | b) = 3/13·5/18 = 5/78, p(<unk> | b) = 3/13·1/6 = 1/26.
    const model = estimateKatz(counts, { k: 3, discounts: [[1 / 2, 2 / 3, 5 / 6], [1 / 2, 2 / 3, 5 / 6]] });
    expectRows(model, {
      '<s>': [0, 7 / 8],
      a: [5 / 18, 7 / 8],
      b: [5 / 18, 3 / 13],
      '</s>': [5 / 18, 1],
      '<unk>': [1 / 6, 1],
      '<s> a': [4 / 9, 1],
      '<s> b': [1 / 6, 1],
      'a a': [1 / 6, 1],
      'a b': [4 / 9, 1],
      'b </s>': [5 / 6, 1],
    });
    expect(p(model, counts, '<s>', '</s>')).toBeCloseTo(35 / 144, 12);
    expect(p(model, counts, '<s>', '<unk>')).toBeCloseTo(21 / 144, 12);
    expect(p(model, counts, 'a', '</s>')).toBeCloseTo(35 / 144, 12);
    expect(p(model, counts, 'b', 'a')).toBeCloseTo(5 / 78, 12);
    expect(p(model, counts, 'b', 'b')).toBeCloseTo(5 / 78, 12);
    expect(p(model, counts, 'b', '<unk>')).toBeCloseTo(1 / 26, 12);
    expect(p(model, counts, '<unk>', 'a')).toBeCloseTo(5 / 18, 12); // unseen context: unigram
    expect(model.parameters).toMatchObject({ method: 'katz', k: 3, unigramLevel: 'unseen-words' });
  });

  test('k = 2: contexts whose counts all exceed k give up (1 − d_k)·k per n-gram (d1 = 1/2, d2 = 2/3)', () => {
    // Unigrams: all counts 3 > k, so β(•) would be 0 while <unk> was never seen: each count gives up
    //   (1 − d2)·2 = 2/3: p = (3 − 2/3)/9 = 7/27 each; β(•) = 3·(2/3)/9 = 2/9 → p(<unk>) = 2/9.
    // h = <s>: p(a | <s>) = d2·2/3 = 4/9, p(b | <s>) = d1·1/3 = 1/6; β = 7/18; Σ seen p(w) = 14/27;
    //   α = (7/18)/(13/27) = 21/26; p(</s> | <s>) = 21/26·7/27 = 49/234, p(<unk> | <s>) = 21/26·2/9 = 7/39.
    // h = a: as h = <s>.
    // h = b: b </s> 3 > k: p(</s> | b) = (3 − 2/3)/3 = 7/9; β = 2/9; Σ seen p(w) = 7/27;
    //   α = (2/9)/(20/27) = 3/10; p(a | b) = 3/10·7/27 = 7/90, p(<unk> | b) = 3/10·2/9 = 1/15.
    const model = estimateKatz(counts, { k: 2, discounts: [[1 / 2, 2 / 3], [1 / 2, 2 / 3]] });
    expectRows(model, {
      '<s>': [0, 21 / 26],
      a: [7 / 27, 21 / 26],
      b: [7 / 27, 3 / 10],
      '</s>': [7 / 27, 1],
      '<unk>': [2 / 9, 1],
      '<s> a': [4 / 9, 1],
      '<s> b': [1 / 6, 1],
      'a a': [1 / 6, 1],
      'a b': [4 / 9, 1],
      'b </s>': [7 / 9, 1],
    });
    expect(p(model, counts, '<s>', '</s>')).toBeCloseTo(49 / 234, 12);
    expect(p(model, counts, '<s>', '<unk>')).toBeCloseTo(7 / 39, 12);
    expect(p(model, counts, 'b', 'a')).toBeCloseTo(7 / 90, 12);
    expect(p(model, counts, 'b', '<unk>')).toBeCloseTo(1 / 15, 12);
    expect(model.parameters).toMatchObject({
      contextsDiscountedAboveK: [{ order: 1, contexts: 1 }, { order: 2, contexts: 1 }],
      contextsWithoutMass: [{ order: 2, contexts: 0 }],
    });
  });
});
