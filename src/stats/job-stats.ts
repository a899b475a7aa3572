/**
 * Builds the statistics input of a finished count job from what the merge kept (stats.json) and
 * job.json — no pass over the store, and not even the vocabulary file: the unigram counts the Zipf
 * fit ranks are the order-1 count-of-counts expanded (the same multiset of counts ≥ 1), V is the
 * vocabulary stage's type count, and the sentences are those its reads counted.
 */
import { QuernError } from '../errors.ts';
import { readManifest } from '../job/manifest.ts';
import { assert } from '../errors.ts';
import { readStatsFile } from '../merge/stage.ts';
import type { CountOfCounts, StatsInput } from './types.ts';

function addCountOfCounts(a: CountOfCounts, b: CountOfCounts): CountOfCounts {
  const map = new Map<number, number>(a);
  for (const [r, n] of b) map.set(r, (map.get(r) ?? 0) + n);
  return [...map.entries()].sort((x, y) => x[0] - y[0]);
}

/** The counts a count-of-counts describes, n_r copies of each r, and zeros up to `length` (the
 *  vocabulary words never seen, such as an unused `<unk>`). */
function expandCountOfCounts(pairs: CountOfCounts, length: number): number[] {
  const counts: number[] = [];
  for (const [r, n] of pairs) for (let i = 0; i < n; i++) counts.push(r);
  assert(counts.length <= length, `${counts.length} distinct unigrams in a vocabulary of ${length}`);
  while (counts.length < length) counts.push(0);
  return counts;
}

export async function loadStatsInput(jobDir: string): Promise<StatsInput> {
  const job = await readManifest(jobDir);
  if (!job) throw new QuernError('config', `${jobDir} is not a quern job (no job.json); run quern count first`);
  if (job.stages.continuation?.status !== 'done') {
    throw new QuernError('config', `the count in ${jobDir} has not finished; re-run the same quern count command to complete it`);
  }
  const stats = await readStatsFile(jobDir);
  const orderMax = job.config.order;
  const { types, reads } = job.stages.vocab;
  assert(types !== undefined && reads !== undefined && reads.every((r) => r !== null), 'a finished count records its vocabulary');
  return {
    order: orderMax,
    vocabularySize: types,
    tokens: job.stages.count.chunks.reduce((s, c) => s + c.tokens, 0),
    sentences: reads.reduce((sum, r) => sum + r!.sentences, 0),
    unigramCounts: expandCountOfCounts(stats.tallies[0].raw, types),
    orders: stats.tallies.map((t) => ({
      order: t.order,
      distinct: t.distinct,
      total: t.total,
      raw: t.raw,
      // Kneser-Ney's counts at a lower order: continuation counts, except raw counts for n-grams
      // that begin with <s> (DESIGN.md).
      ...(t.order < orderMax ? { continuation: addCountOfCounts(stats.continuation[t.order - 1].raw, t.bosRaw) } : {}),
      ...(t.order >= 2 ? { contexts: t.contexts } : {}),
    })),
  };
}
