import { describe, expect, test } from 'vitest';
import { WordListMerger } from '../../src/corpus/word-merge.ts';
import { seededRandom } from '../support/seeded.ts';

/** A worker's word list as the vocabulary pass sends it: UTF-8 bytes end to end, ends, counts. */
function wordList(entries: Array<[string, number]>): { wordBytes: Uint8Array; wordEnds: Uint32Array; counts: Float64Array } {
  const parts = entries.map(([word]) => Buffer.from(word));
  const wordEnds = new Uint32Array(parts.length);
  let end = 0;
  parts.forEach((part, i) => (wordEnds[i] = end += part.length));
  return { wordBytes: new Uint8Array(Buffer.concat(parts)), wordEnds, counts: Float64Array.from(entries.map((e) => e[1])) };
}

describe('WordListMerger', () => {
  test('each distinct word once with its counts added; each list told where its words went', () => {
    const random = seededRandom(5);
    const pool = Array.from({ length: 3000 }, (_, i) => `gull${i}${i % 7 === 0 ? '\u00e9' : ''}`);
    const expected = new Map<string, number>([['tern', 4]]);
    const merger = new WordListMerger();
    merger.addWord('tern', 4);
    const lists: Array<Array<[string, number]>> = [];
    for (let l = 0; l < 3; l++) {
      const seen = new Set<string>();
      const list: Array<[string, number]> = [];
      // Enough words to make the table grow past the size made for the first list.
      for (let i = 0; i < 1000 + 900 * l; i++) {
        const word = pool[Math.floor(random() * pool.length)];
        if (seen.has(word)) continue;
        seen.add(word);
        list.push([word, 1 + Math.floor(random() * 9)]);
      }
      lists.push(list);
    }
    lists.push([['tern', 1]]);
    const intos = lists.map((list) => {
      for (const [word, count] of list) expected.set(word, (expected.get(word) ?? 0) + count);
      const { wordBytes, wordEnds, counts } = wordList(list);
      return merger.addList(wordBytes, wordEnds, counts);
    });
    const { words, counts } = merger.wordCounts();
    expect(new Map(words.map((w, i) => [w, counts[i]]))).toEqual(expected);
    expect(words.length).toBe(expected.size);
    lists.forEach((list, l) => list.forEach(([word], i) => expect(words[intos[l][i]]).toBe(word)));
  });

  test('a list with a marker, or with ends out of order, is an assertion failure', () => {
    const merger = new WordListMerger();
    const { wordBytes, wordEnds, counts } = wordList([['quay', 1], ['</s>', 2]]);
    merger.addList(wordBytes, wordEnds, counts);
    expect(() => merger.wordCounts()).toThrow(/no marker/);
    expect(() => new WordListMerger().addList(new Uint8Array(4), Uint32Array.from([3, 2]), new Float64Array(2))).toThrow(/ends at 2/);
    expect(() => new WordListMerger().addList(new Uint8Array(4), Uint32Array.from([3]), new Float64Array(2))).toThrow(/a count per word/);
  });
});
