/**
 * Test fixtures for the stats stage: a naive, obviously-correct builder of `StatsInput` from
 * sentences (strings in Maps, following DESIGN.md's conventions), and a seeded synthetic corpus.
 */
import { countOfCountsFromCounts } from '../../src/stats/count-of-counts.ts';
import type { OrderStatsInput, StatsInput } from '../../src/stats/types.ts';
import { seededRandom } from '../support/seeded.ts';

const BOS = '<s>';
const EOS = '</s>';

/** Counts every n-gram of orders 1..order over `<s> w1 … wm </s>` (the unigram `<s>` excluded). */
export function countNgrams(sentences: string[][], order: number): Array<Map<string, number>> {
  const counts = Array.from({ length: order }, () => new Map<string, number>());
  for (const words of sentences) {
    const wrapped = [BOS, ...words, EOS];
    for (let n = 1; n <= order; n++) {
      for (let start = 0; start + n <= wrapped.length; start++) {
        if (n === 1 && wrapped[start] === BOS) continue;
        const key = wrapped.slice(start, start + n).join(' ');
        counts[n - 1].set(key, (counts[n - 1].get(key) ?? 0) + 1);
      }
    }
  }
  return counts;
}

/** Builds the StatsInput the merge would record for `sentences` at `order` (DESIGN.md). */
export function statsInputOf(sentences: string[][], order: number): StatsInput {
  const counts = countNgrams(sentences, order);
  const orders: OrderStatsInput[] = counts.map((map, index) => {
    const n = index + 1;
    const entry: OrderStatsInput = {
      order: n,
      distinct: map.size,
      total: [...map.values()].reduce((a, b) => a + b, 0),
      raw: countOfCountsFromCounts(map.values()),
    };
    if (n < order) {
      // Continuation count N1+(• g): distinct left neighbours of g in the order n+1 n-grams;
      // n-grams that begin with <s> keep their raw counts.
      const leftNeighbours = new Map<string, number>();
      for (const key of counts[n].keys()) {
        const suffix = key.slice(key.indexOf(' ') + 1);
        leftNeighbours.set(suffix, (leftNeighbours.get(suffix) ?? 0) + 1);
      }
      const continuation: number[] = [];
      for (const [key, count] of map) {
        continuation.push(key.startsWith(`${BOS} `) || key === BOS ? count : (leftNeighbours.get(key) as number));
      }
      entry.continuation = countOfCountsFromCounts(continuation);
    }
    if (n >= 2) {
      const contexts = new Map<string, number>();
      for (const [key, count] of map) {
        const context = key.slice(0, key.lastIndexOf(' '));
        contexts.set(context, (contexts.get(context) ?? 0) + count);
      }
      entry.contexts = countOfCountsFromCounts(contexts.values());
    }
    return entry;
  });
  const unigrams = counts[0];
  const words = [...unigrams.entries()];
  if (!unigrams.has('<unk>')) words.push(['<unk>', 0]);
  words.sort((a, b) => b[1] - a[1] || (a[0] < b[0] ? -1 : 1));
  return {
    order,
    vocabularySize: words.length,
    tokens: sentences.reduce((sum, s) => sum + s.length, 0),
    sentences: sentences.length,
    unigramCounts: words.map(([, count]) => count),
    orders,
  };
}

/**
 * Seeded synthetic sentences: words drawn from a Zipf-like distribution (probability ∝ 1/rank)
 * over `vocabulary` words, with a little first-order structure (each word prefers a successor),
 * so bigrams and trigrams repeat the way text does. Lengths 4..15 words.
 */
export function syntheticSentences(seed: number, sentenceCount: number, vocabulary = 3000): string[][] {
  const random = seededRandom(seed);
  const cumulative: number[] = [];
  let sum = 0;
  for (let rank = 1; rank <= vocabulary; rank++) {
    sum += 1 / rank;
    cumulative.push(sum);
  }
  const draw = (): number => {
    const target = random() * sum;
    let low = 0;
    let high = cumulative.length - 1;
    while (low < high) {
      const middle = (low + high) >> 1;
      if (cumulative[middle] < target) low = middle + 1;
      else high = middle;
    }
    return low;
  };
  const sentences: string[][] = [];
  for (let s = 0; s < sentenceCount; s++) {
    const length = 4 + Math.floor(random() * 12);
    const words: string[] = [];
    let previous = -1;
    for (let i = 0; i < length; i++) {
      const id = previous >= 0 && random() < 0.3 ? (previous * 7 + 3) % vocabulary : draw();
      words.push(`w${id}`);
      previous = id;
    }
    sentences.push(words);
  }
  return sentences;
}
