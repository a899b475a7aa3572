/**
 * Building the vocabulary from the workers' word counts (`buildVocabulary`, src/corpus/vocabulary.ts:
 * ranking by count, ties by UTF-8 bytes), this checkout's beside a git revision's, alternately in
 * one process, on the words and counts of a real vocabulary. This runs on the main thread between
 * the vocabulary pass and the count pass, with the workers idle.
 *
 *   npm run bench:vocabulary -- --vocab JOB/vocab.tsv --against REV [--rounds 8]
 *
 * --vocab    a job's vocab.tsv (e.g. of `quern count` over the benchmark corpus), whose words and
 *            counts are handed over in a shuffled order, as the workers' tables give them
 * --against  the revision whose buildVocabulary is the baseline
 * --rounds   rounds; each runs both once, alternating which goes first (default 8)
 *
 * Prints the median and least time of each and their ratio; stops with exit status 1 unless both
 * give the same vocabulary, uncapped and with two caps.
 */
import { readFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { parseArgs } from 'node:util';
import * as current from '../src/corpus/vocabulary.ts';
import { Prng } from './lib/prng.ts';
import { extractRevision } from './lib/revision-tree.ts';

const REPO = resolve(fileURLToPath(new URL('..', import.meta.url)));
const { values } = parseArgs({ options: { vocab: { type: 'string' }, against: { type: 'string' }, rounds: { type: 'string', default: '8' } } });
if (values.vocab === undefined || values.against === undefined) {
  console.error('usage: npm run bench:vocabulary -- --vocab JOB/vocab.tsv --against REV [--rounds 8]');
  process.exit(2);
}
const rounds = Number(values.rounds);
if (!Number.isInteger(rounds) || rounds < 1) throw new Error(`--rounds: a positive integer, got ${values.rounds}`);

const { hash, tree } = extractRevision(REPO, values.against, ['src'], (h) => join(REPO, 'bench-out', `vocabulary-baseline-${h}`));
const baseline = (await import(pathToFileURL(join(tree, 'src/corpus/vocabulary.ts')).href)) as typeof current;

const parsed = current.parseVocabulary(readFileSync(values.vocab, 'utf8'), values.vocab);
const pairs: Array<[string, number]> = [];
for (let id = 1; id < parsed.words.length; id++) if (id !== parsed.eosId && id !== parsed.unkId) pairs.push([parsed.words[id], parsed.counts[id]]);
const random = new Prng(1);
for (let i = pairs.length - 1; i > 0; i--) {
  const j = random.int(i + 1);
  [pairs[i], pairs[j]] = [pairs[j], pairs[i]];
}
const wordCounts = new Map(pairs);
const sentences = parsed.counts[0];

for (const cap of [{}, { top: 1000 }, { minCount: 3 }]) {
  if (JSON.stringify(current.buildVocabulary(wordCounts, sentences, 7, cap)) !== JSON.stringify(baseline.buildVocabulary(wordCounts, sentences, 7, cap))) {
    console.error(`the vocabularies differ (cap ${JSON.stringify(cap)})`);
    process.exit(1);
  }
}
const times = { current: [] as number[], baseline: [] as number[] };
for (let round = 0; round < rounds; round++) {
  for (const which of round % 2 === 0 ? (['current', 'baseline'] as const) : (['baseline', 'current'] as const)) {
    const build = which === 'current' ? current.buildVocabulary : baseline.buildVocabulary;
    const started = performance.now();
    build(wordCounts, sentences, 0, {});
    times[which].push(performance.now() - started);
  }
}
const median = (xs: number[]): number => [...xs].sort((a, b) => a - b)[xs.length >> 1];
const ms = (x: number): string => `${x.toFixed(0)} ms`;
console.log(`buildVocabulary of ${wordCounts.size} words, ${rounds} rounds alternating; vocabularies identical`);
console.log(`  this checkout  median ${ms(median(times.current))}, least ${ms(Math.min(...times.current))}`);
console.log(`  ${hash.padEnd(13)}  median ${ms(median(times.baseline))}, least ${ms(Math.min(...times.baseline))}`);
console.log(`  this / ${hash}: ${(median(times.current) / median(times.baseline)).toFixed(2)}× by medians, ${(Math.min(...times.current) / Math.min(...times.baseline)).toFixed(2)}× by least`);
