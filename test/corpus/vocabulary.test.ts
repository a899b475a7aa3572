import { describe, expect, test } from 'vitest';
import { buildRankedVocabulary, buildVocabulary, compareCodePoints, formatVocabulary, formatVocabularyBytes, parseVocabulary } from '../../src/corpus/vocabulary.ts';
import { QuernError } from '../../src/errors.ts';
import { seededRandom } from '../support/seeded.ts';

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

  test('on many words with tied counts, the order of one sort of all of them by (count, UTF-8 bytes)', () => {
    const random = seededRandom(11);
    const letters = ['a', 'b', 'z', 'é', '\uE000', '\uFFFD', '\u{1F600}', '𝔸', '<', 's', '/'];
    const counts = new Map<string, number>();
    while (counts.size < 3000) {
      const word = Array.from({ length: 1 + Math.floor(random() * 4) }, () => letters[Math.floor(random() * letters.length)]).join('');
      // Zipf-like: most words share a few small counts; some tie with the markers' counts.
      if (word !== '<s>' && word !== '</s>' && word !== '<unk>') counts.set(word, random() < 0.9 ? 1 + Math.floor(random() * 3) : Math.floor(1 / random()));
    }
    const byBytes = (x: [string, number], y: [string, number]): number => y[1] - x[1] || Buffer.compare(Buffer.from(x[0]), Buffer.from(y[0]));
    for (const [sentences, unkSeen, cap] of [[2, 0, {}], [40, 3, {}], [7, 2, { top: 500 }], [3, 0, { minCount: 3 }], [1, 1, { top: 0 }]] as const) {
      const vocab = buildVocabulary(counts, sentences, unkSeen, cap);
      const all = [...counts.entries()].sort(byBytes);
      let kept = all.length;
      if ('minCount' in cap) kept = all.filter((e) => e[1] >= cap.minCount).length;
      if ('top' in cap) kept = Math.min(kept, cap.top);
      const unk = unkSeen + all.slice(kept).reduce((sum, e) => sum + e[1], 0);
      const expected = [...all.slice(0, kept), ['</s>', sentences] as [string, number], ['<unk>', unk] as [string, number]].sort(byBytes);
      expect(vocab.words).toEqual(['<s>', ...expected.map((e) => e[0])]);
      expect(vocab.counts).toEqual([sentences, ...expected.map((e) => e[1])]);
      expect([vocab.typesSeen, vocab.typesCapped]).toEqual([counts.size, counts.size - kept]);
    }
  });

  test('words sharing long prefixes, NUL bytes and every UTF-8 length rank by their bytes; idOf gives each word its id', () => {
    // Large count groups are sorted by numeric keys of 4–6 bytes at a time (sortByBytes), their
    // ties again by the bytes after: these words tie for 20+ bytes, and 'x' and 'x\0' at every depth.
    const random = seededRandom(12);
    const stems = ['', 'harbourmaster-ledger-', 'harbourmaster-ledger-\u00e9', 'quay\u0000', '\u{1F600}\u{1F600}\u{1F600}', '\u0800\u07FF\u0080'];
    const tails = ['', 'a', '\u0000', '\u0000\u0000', 'z', '\u00ff', '\uFFFD', '\u{10FFFF}', 'ab', 'b'];
    const counts = new Map<string, number>();
    while (counts.size < 4000) {
      const word = stems[Math.floor(random() * stems.length)] + Array.from({ length: Math.floor(random() * 4) }, () => tails[Math.floor(random() * tails.length)]).join('');
      if (word !== '' && word !== '<s>' && word !== '</s>' && word !== '<unk>') counts.set(word, random() < 0.95 ? 1 : 2);
    }
    const words = [...counts.keys()];
    const byBytes = (x: string, y: string): number => counts.get(y)! - counts.get(x)! || Buffer.compare(Buffer.from(x), Buffer.from(y));
    for (const cap of [{}, { top: 1500 }]) {
      const { vocab, idOf } = buildRankedVocabulary({ words, counts: words.map((w) => counts.get(w)!) }, 3, 0, cap);
      const kept = [...words].sort(byBytes).slice(0, 'top' in cap ? cap.top : words.length);
      expect(vocab.words.filter((w) => w !== '<s>' && w !== '</s>' && w !== '<unk>')).toEqual(kept);
      const keptSet = new Set(kept);
      words.forEach((word, i) => expect(idOf[i]).toBe(keptSet.has(word) ? vocab.words.indexOf(word) : vocab.unkId));
    }
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

  test('the bytes written are the lines id, word, count joined by tabs, as UTF-8', () => {
    const vocab = buildVocabulary(new Map([['kestrel', 2 ** 53 - 1], ['qu\u00e4y', 10], ['\u{1F600}', 9], ['tide', 1], ['x'.repeat(5000), 1]]), 1234567, 0, {});
    const lines = [`# quern vocabulary v1 types=${vocab.words.length} seen=5 capped=0`, ...vocab.words.map((w, id) => `${id}\t${w}\t${vocab.counts[id]}`)];
    expect(formatVocabularyBytes(vocab).equals(Buffer.from(lines.join('\n') + '\n'))).toBe(true);
    expect(parseVocabulary(formatVocabulary(vocab), 'v')).toEqual(vocab);
  });
});
