import { describe, expect, test } from 'vitest';
import { buildVocabulary, compareCodePoints, formatVocabulary, parseVocabulary } from '../../src/corpus/vocabulary.ts';
import { QuernError } from '../../src/errors.ts';

describe('vocabulary', () => {
  test('ids rank by count, ties by UTF-8 bytes; <s> is id 0; markers included', () => {
    const counts = new Map([['quay', 3], ['ferry', 5], ['Ferry', 3], ['tide', 1]]);
    const vocab = buildVocabulary(counts, 4, 0, {});
    // counts: ferry 5, </s> 4, Ferry 3, quay 3, tide 1, <unk> 0 ('F' 0x46 < 'q' 0x71)
    expect(vocab.words).toEqual(['<s>', 'ferry', '</s>', 'Ferry', 'quay', 'tide', '<unk>']);
    expect(vocab.counts).toEqual([4, 5, 4, 3, 3, 1, 0]);
    expect(vocab.eosId).toBe(2);
    expect(vocab.unkId).toBe(6);
  });

  test('a cap moves the rest to <unk>, by top K or by minimum count', () => {
    const counts = new Map([['a', 5], ['b', 3], ['c', 1], ['d', 1]]);
    const top = buildVocabulary(counts, 2, 1, { top: 2 });
    // a 5, <unk> 3, b 3, </s> 2: '<' (0x3c) sorts before 'b' (0x62)
    expect(top.words).toEqual(['<s>', 'a', '<unk>', 'b', '</s>']);
    expect(top.counts[top.unkId]).toBe(3); // c + d + one literal <unk>
    expect(top.typesCapped).toBe(2);
    const min = buildVocabulary(counts, 2, 0, { minCount: 3 });
    expect(min.words.slice(1, 3)).toEqual(['a', 'b']);
    expect(min.counts[min.unkId]).toBe(2);
  });

  test('code-point order equals UTF-8 byte order, including astral characters', () => {
    const words = ['z', '\u{1F600}', '\uFFFD', 'é', 'a', '\uE000', '𝔸'];
    const byBytes = [...words].sort((x, y) => Buffer.compare(Buffer.from(x), Buffer.from(y)));
    expect([...words].sort(compareCodePoints)).toEqual(byBytes);
  });

  test('format and parse round trip; damage is a corrupt error', () => {
    const vocab = buildVocabulary(new Map([['kestrel', 2], ['quay', 1]]), 1, 0, {});
    const text = formatVocabulary(vocab);
    expect(parseVocabulary(text, 'v')).toEqual(vocab);
    expect(() => parseVocabulary(text.replace('kestrel\t2', 'kestrel\tx'), 'v')).toThrow(QuernError);
    expect(() => parseVocabulary(text.slice(0, -10), 'v')).toThrow(/expected/);
  });
});
