/**
 * Builds the statistics input of a finished count job from what the merge kept (stats.json), the
 * vocabulary and job.json — no pass over the store.
 */
import { QuernError } from '../errors.ts';
import { readManifest } from '../job/manifest.ts';
import { readJobVocabulary } from '../count/stage.ts';
import { readStatsFile } from '../merge/stage.ts';
import type { CountOfCounts, StatsInput } from './types.ts';

function addCountOfCounts(a: CountOfCounts, b: CountOfCounts): CountOfCounts {
  const map = new Map<number, number>(a);
  for (const [r, n] of b) map.set(r, (map.get(r) ?? 0) + n);
  return [...map.entries()].sort((x, y) => x[0] - y[0]);
}

export async function loadStatsInput(jobDir: string): Promise<StatsInput> {
  const job = await readManifest(jobDir);
  if (!job) throw new QuernError('config', `${jobDir} is not a quern job (no job.json); run quern count first`);
  if (job.stages.continuation?.status !== 'done') {
    throw new QuernError('config', `the count in ${jobDir} has not finished; re-run the same quern count command to complete it`);
  }
  const stats = await readStatsFile(jobDir);
  const vocab = await readJobVocabulary(jobDir, job);
  const orderMax = job.config.order;
  return {
    order: orderMax,
    vocabularySize: vocab.words.length - 1,
    tokens: job.stages.count.chunks.reduce((s, c) => s + c.tokens, 0),
    sentences: vocab.counts[0],
    unigramCounts: vocab.counts.slice(1),
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
