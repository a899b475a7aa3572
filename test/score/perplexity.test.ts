/**
 * Perplexity as DESIGN.md defines it, on the hand-worked modified Kneser-Ney model of
 * test/estimate/hand-worked.test.ts (corpus "a b", "a a b", "b"; discounts 1/2, 1, 3/2 at orders 1
 * and 2, and 1/4, 1/2, 1 at order 3), whose probabilities are worked out there.
 */
import { describe, expect, test } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { countCorpus } from '../../src/estimate/counts.ts';
import { estimateModifiedKneserNey } from '../../src/estimate/modified-kneser-ney.ts';
import { perplexity } from '../../src/score/perplexity.ts';

const counts = countCorpus([['a', 'b'], ['a', 'a', 'b'], ['b']], 3);
const model = estimateModifiedKneserNey(counts, { discounts: [[1 / 2, 1, 3 / 2], [1 / 2, 1, 3 / 2], [1 / 4, 1 / 2, 1]] });

describe('perplexity', () => {
  test('every predicted token, </s> included; OOV tokens out of one figure and scored as <unk> in the other', () => {
    // "a b":    p(a | <s>) = 119/240, p(b | <s> a) = 479/960, p(</s> | a b) = 289/320.
    // "a z b":  p(a | <s>) = 119/240; z is OOV: p(<unk> | <s> a) = 15/960;
    //           p(b | a <unk>): "a <unk>" and "<unk>" were never contexts, so p(b) = 13/40;
    //           p(</s> | <unk> b): "<unk> b" never a context, so p(</s> | b) = 49/80.
    const known = [119 / 240, 479 / 960, 289 / 320, 119 / 240, 13 / 40, 49 / 80];
    const log10Known = known.reduce((sum, p) => sum + Math.log10(p), 0);
    const log10WithUnk = log10Known + Math.log10(15 / 960);
    const result = perplexity(model, [['a', 'b'], [], ['a', 'z', 'b']]);
    expect(result).toMatchObject({ sentences: 2, tokens: 7, oov: 1 });
    expect(result.log10Prob).toBeCloseTo(log10Known, 12);
    expect(result.log10ProbWithUnk).toBeCloseTo(log10WithUnk, 12);
    expect(result.perplexity).toBeCloseTo(10 ** (-log10Known / 6), 10);
    expect(result.perplexityWithUnk).toBeCloseTo(10 ** (-log10WithUnk / 7), 10);
  });

  test('literal markers in the text are unknown words', () => {
    const literal = perplexity(model, [['a', '<s>', 'b'], ['</s>'], ['<unk>']]);
    const unknown = perplexity(model, [['a', 'zz', 'b'], ['yy'], ['xx']]);
    expect(literal).toEqual(unknown);
    expect(literal.oov).toBe(3);
  });

  test('no sentence: nothing to score', () => {
    expect(() => perplexity(model, [[], []])).toThrow(QuernError);
    expect(() => perplexity(model, [])).toThrow(/nothing to score/);
  });
});
