/**
 * A count worker thread. In the vocabulary phase it counts word strings per chunk; in the count
 * phase it turns words into ids and counts n-grams of orders 1..N in its CounterSet, spilling
 * sorted, partitioned run files when its budget is reached and at the end of every chunk (so a
 * finished chunk is a durable unit of work).
 */
import { parentPort } from 'node:worker_threads';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import { readChunk } from '../corpus/read.ts';
import { makeTokenizer } from '../corpus/tokenize.ts';
import { BOS_ID, UNK } from '../corpus/vocabulary.ts';
import { stageFs } from '../job/fsio.ts';
import type { RunRecord } from '../job/manifest.ts';
import type { Chunk, ReadOptions } from '../corpus/types.ts';
import { CounterSet } from './counter-set.ts';
import { spillCounterSet } from './spill.ts';
import { mergePartition, type PartitionMergeTask } from '../merge/merge-partition.ts';
import { partitionStoreDir } from '../merge/store.ts';
import { emitContinuations } from '../merge/continuation.ts';
import { remapChunkRuns } from './remap.ts';
import { runFilePath } from './run-layout.ts';
import type { FromWorker, ToWorker, WorkerInit } from './protocol.ts';

const PROGRESS_INTERVAL_MS = 200;

const port = parentPort!;
const fs = stageFs();

function readOptionsOf(chunk: Chunk): ReadOptions {
  return { format: init.inputs[chunk.fileIndex].format, textField: init.textField, skipBad: init.skipBad };
}
// The phase this worker is in, set by each 'init' message: one worker serves every phase of a job.
let init: WorkerInit;
let tokenize: ReturnType<typeof makeTokenizer>;
const tokens: string[] = [];

function post(message: FromWorker): void {
  port.postMessage(message);
}

let progressBytes = 0;
let progressTokens = 0;
let progressAt = Date.now();
function flushProgress(force: boolean): void {
  const now = Date.now();
  if (!force && now - progressAt < PROGRESS_INTERVAL_MS) return;
  if (progressBytes > 0 || progressTokens > 0) post({ type: 'progress', bytes: progressBytes, tokens: progressTokens });
  progressBytes = 0;
  progressTokens = 0;
  progressAt = now;
}

function progressReporter(): (bytesRead: number) => void {
  let last = 0;
  return (bytesRead) => {
    progressBytes += bytesRead - last;
    last = bytesRead;
    flushProgress(false);
  };
}

// ---- vocabulary phase ----------------------------------------------------------------------

// Word → slot in `slotCounts`: an existing word costs one Map lookup, not a get and a set.
let wordSlots = new Map<string, number>();
let slotCounts: number[] = [];
let unkSeen = 0;

async function vocabChunk(chunk: Chunk): Promise<void> {
  let chunkTokens = 0;
  const reads = await readChunk(init.inputs[chunk.fileIndex], chunk, readOptionsOf(chunk), (sentence) => {
    const n = tokenize(sentence, tokens);
    for (let i = 0; i < n; i++) {
      const word = tokens[i];
      const slot = wordSlots.get(word);
      if (slot !== undefined) slotCounts[slot]++;
      else if (word === UNK) unkSeen++;
      else {
        wordSlots.set(word, slotCounts.length);
        slotCounts.push(1);
      }
    }
    chunkTokens += n;
    progressTokens += n;
  }, progressReporter());
  flushProgress(true);
  post({ type: 'done', chunk: chunk.index, reads, tokens: chunkTokens });
}

// ---- count phase ---------------------------------------------------------------------------

let wordIds: Map<string, number> | undefined;
let counters: CounterSet | undefined;
let ids = new Uint32Array(1024);

function countState(): { wordIds: Map<string, number>; counters: CounterSet } {
  if (!wordIds) {
    wordIds = new Map();
    const words = init.words!;
    for (let id = 1; id < words.length; id++) wordIds.set(words[id], id);
    counters = new CounterSet(init.order, init.counterBytesMax!);
  }
  return { wordIds, counters: counters! };
}

/** Writes every non-empty counter as sorted run files, one per partition, and clears it. */
async function spillAll(chunk: number, spill: number, runs: RunRecord[]): Promise<void> {
  runs.push(...await spillCounterSet(counters!, {
    fs, jobDir: init.jobDir, partitions: init.partitions, idMax: init.words!.length, chunk, spill,
    fileFor: (order, partition) => runFilePath(order, partition, chunk, spill),
  }));
}

async function countChunk(chunk: Chunk): Promise<void> {
  const { wordIds: map, counters: set } = countState();
  const eosId = init.eosId!;
  const unkId = init.unkId!;
  const runs: RunRecord[] = [];
  let spillSeq = 0;
  let budgetSpills = 0;
  let chunkTokens = 0;
  const occurrences = new Array<number>(init.order).fill(0);
  // The reader calls back synchronously for every sentence of a block, but a spill writes files
  // (async). So a sentence that does not fit waits in the backlog — at most one read block's worth —
  // and the spill runs between blocks, in the reader's awaited progress callback.
  const backlog: Uint32Array[] = [];
  const drain = async (): Promise<void> => {
    if (backlog.length === 0) return;
    await spillAll(chunk.index, spillSeq++, runs);
    budgetSpills++;
    for (const sentence of backlog) {
      if (!set.reserve(sentence.length)) {
        await spillAll(chunk.index, spillSeq++, runs);
        budgetSpills++;
        if (!set.reserve(sentence.length)) {
          throw new QuernError('limit', `a sentence of ${sentence.length - 2} tokens in ${init.inputs[chunk.fileIndex].path} does not fit the counting budget of ${set.bytesMax} bytes per worker; raise --memory`);
        }
      }
      set.addSentence(sentence, sentence.length);
    }
    backlog.length = 0;
  };
  const reportProgress = progressReporter();

  await readChunk(init.inputs[chunk.fileIndex], chunk, readOptionsOf(chunk), (sentence) => {
    const n = tokenize(sentence, tokens);
    if (ids.length < n + 2) ids = new Uint32Array(2 * (n + 2));
    ids[0] = BOS_ID;
    for (let i = 0; i < n; i++) ids[i + 1] = map.get(tokens[i]) ?? unkId;
    ids[n + 1] = eosId;
    chunkTokens += n;
    progressTokens += n;
    // A wrapped sentence of n+2 ids has an n-gram of order k ending at positions max(1,k−1)..n+1.
    for (let k = 1; k <= init.order; k++) occurrences[k - 1] += Math.max(0, n + 2 - Math.max(1, k - 1));
    if (backlog.length === 0 && set.reserve(n + 2)) set.addSentence(ids, n + 2);
    else backlog.push(ids.slice(0, n + 2));
  }, (bytesRead) => {
    reportProgress(bytesRead);
    return backlog.length > 0 ? drain() : undefined;
  });
  await drain();
  // The end of a chunk is a spill point: a finished chunk is then wholly in durable run files.
  await spillAll(chunk.index, spillSeq++, runs);
  flushProgress(true);
  post({ type: 'done', chunk: chunk.index, tokens: chunkTokens, spills: budgetSpills, occurrences, runs });
}

// ---- merge phase ---------------------------------------------------------------------------

async function mergeTask(task: PartitionMergeTask): Promise<void> {
  const space = init.phase === 'continuation-merge' ? 'continuation' : 'raw';
  const tallies = await mergePartition(init.jobDir, partitionStoreDir(task.partition), task, space);
  post({ type: 'done', partition: task.partition, tallies });
}

async function remapTask(chunk: number, files: string[]): Promise<void> {
  const runs = await remapChunkRuns({
    fs, jobDir: init.jobDir, chunk, files, idMap: init.idMap!, orderMax: init.order, partitions: init.partitions,
    idMax: init.idMax!, counterBytesMax: init.counterBytesMax!, spillBase: init.spillBase!,
  });
  post({ type: 'done', chunk, runs });
}

async function emitTask(partition: number): Promise<void> {
  const runs = await emitContinuations({
    fs, jobDir: init.jobDir, partition, orderMax: init.order, partitions: init.partitions,
    idMax: init.idMax!, counterBytesMax: init.counterBytesMax!,
  });
  post({ type: 'done', partition, runs });
}

/** Starts a phase: its settings, and a fresh state for it. */
function startPhase(next: WorkerInit): void {
  init = next;
  tokenize = makeTokenizer(init.normalize);
  wordSlots = new Map();
  slotCounts = [];
  unkSeen = 0;
  wordIds = undefined;
  counters = undefined;
}

async function handle(message: ToWorker): Promise<void> {
  if (message.type === 'init') {
    startPhase(message.init);
    return;
  }
  if (message.type === 'finish') {
    if (init.phase === 'vocab') {
      post({ type: 'finished', words: [...wordSlots.keys()], counts: slotCounts, unkSeen });
    } else {
      post({ type: 'finished' });
    }
    // Let the phase's memory go before the next one.
    wordSlots = new Map();
    slotCounts = [];
    wordIds = undefined;
    counters = undefined;
    return;
  }
  if (message.type === 'partition') await mergeTask(message.task);
  else if (message.type === 'emit') await emitTask(message.partition);
  else if (message.type === 'remap') await remapTask(message.chunk, message.files);
  else if (init.phase === 'vocab') await vocabChunk(message.chunk);
  else await countChunk(message.chunk);
}

port.on('message', (message: ToWorker) => {
  handle(message).catch((error: unknown) => {
    const failure: FromWorker = error instanceof QuernError
      ? { type: 'error', code: error.code, message: error.message, location: error.location }
      : { type: 'error', code: undefined, message: (error as Error)?.message ?? String(error), stack: (error as Error)?.stack };
    post(failure);
  });
});
