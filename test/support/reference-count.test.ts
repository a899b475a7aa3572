/**
 * Checks the reference counter (awk | sort | uniq -c) itself, against counts worked out by hand
 * below, and against the exact number of n-grams each order must have.
 *
 * Number of n-grams per order. A sentence of m tokens is wrapped as `<s> w1 … wm </s>`: positions
 * 0..m+1, where position 0 is `<s>` and positions i = 1..m+1 are predicted. An n-gram of order n
 * ending at position i starts at i−n+1, so it exists iff i−n+1 ≥ 0, i.e. n ≤ i+1. Hence the
 * sentence has, of order n,
 *     #{ i ∈ 1..m+1 : i ≥ n−1 } = max(0, m + 1 − max(0, n − 2))
 * n-grams, and the corpus total of order n is Σ over sentences of that. For n = 1 and n = 2 this
 * is m+1 per sentence, so Σ counts = tokens + sentences (every predicted position, `</s>`
 * included); for n ≥ 3 the first n−2 positions of a sentence have no n-gram of order n.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { orderOf, referenceCounts, referenceCountsByOrder } from './reference-count.ts';

let directory: string;

beforeAll(() => {
  directory = mkdtempSync(join(tmpdir(), 'quern-reference-'));
});
afterAll(() => {
  rmSync(directory, { recursive: true, force: true });
});

let fileNumber = 0;
function writeCorpus(text: string): string {
  const path = join(directory, `corpus-${fileNumber++}.txt`);
  writeFileSync(path, text);
  return path;
}

function sortedEntries(counts: Map<string, number>): [string, number][] {
  return [...counts].sort((a, b) => (a[0] < b[0] ? -1 : a[0] > b[0] ? 1 : 0));
}

/** Exact number of n-grams of order n in a sentence of m tokens (see the comment at the top). */
function ngramsOfOrder(m: number, n: number): number {
  return Math.max(0, m + 1 - Math.max(0, n - 2));
}

describe('referenceCounts on a corpus counted by hand', () => {
  // Two sentences; the empty line and the line of spaces and a tab are not sentences.
  const text = 'the ferry left\nthe ferry docked\n\n  \t \n';

  it('gives exactly the hand-counted n-grams of orders 1..3', () => {
    const counts = referenceCounts([writeCorpus(text)], 3, { lowercase: false });
    // Sentence 1: <s> the ferry left </s>; sentence 2: <s> the ferry docked </s>.
    const expected = new Map<string, number>([
      // order 1: every predicted token, </s> included, never <s>
      ['the', 2],
      ['ferry', 2],
      ['left', 1],
      ['docked', 1],
      ['</s>', 2],
      // order 2
      ['<s> the', 2],
      ['the ferry', 2],
      ['ferry left', 1],
      ['ferry docked', 1],
      ['left </s>', 1],
      ['docked </s>', 1],
      // order 3 (position 1, "the", has none: it would need a word before <s>)
      ['<s> the ferry', 2],
      ['the ferry left', 1],
      ['the ferry docked', 1],
      ['ferry left </s>', 1],
      ['ferry docked </s>', 1],
    ]);
    expect(sortedEntries(counts)).toEqual(sortedEntries(expected));
  });

  it('splits the same counts by order', () => {
    const byOrder = referenceCountsByOrder([writeCorpus(text)], 3, { lowercase: false });
    expect([...byOrder.keys()]).toEqual([1, 2, 3]);
    expect(sortedEntries(byOrder.get(1)!)).toEqual([['</s>', 2], ['docked', 1], ['ferry', 2], ['left', 1], ['the', 2]]);
    expect(byOrder.get(2)!.size).toBe(6);
    expect(byOrder.get(3)!.size).toBe(5);
    // Tokens 6 + sentences 2 = 8 for orders 1 and 2; 8 − 2 sentences·1 = 6 for order 3.
    const totals = [1, 2, 3].map((n) => [...byOrder.get(n)!.values()].reduce((a, b) => a + b, 0));
    expect(totals).toEqual([8, 8, 6]);
  });

  it('with order 1 gives only unigrams', () => {
    const counts = referenceCounts([writeCorpus(text)], 1, { lowercase: false });
    expect(sortedEntries(counts)).toEqual([['</s>', 2], ['docked', 1], ['ferry', 2], ['left', 1], ['the', 2]]);
  });
});

describe('referenceCounts conventions', () => {
  it('keeps case unless asked, and lower-cases ASCII when asked', () => {
    const path = writeCorpus('The Ferry left\nthe ferry LEFT\n');
    const asIs = referenceCounts([path], 2, { lowercase: false });
    expect(asIs.get('The')).toBe(1);
    expect(asIs.get('the')).toBe(1);
    expect(asIs.get('<s> The')).toBe(1);
    expect(asIs.get('LEFT </s>')).toBe(1);
    expect(asIs.has('ferry left')).toBe(false);

    const lowered = referenceCounts([path], 2, { lowercase: true });
    expect(sortedEntries(lowered)).toEqual([
      ['</s>', 2],
      ['<s> the', 2],
      ['ferry', 2],
      ['ferry left', 2],
      ['left', 2],
      ['left </s>', 2],
      ['the', 2],
      ['the ferry', 2],
    ]);
  });

  it('splits on runs of spaces and tabs, ignoring leading and trailing white space', () => {
    const counts = referenceCounts([writeCorpus('  the\t\tferry   left \t\n')], 2, { lowercase: false });
    expect(sortedEntries(counts)).toEqual([
      ['</s>', 1],
      ['<s> the', 1],
      ['ferry', 1],
      ['ferry left', 1],
      ['left', 1],
      ['left </s>', 1],
      ['the', 1],
      ['the ferry', 1],
    ]);
  });

  it('adds no padding when the order exceeds the sentence: one-word sentence, order 5', () => {
    const counts = referenceCounts([writeCorpus('ahoy\n')], 5, { lowercase: false });
    expect(sortedEntries(counts)).toEqual([
      ['</s>', 1],
      ['<s> ahoy', 1],
      ['<s> ahoy </s>', 1],
      ['ahoy', 1],
      ['ahoy </s>', 1],
    ]);
  });

  it('ends a line at the end of each file, even without a final newline', () => {
    const first = writeCorpus('the ferry left'); // no trailing newline
    const second = writeCorpus('the ferry docked\n');
    const counts = referenceCounts([first, second], 2, { lowercase: false });
    expect(counts.get('left </s>')).toBe(1);
    expect(counts.get('<s> the')).toBe(2);
    expect(counts.has('left the')).toBe(false);
  });

  it('counts a file listed twice twice', () => {
    const path = writeCorpus('the ferry left\n');
    const counts = referenceCounts([path, path], 2, { lowercase: false });
    expect(counts.get('the ferry')).toBe(2);
    expect(counts.get('</s>')).toBe(2);
  });

  it('gives an empty map for no files and for files with no sentences', () => {
    expect(referenceCounts([], 3, { lowercase: false }).size).toBe(0);
    expect(referenceCounts([writeCorpus('\n   \n\t\n')], 3, { lowercase: false }).size).toBe(0);
    expect(referenceCounts([writeCorpus('')], 3, { lowercase: false }).size).toBe(0);
  });

  it('rejects a bad order and fails on a missing file', () => {
    const path = writeCorpus('the ferry left\n');
    expect(() => referenceCounts([path], 0, { lowercase: false })).toThrow(RangeError);
    expect(() => referenceCounts([path], 2.5, { lowercase: false })).toThrow(RangeError);
    expect(() => referenceCounts([join(directory, 'no-such-file.txt')], 2, { lowercase: false })).toThrow(/reference pipeline failed/);
  });
});

describe('referenceCounts totals per order on random corpora', () => {
  /** Small deterministic generator so the test needs nothing from scripts/. */
  function lcg(seed: number): () => number {
    let state = seed >>> 0;
    return () => {
      state = (Math.imul(state, 1664525) + 1013904223) >>> 0;
      return state / 4294967296;
    };
  }

  /** Straightforward enumeration of the same conventions, lower-casing, for comparison. */
  function enumerate(lines: string[], order: number): Map<string, number> {
    const counts = new Map<string, number>();
    for (const line of lines) {
      const tokens = line.toLowerCase().split(/[ \t]+/).filter((token) => token !== '');
      if (tokens.length === 0) continue;
      const wrapped = ['<s>', ...tokens, '</s>'];
      for (let end = 1; end < wrapped.length; end++) {
        for (let n = 1; n <= order && end - n + 1 >= 0; n++) {
          const key = wrapped.slice(end - n + 1, end + 1).join(' ');
          counts.set(key, (counts.get(key) ?? 0) + 1);
        }
      }
    }
    return counts;
  }

  for (const seed of [1, 2, 3]) {
    it(`Σ counts of order n = Σ_sentences max(0, m+1 − max(0, n−2)) for n = 1..6 (seed ${seed})`, () => {
      const random = lcg(seed);
      const words = ['Kestrel', 'quay', 'ferry', 'tide', 'the', 'a', 'Brindle', 'point', 'left', 'docked'];
      const lines: string[] = [];
      const sentenceTokens: number[] = [];
      for (let line = 0; line < 300; line++) {
        const kind = random();
        if (kind < 0.05) {
          lines.push(kind < 0.025 ? '' : ' \t ');
          continue;
        }
        const m = 1 + Math.floor(random() * 9);
        const tokens: string[] = [];
        for (let t = 0; t < m; t++) tokens.push(words[Math.floor(random() * words.length)]);
        const separator = random() < 0.1 ? ' \t ' : ' ';
        lines.push(tokens.join(separator));
        sentenceTokens.push(m);
      }
      const order = 6;
      const byOrder = referenceCountsByOrder([writeCorpus(lines.join('\n') + '\n')], order, { lowercase: true });
      for (let n = 1; n <= order; n++) {
        const total = [...byOrder.get(n)!.values()].reduce((a, b) => a + b, 0);
        const expected = sentenceTokens.reduce((sum, m) => sum + ngramsOfOrder(m, n), 0);
        expect(total, `order ${n}`).toBe(expected);
      }
      const tokens = sentenceTokens.reduce((a, b) => a + b, 0);
      const unigramTotal = [...byOrder.get(1)!.values()].reduce((a, b) => a + b, 0);
      expect(unigramTotal).toBe(tokens + sentenceTokens.length);
      // <s> is a context only: never a unigram, never anywhere but first.
      for (const [ngram] of referenceCounts([writeCorpus(lines.join('\n') + '\n')], order, { lowercase: true })) {
        expect(ngram === '<s>' || ngram.indexOf('<s>', 1) !== -1).toBe(false);
        expect(orderOf(ngram)).toBeLessThanOrEqual(order);
      }
      // Same map as a direct enumeration written out here.
      expect(sortedEntries(referenceCounts([writeCorpus(lines.join('\n') + '\n')], order, { lowercase: true }))).toEqual(
        sortedEntries(enumerate(lines, order)),
      );
      // Lower-casing merged the capitalised words.
      expect(byOrder.get(1)!.has('Kestrel')).toBe(false);
      expect(byOrder.get(1)!.get('</s>')).toBe(sentenceTokens.length);
    });
  }
});
