/**
 * The streaming estimate (partition by partition, in worker threads, from the job's store) gives the
 * model the in-memory path gives (loadCountTables + estimate): the same rows, log10 values within
 * 1e-12, the same parameters — for every method, orders 1..5, with and without cutoffs, on a job
 * counted from the sample data and on a generated corpus counted with several partitions and a
 * budget small enough that the counters spill. Jelinek-Mercer's weights, fitted by EM on held-out
 * text with lookups in the job's store (heldout-store.ts), equal those fitted on the tables in memory.
 */
import { writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { afterAll, describe, expect, test } from 'vitest';
import { WorkerPool } from '../../src/count/pool.ts';
import { estimate, type EstimateRequest } from '../../src/estimate/estimate.ts';
import { loadCountTables } from '../../src/estimate/from-store.ts';
import { materialiseModel } from '../../src/estimate/model-source.ts';
import type { PlannedRequest } from '../../src/estimate/method-plan.ts';
import { estimateJobStreaming } from '../../src/estimate/stream-stage.ts';
import { fitWeightsOnJob } from '../../src/estimate/heldout-store.ts';
import type { CountTables } from '../../src/estimate/counts.ts';
import { readManifest } from '../../src/job/manifest.ts';
import { REPO, tempDir } from '../support/cli.ts';
import { markovCorpus } from './support.ts';
import { makeTokenizer } from '../../src/corpus/tokenize.ts';
import { readFileSync } from 'node:fs';
import { countJob, expectSameModel } from './stream-support.ts';

export const STREAMED_METHODS = ['modified-kneser-ney', 'kneser-ney', 'absolute-discounting', 'katz', 'witten-bell', 'stupid-backoff'] as const;
const CUTOFFS = [1, 1, 2, 2, 3];
const ORDERS = [1, 2, 3, 4, 5];

const pool = new WorkerPool(2);
afterAll(() => pool.close());

const generated = path.join(tempDir(), 'generated.txt');
writeFileSync(generated, markovCorpus(11, 12_000, 400, 14).map((words) => words.join(' ')).join('\n') + '\n');
/** Lines of the held-out file that come with the sample data. */
const sampleHeldOut = readFileSync(path.join(REPO, 'sample-data/heldout/harbour-heldout.txt'), 'utf8').split('\n').filter((line) => line.trim() !== '');

interface Corpus {
  name: string;
  inputs: string[];
  partitions: number;
  /** Counting budget: the generated corpus's is small enough that the counters spill. */
  memoryBytes: number;
  chunkBytes?: number;
  spills: boolean;
  /** Held-out text for Jelinek-Mercer, one sentence per line. */
  heldOut: string[];
}

const CORPORA: Corpus[] = [
  { name: 'sample data (logbook)', inputs: [path.join(REPO, 'sample-data/logbook')], partitions: 4, memoryBytes: 256 << 20, spills: false, heldOut: sampleHeldOut },
  { name: 'generated, 7 partitions, spilling', inputs: [generated], partitions: 7, memoryBytes: 9 << 20, chunkBytes: 200_000, spills: true, heldOut: markovCorpus(12, 600, 400, 14).map((words) => words.join(' ')) },
];

/** Jobs counted so far, by corpus and order. */
const jobs = new Map<string, Promise<string>>();
function jobOf(corpus: Corpus, order: number): Promise<string> {
  const key = `${corpus.name}|${order}`;
  if (!jobs.has(key)) {
    jobs.set(key, (async () => {
      const job = path.join(tempDir(), 'job');
      await countJob(job, corpus.inputs, order, { partitions: corpus.partitions, memoryBytes: corpus.memoryBytes, chunkBytes: corpus.chunkBytes });
      return job;
    })());
  }
  return jobs.get(key)!;
}

describe.each(CORPORA)('streamed = in memory on $name', (corpus) => {
  test.each(ORDERS)('order %i: the job is counted as described', async (order) => {
    const job = await jobOf(corpus, order);
    const manifest = (await readManifest(job))!;
    expect(manifest.config.partitions).toBe(corpus.partitions);
    const spills = manifest.stages.count.chunks.reduce((sum, c) => sum + c.spills, 0);
    if (corpus.spills && order >= 4) expect(spills).toBeGreaterThan(0);
  }, 60_000);

  for (const method of STREAMED_METHODS) {
    test.each(ORDERS)(`${method}, order %i, without and with cutoffs`, async (order) => {
      const job = await jobOf(corpus, order);
      const counts = await loadCountTables(job, 1 << 30);
      for (const cutoffs of [undefined, CUTOFFS.slice(0, order)]) {
        const request = { method, fallback: true, cutoffs } as PlannedRequest;
        const { source, partitions } = await estimateJobStreaming({ jobDir: job, request, memoryBytes: 64 << 20, workers: 2, pool });
        expect(partitions).toBe(corpus.partitions);
        const streamed = await materialiseModel(source);
        expectSameModel(streamed, estimate(counts, request as EstimateRequest));
      }
    }, 60_000);
  }

  test.each(ORDERS)('jelinek-mercer, order %i: weights fitted on the store, with and without buckets and cutoffs', async (order) => {
    const job = await jobOf(corpus, order);
    const counts = await loadCountTables(job, 1 << 30);
    const heldOut = heldOutIds(counts, corpus.heldOut);
    for (const [bucketed, cutoffs] of [[false, undefined], [true, undefined], [true, CUTOFFS.slice(0, order)]] as const) {
      const weights = await fitWeightsOnJob(job, heldOut, { bucketed, cutoffs });
      const inMemory = estimate(counts, { method: 'jelinek-mercer', heldOut, bucketed, cutoffs });
      const request = { method: 'jelinek-mercer', weights, cutoffs } as PlannedRequest;
      const { source } = await estimateJobStreaming({ jobDir: job, request, memoryBytes: 64 << 20, workers: 2, pool });
      // The same weights (EM over the same numbers in the same order), hence the same model.
      expectSameModel(await materialiseModel(source), inMemory);
      if (bucketed && order > 1) expect(weights.orders[1].buckets.length).toBeGreaterThan(1);
    }
  }, 60_000);
});

/** Held-out lines as the job's vocabulary ids, tokenised as countJob's jobs are (lower-cased, split at spaces). */
function heldOutIds(counts: CountTables, lines: string[]): Uint32Array[] {
  const ids = new Map(counts.vocabulary.words.map((w, id) => [w, id]));
  const tokenize = makeTokenizer({ lowercase: true, unicode: 'none', split: 'space' });
  const tokens: string[] = [];
  return lines.map((line) => Uint32Array.from(tokens.slice(0, tokenize(line, tokens)), (w) => ids.get(w) ?? counts.vocabulary.unkId));
}
