/**
 * Jelinek-Mercer's held-out lookups in a counted job's store, so that its weights are fitted without
 * the counts in memory (the in-memory path looks them up in whole tables: jelinek-mercer.ts).
 *
 * EM needs, for every held-out token and order n, the context h's total c(h) = Σ_v c(h v), the total
 * of its kept n-grams, and c(h w) when h w is kept. The lookups are gathered first — per order, the
 * distinct held-out n-grams h w, sorted, so grouped by context — and then answered partition by
 * partition: all n-grams h v of a context lie in the partition of h's last word (count/hash.ts), in
 * one key range of its store, read once, contexts in key order so that the store is read forwards
 * and contexts that share a block share its decoding. Unigram figures come from the order-1 level.
 *
 * Memory: the queries, flat typed arrays of about (4n + 8) bytes per held-out token and order, in
 * proportion to the held-out text (which is held in memory anyway), never to the counts.
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
import { silentProgress, type ProgressSink } from '../job/context.ts';
import type { JobManifest } from '../job/manifest.ts';
import { PartitionStore, partitionStoreDir } from '../merge/store.ts';
import { compareRows, type DecodedBlock } from '../count/block-codec.ts';
import { contextIndexOf, contextStarts, prefixRange, searchRows } from './rows.ts';
import { checkCutoffs, unigramLevel, type CutoffOptions, type Level } from './back-off-form.ts';
import { vocabularySize } from './counts.ts';
import { contextTotals, fitWeights, forEachHeldOutToken, type FitOptions, type HeldOutEntry, type HeldOutLookup } from './jelinek-mercer.ts';
import type { InterpolationWeights } from './model.ts';
import { loadUnigrams, readCountedJob } from './stream-stage.ts';

/**
 * The distinct n-grams h w of one order n ≥ 2 that held-out tokens look up, sorted (rows of n ids,
 * as rows.ts keeps tables), grouped by context, with what the store says of them.
 */
interface OrderQueries {
  order: number;
  rows: number;
  ids: Uint32Array;
  /** Context j spans rows [contextStarts[j], contextStarts[j+1]). */
  contextStarts: Uint32Array;
  /** Per row: c(h w) when h w is kept, else 0. */
  keptCount: Float64Array;
  /** Per context: c(h) and the total of its kept n-grams (0 and 0: never seen). */
  total: Float64Array;
  keptTotal: Float64Array;
}

/** The sorted distinct n-grams of order n (≥ 2) of the held-out tokens whose history allows order n. */
function gatherOrder(n: number, heldOut: ReadonlyArray<ArrayLike<number>>, job: HeldOutJob): OrderQueries {
  let tokensMax = 0;
  for (const sentence of heldOut) tokensMax += sentence.length + 1;
  const all = new Uint32Array(tokensMax * n);
  let tokens = 0;
  forEachHeldOutToken(heldOut, job.order, job.size, job.eosId, (wrapped, i, top) => {
    if (top < n) return;
    for (let k = 0; k < n; k++) all[tokens * n + k] = wrapped[i - n + 1 + k];
    tokens++;
  });
  const order = Array.from({ length: tokens }, (_, r) => r).sort((a, b) => compareRows(all, a * n, all, b * n, n));
  let distinct = 0;
  const ids = new Uint32Array(tokens * n);
  for (let r = 0; r < tokens; r++) {
    const from = order[r] * n;
    if (distinct > 0 && compareRows(ids, (distinct - 1) * n, all, from, n) === 0) continue;
    ids.set(all.subarray(from, from + n), distinct * n);
    distinct++;
  }
  const starts = contextStarts(ids, n, distinct);
  const contexts = starts.length - 1;
  return {
    order: n, rows: distinct, ids: ids.slice(0, distinct * n), contextStarts: starts,
    keptCount: new Float64Array(distinct), total: new Float64Array(contexts), keptTotal: new Float64Array(contexts),
  };
}

/**
 * Reads one order of one partition's store forwards, for contexts asked in ascending order: a
 * context whose rows begin in the block read last is answered from it without a new seek, so that
 * the many held-out contexts that share a block cost one decode.
 */
class ForwardReader {
  private blocks: Generator<DecodedBlock> | null = null;
  private block: DecodedBlock | null = null;

  constructor(private readonly store: PartitionStore, private readonly order: number) {}

  /** Calls `visit(keys, counts, row)` for every stored n-gram that starts with `context` (order − 1 ids), in key order. Returns their number. */
  rowsOf(context: Uint32Array, visit: (keys: Uint32Array, counts: Float64Array, row: number) => void): number {
    const n = this.order;
    const length = n - 1;
    let block = this.block;
    if (block === null || compareRows(block.keys, (block.recordCount - 1) * n, context, 0, length) < 0 || compareRows(block.keys, 0, context, 0, length) > 0) {
      // Not in the block read last: seek the block that may hold the context's first n-gram.
      this.blocks?.return(undefined);
      this.blocks = this.store.blocks(n, context, 'raw', true);
      block = this.next();
    }
    let rows = 0;
    while (block !== null) {
      const [start, end] = prefixRange(block.keys, n, block.recordCount, context, 0, length);
      for (let row = start; row < end; row++) visit(block.keys, block.counts, row);
      rows += end - start;
      if (end < block.recordCount) break; // past the context
      block = this.next(); // the context may go on in the next block
      if (block !== null && compareRows(block.keys, 0, context, 0, length) !== 0) break;
    }
    return rows;
  }

  private next(): DecodedBlock | null {
    const step = (this.blocks as Generator<DecodedBlock>).next();
    this.block = step.done ? null : step.value;
    return this.block;
  }

  close(): void {
    this.blocks?.return(undefined);
  }
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
 * them) and returns them as a HeldOutLookup. `progress` counts the contexts read.
 */
export async function storeLookup(job: HeldOutJob, heldOut: ReadonlyArray<ArrayLike<number>>, progress: ProgressSink = silentProgress): Promise<HeldOutLookup> {
  const { unigrams, cutoffs } = job;
  const orders: OrderQueries[] = [];
  for (let n = 2; n <= job.order; n++) orders.push(gatherOrder(n, heldOut, job));
  const contexts = orders.reduce((sum, q) => sum + q.total.length, 0);
  progress.start(`reading the ${contexts} contexts of the held-out text`, contexts, 'tasks', 'n-grams');
  try {
    for (let p = 0; p < job.partitions; p++) {
      const store = PartitionStore.open(path.join(job.jobDir, partitionStoreDir(p)), 'read');
      try {
        for (const queries of orders) answerPartition(store, p, job.partitions, queries, cutoffs[queries.order - 1], progress);
      } finally {
        await store.close();
      }
    }
  } finally {
    progress.stop();
  }

  const unigramTotals = contextTotals(unigrams);
  const unigramTotal = unigramTotals.total[0];
  const unigramKept = unigramTotals.kept[0];
  const none: HeldOutEntry = { total: 0, keptTotal: 0, keptCount: 0 };
  return (n, wrapped, i) => {
    const word = wrapped[i];
    if (n === 1) return { total: unigramTotal, keptTotal: unigramKept, keptCount: unigrams.kept[word] === 1 ? unigrams.counts[word] : 0 };
    const queries = orders[n - 2];
    const row = searchRows(queries.ids, n, queries.rows, wrapped, i - n + 1);
    assert(row >= 0, 'every held-out lookup was gathered beforehand');
    const context = contextIndexOf(queries.contextStarts, row);
    const total = queries.total[context];
    return total === 0 ? none : { total, keptTotal: queries.keptTotal[context], keptCount: queries.keptCount[row] };
  };
}

/**
 * Answers the contexts of `queries` that lie in partition `partition` from its store: each
 * context's totals, and the counts of the words asked about in it (both sorted: merged).
 */
function answerPartition(store: PartitionStore, partition: number, partitions: number, queries: OrderQueries, cutoff: number, progress: ProgressSink): void {
  const n = queries.order;
  const reader = new ForwardReader(store, n);
  try {
    const { ids, contextStarts: starts } = queries;
    for (let j = 0; j + 1 < starts.length; j++) {
      const first = starts[j];
      if (partitionOf(ids, first * n, n, partitions) !== partition) continue;
      const context = ids.subarray(first * n, first * n + n - 1);
      let asked = first; // the next row asked about, by word
      let total = 0;
      let keptTotal = 0;
      const rows = reader.rowsOf(context, (keys, counts, row) => {
        const count = counts[row];
        total += count;
        if (count < cutoff) return;
        keptTotal += count;
        const word = keys[row * n + n - 1];
        while (asked < starts[j + 1] && ids[asked * n + n - 1] < word) asked++;
        if (asked < starts[j + 1] && ids[asked * n + n - 1] === word) queries.keptCount[asked] = count;
      });
      queries.total[j] = total;
      queries.keptTotal[j] = keptTotal;
      progress.update(1, rows);
    }
  } finally {
    reader.close();
  }
}

/**
 * Fits Jelinek-Mercer's weights for the counted job `jobDir` on `heldOut` (vocabulary ids of the
 * job, as fitWeights takes them), with lookups in its store; the weights then go to the streaming
 * estimate as a planned request (method-plan.ts).
 */
export async function fitWeightsOnJob(jobDir: string, heldOut: ReadonlyArray<ArrayLike<number>>, options: FitOptions & CutoffOptions = {}, progress?: ProgressSink): Promise<InterpolationWeights> {
  const job = await readCountedJob(jobDir);
  const order = job.config.order;
  const vocabulary = await readJobVocabulary(jobDir, job);
  const size = vocabularySize(vocabulary);
  const cutoffs = checkCutoffs(options.cutoffs, order);
  const rows = await loadUnigrams(jobDir, job.config.partitions, false);
  const unigrams = unigramLevel(rows.ids, rows.counts, null, size, order === 1);
  const lookup = await storeLookup({ jobDir, partitions: job.config.partitions, order, size, eosId: vocabulary.eosId, cutoffs, unigrams }, heldOut, progress);
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
