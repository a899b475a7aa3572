/**
 * Jelinek-Mercer's held-out lookups in a counted job's store, so that its weights are fitted without
 * the counts in memory (the in-memory path looks them up in whole tables: jelinek-mercer.ts).
 *
 * EM needs, for every held-out token and order n, the context h's total c(h) = Σ_v c(h v), the total
 * of its kept n-grams, and c(h w) when h w is kept. The lookups are gathered first — one query per
 * distinct context and order, with the words asked about in it — and then answered partition by
 * partition: all n-grams h v of a context lie in the partition of h's last word (count/hash.ts), in
 * one key range of its store, which is read once. Unigram figures come from the order-1 level.
 *
 * Memory: the queries, i.e. in proportion to the held-out text (which is held in memory anyway),
 * never to the counts. Time: one range read per distinct held-out context and order.
 *
 * The held-out text itself (`readHeldOutText`) is read by the corpus reader and tokenised as the
 * job's text was.
 */
import * as path from 'node:path';
import { assert, QuernError } from '../errors.ts';
import { partitionOf } from '../count/hash.ts';
import { readJobVocabulary } from '../count/stage.ts';
import { discoverInputs } from '../corpus/discover.ts';
import { planChunks } from '../corpus/plan.ts';
import { readChunk } from '../corpus/read.ts';
import { makeTokenizer } from '../corpus/tokenize.ts';
import { readManifest, type JobManifest } from '../job/manifest.ts';
import { PartitionStore, partitionStoreDir, StoreSource } from '../merge/store.ts';
import { checkCutoffs, unigramLevel, type CutoffOptions, type Level } from './back-off-form.ts';
import { vocabularySize } from './counts.ts';
import { fitWeights, forEachHeldOutToken, type FitOptions, type HeldOutEntry, type HeldOutLookup } from './jelinek-mercer.ts';
import type { InterpolationWeights } from './model.ts';
import { loadUnigrams } from './stream-stage.ts';

/** One distinct context of one order that held-out tokens look up, and the words they ask about. */
interface ContextQuery {
  order: number;
  /** The context's ids (order − 1 of them). */
  context: Uint32Array;
  /** c(h w) of each word asked about when h w is kept, else 0 (filled in when answered). */
  words: Map<number, number>;
  total: number;
  keptTotal: number;
}

/** The query's key: order and context ids. */
function queryKey(order: number, wrapped: ArrayLike<number>, from: number, to: number): string {
  let key = String(order);
  for (let k = from; k < to; k++) key += ',' + wrapped[k];
  return key;
}

function compareContexts(a: Uint32Array, b: Uint32Array): number {
  for (let k = 0; k < a.length; k++) if (a[k] !== b[k]) return a[k] - b[k];
  return 0;
}

/** What the lookups need of the job. */
export interface HeldOutJob {
  jobDir: string;
  partitions: number;
  /** N. */
  order: number;
  /** V. */
  size: number;
  eosId: number;
  /** Minimum raw count per order (index order − 1). */
  cutoffs: number[];
  /** The order-1 level (unigramLevel). */
  unigrams: Level;
}

/**
 * Answers, from the job's store, every lookup EM will make for `heldOut` (ids as fitWeights takes
 * them) and returns them as a HeldOutLookup. `onContext` hears of each context read, for progress.
 */
export async function storeLookup(job: HeldOutJob, heldOut: ReadonlyArray<ArrayLike<number>>, onContext: (done: number, all: number) => void = () => undefined): Promise<HeldOutLookup> {
  const { order, unigrams, cutoffs } = job;
  const queries = new Map<string, ContextQuery>();
  forEachHeldOutToken(heldOut, order, job.size, job.eosId, (wrapped, i, top) => {
    for (let n = 2; n <= top; n++) {
      const key = queryKey(n, wrapped, i - n + 1, i);
      let query = queries.get(key);
      if (query === undefined) {
        query = { order: n, context: Uint32Array.from(wrapped.slice(i - n + 1, i)), words: new Map(), total: 0, keptTotal: 0 };
        queries.set(key, query);
      }
      query.words.set(wrapped[i], 0);
    }
  });

  // By partition, each partition's contexts in key order (order, then ids): its store is read forwards.
  const byPartition: ContextQuery[][] = Array.from({ length: job.partitions }, () => []);
  for (const query of queries.values()) byPartition[partitionOf(query.context, 0, query.order, job.partitions)].push(query);
  let done = 0;
  for (let p = 0; p < job.partitions; p++) {
    const list = byPartition[p];
    if (list.length === 0) continue;
    list.sort((a, b) => a.order - b.order || compareContexts(a.context, b.context));
    const store = PartitionStore.open(path.join(job.jobDir, partitionStoreDir(p)), 'read');
    try {
      for (const query of list) {
        await answer(store, query, cutoffs[query.order - 1]);
        onContext(++done, queries.size);
      }
    } finally {
      await store.close();
    }
  }

  let unigramTotal = 0;
  let unigramKept = 0;
  for (let id = unigrams.contextStarts[0]; id < unigrams.contextStarts[1]; id++) {
    unigramTotal += unigrams.counts[id];
    if (unigrams.kept[id] === 1) unigramKept += unigrams.counts[id];
  }
  const none: HeldOutEntry = { total: 0, keptTotal: 0, keptCount: 0 };
  return (n, wrapped, i) => {
    const word = wrapped[i];
    if (n === 1) return { total: unigramTotal, keptTotal: unigramKept, keptCount: unigrams.kept[word] === 1 ? unigrams.counts[word] : 0 };
    const query = queries.get(queryKey(n, wrapped, i - n + 1, i));
    assert(query !== undefined && query.words.has(word), 'every held-out lookup was gathered beforehand');
    return query.total === 0 ? none : { total: query.total, keptTotal: query.keptTotal, keptCount: query.words.get(word) as number };
  };
}

/** Reads the n-grams of the query's context from `store`: its totals, and the counts of its words. */
async function answer(store: PartitionStore, query: ContextQuery, cutoff: number): Promise<void> {
  const n = query.order;
  const source = new StoreSource(store, n, query.context, 'raw', true);
  try {
    for (let batch = await source.nextBatch(); batch !== null; batch = await source.nextBatch()) {
      for (let row = 0; row < batch.recordCount; row++) {
        const count = batch.counts[row];
        query.total += count;
        if (count < cutoff) continue;
        query.keptTotal += count;
        const word = batch.keys[row * n + n - 1];
        if (query.words.has(word)) query.words.set(word, count);
      }
    }
  } finally {
    await source.close();
  }
}

/**
 * Fits Jelinek-Mercer's weights for the counted job `jobDir` on `heldOut` (vocabulary ids of the
 * job, as fitWeights takes them), with lookups in its store; the weights then go to the streaming
 * estimate as a planned request (method-plan.ts).
 */
export async function fitWeightsOnJob(jobDir: string, heldOut: ReadonlyArray<ArrayLike<number>>, options: FitOptions & CutoffOptions = {}, onContext?: (done: number, all: number) => void): Promise<InterpolationWeights> {
  const job = await readManifest(jobDir);
  if (!job) throw new QuernError('config', `${jobDir} is not a quern job (no job.json); run quern count first`);
  if (job.stages.continuation?.status !== 'done') {
    throw new QuernError('config', `the count in ${jobDir} has not finished; re-run the same quern count command to complete it`);
  }
  const order = job.config.order;
  const vocabulary = await readJobVocabulary(jobDir, job);
  const size = vocabularySize(vocabulary);
  const cutoffs = checkCutoffs(options.cutoffs, order);
  const rows = await loadUnigrams(jobDir, job.config.partitions, false);
  const unigrams = unigramLevel(rows.ids, rows.counts, null, size, order === 1);
  const lookup = await storeLookup({ jobDir, partitions: job.config.partitions, order, size, eosId: vocabulary.eosId, cutoffs, unigrams }, heldOut, onContext);
  return fitWeights(order, size, vocabulary.eosId, heldOut, lookup, options);
}

/**
 * The held-out text of `file` (plain or gzip, one sentence per line), tokenised as the job's text
 * was and mapped to its vocabulary ids (unknown words to `<unk>`); blank lines are left out. Read
 * by the corpus reader, so invalid UTF-8 or a truncated gzip stops with the file and line.
 */
export async function readHeldOutText(file: string, jobDir: string, job: JobManifest): Promise<Uint32Array[]> {
  const inputs = await discoverInputs([file]);
  if (inputs.some((f) => f.format === 'jsonl')) throw new QuernError('config', `--heldout ${file}: give held-out text as plain text (or gzip), one sentence per line; JSON Lines is not read here`);
  const vocabulary = await readJobVocabulary(jobDir, job);
  const ids = new Map(vocabulary.words.map((w, id) => [w, id]));
  const tokenize = makeTokenizer(job.config.normalize);
  const tokens: string[] = [];
  const sentences: Uint32Array[] = [];
  for (const chunk of await planChunks(inputs, Number.MAX_SAFE_INTEGER)) {
    await readChunk(inputs[chunk.fileIndex], chunk, { format: 'text', textField: undefined, skipBad: false }, (sentence) => {
      const n = tokenize(sentence, tokens);
      if (n > 0) sentences.push(Uint32Array.from(tokens.slice(0, n), (w) => ids.get(w) ?? vocabulary.unkId));
    });
  }
  return sentences;
}
