/**
 * A worker thread of the job's pool (and of `quern score`, phase 'score': chunks scored with a model
 * shared by the main thread, src/score/score-chunk.ts). In the vocabulary phase it counts words per chunk in a word table keyed
 * by their UTF-8 bytes; in the count phase it turns words into ids through a table of the
 * vocabulary and counts n-grams of orders 1..N in its CounterSet, spilling sorted, partitioned run
 * files when its budget is reached and at the end of every chunk (so a finished chunk is a durable
 * unit of work). Tokens come from corpus/read-tokens.ts, a read block at a time.
 */
import * as path from 'node:path';
import { parentPort, threadId, workerData } from 'node:worker_threads';
import { assert, QuernError } from '../errors.ts';
import { COUNTER_APPEND_ORDER_MIN, COUNTER_BATCH_POSITIONS } from '../limits.ts';
import { RESERVED_WORDS, reserveWords, type TokenBlock } from '../corpus/byte-tokenizer.ts';
import { TokenReader } from '../corpus/read-tokens.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
import { WordTable } from '../corpus/word-table.ts';
import { stageFs } from '../job/fsio.ts';
import { installStopGate, StopGate } from '../job/stop-gate.ts';
import type { ChunkResult, RunRecord } from '../job/manifest.ts';
import { inputBytesOf, isTextRange, type Chunk, type ReadOptions } from '../corpus/types.ts';
import { CounterSet, type CounterNeed } from './counter-set.ts';
import { spillCounterSet } from './spill.ts';
import { mergePartition, type PartitionMergeTask } from '../merge/merge-partition.ts';
import { partitionStoreDir } from '../merge/store.ts';
import { emitContinuations } from '../merge/continuation.ts';
import { remapChunkRuns } from './remap.ts';
import { estimatePartition } from '../estimate/partition-estimate.ts';
import { modelFromShared, type PackedModel } from '../pack/reader.ts';
import { scoreChunk } from '../score/score-chunk.ts';
import { runFilePath } from './run-layout.ts';
import { readVocabularyFile, VOCAB_FILE } from './vocab-file.ts';
import { readTokenFile, tokenFileIntact, TokenFileWriter, type TokenFileBlock } from './token-file.ts';
import type { FromWorker, ToWorker, VocabFinished, WorkerInit } from './protocol.ts';

const PROGRESS_INTERVAL_MS = 200;

const port = parentPort!;
const fs = stageFs();
// The pool's gate: this thread's store commits go through it, so the pool can stop it between them.
installStopGate(new StopGate((workerData as { stopGate: SharedArrayBuffer }).stopGate));

function readOptionsOf(chunk: Chunk): ReadOptions {
  return { format: init.inputs[chunk.fileIndex].format, textField: init.textField, skipBad: init.skipBad };
}
// The phase this worker is in, set by each 'init' message: one worker serves every phase of a job.
let init: WorkerInit;

function post(message: FromWorker): void {
  port.postMessage(message);
}

let progressBytes = 0;
let progressTokens = 0;
let progressAt = Date.now();
function flushProgress(force: boolean): void {
  const now = Date.now();
  if (!force && now - progressAt < PROGRESS_INTERVAL_MS) return;
  if (progressBytes > 0 || progressTokens !== 0) post({ type: 'progress', bytes: progressBytes, tokens: progressTokens });
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

/**
 * N-grams per input byte (tokens + sentences, the occurrences of each order at most), learned in
 * the vocabulary phase and from counted chunks, by kind of input (gzip bytes hold several times more
 * text). It sizes the counters before a chunk (CounterSet.presize); it never changes a result.
 */
const ngramsPerByte = { plain: 0, gzip: 0 };

function learnNgramsPerByte(chunk: Chunk, ngrams: number): void {
  const bytes = chunk.byteEnd - chunk.byteStart;
  if (bytes <= 0) return;
  const kind = isCompressedRange(chunk) ? 'gzip' : 'plain';
  ngramsPerByte[kind] = Math.max(ngramsPerByte[kind], ngrams / bytes);
}

// ---- vocabulary phase ----------------------------------------------------------------------

// Every word this worker has seen, with its count by entry; entries 0..2 are the reserved words
// (`<s>`, `</s>`, `<unk>`), whose occurrences in the text count as `<unk>`.
let vocabTable: WordTable | undefined;
let vocabReader: TokenReader | undefined;
let entryCounts = new Float64Array(0);

async function vocabChunk(chunk: Chunk): Promise<void> {
  if (!vocabTable) {
    vocabTable = new WordTable();
    reserveWords(vocabTable);
    vocabReader = new TokenReader(init.normalize, vocabTable, true);
  }
  const table = vocabTable;
  let chunkTokens = 0;
  // This worker's word table is named by its thread id in the token files (unique in the process
  // that runs the whole pass: an interrupted pass starts over).
  const writer = init.writeTokenFiles ? await TokenFileWriter.open(fs, init.jobDir, chunk.index, threadId) : undefined;
  let reads;
  try {
    reads = await vocabReader!.read(init.inputs[chunk.fileIndex], chunk, readOptionsOf(chunk), (block) => {
      if (entryCounts.length < table.size) {
        const counts = new Float64Array(Math.max(table.size, 2 * entryCounts.length));
        counts.set(entryCounts);
        entryCounts = counts;
      }
      const counts = entryCounts;
      const entries = block.entries;
      for (let i = 0; i < block.tokens; i++) counts[entries[i]]++;
      chunkTokens += block.tokens;
      progressTokens += block.tokens;
      return writer?.append(block);
    }, progressReporter());
  } catch (error) {
    await writer?.abort();
    throw error;
  }
  const tokenFile = await writer?.finish();
  learnNgramsPerByte(chunk, chunkTokens + reads.sentences);
  flushProgress(true);
  post({ type: 'done', chunk: chunk.index, reads, tokens: chunkTokens, ...(tokenFile ? { tokenFile } : {}) });
}

/** This worker's words (entries from 3 on) as one block of UTF-8 bytes, and their counts: typed
 *  arrays, moved to the main thread rather than copied, and no string made per word. */
function vocabFinished(): VocabFinished {
  const table = vocabTable;
  let unkSeen = 0;
  if (!table) return { type: 'finished', table: threadId, wordBytes: new Uint8Array(0), wordEnds: new Uint32Array(0), counts: new Float64Array(0), unkSeen };
  for (let entry = 0; entry < RESERVED_WORDS.length; entry++) unkSeen += entryCounts[entry] ?? 0;
  const words = table.size - RESERVED_WORDS.length;
  const wordEnds = new Uint32Array(words);
  let bytes = 0;
  for (let i = 0; i < words; i++) wordEnds[i] = bytes += table.wordBytes(RESERVED_WORDS.length + i).length;
  const wordBytes = new Uint8Array(bytes);
  for (let i = 0; i < words; i++) wordBytes.set(table.wordBytes(RESERVED_WORDS.length + i), i === 0 ? 0 : wordEnds[i - 1]);
  const counts = entryCounts.slice(RESERVED_WORDS.length, table.size);
  return { type: 'finished', table: threadId, wordBytes, wordEnds, counts, unkSeen };
}

// ---- count phase ---------------------------------------------------------------------------

interface CountState {
  /** The reader of text and its map from word-table entries to word ids, made on first use: a
   *  chunk read from its token file needs neither (its own map comes with the phase's settings). */
  text: TextIds | undefined;
  counters: CounterSet;
}

/** What reading a chunk's text (not its token file) needs in the count phase. */
interface TextIds {
  reader: TokenReader;
  /** idOfEntry[entry] = the word id of a word-table entry (`<unk>` for the reserved words). */
  idOfEntry: Uint32Array;
}

let countState: CountState | undefined;
/** Per input byte, by order: counter entries and table entries at the end of the last chunk counted
 *  without a budget spill (plain input). */
let needsPerByte: CounterNeed[] | undefined;

function countStateOf(): CountState {
  countState ??= { text: undefined, counters: new CounterSet(init.order, init.counterBytesMax!, init.idMax!, { appendFrom: COUNTER_APPEND_ORDER_MIN }) };
  return countState;
}

/** The count phase's word table of the whole vocabulary (~0.3 s for 200,000 words), built from the
 *  job's vocab.tsv the first time a chunk is read from its text. */
async function textIdsOf(state: CountState): Promise<TextIds> {
  if (!state.text) {
    const { words } = await readVocabularyFile(path.join(init.jobDir, VOCAB_FILE), init.vocabSha256!);
    assert(words.length === init.idMax, `vocab.tsv holds ${words.length} ids, the count expects ${init.idMax}`);
    const table = WordTable.sizedFor(RESERVED_WORDS.length + words.length);
    reserveWords(table);
    // Entries from 3 on are the vocabulary's words; `</s>` and `<unk>` are in the vocabulary too,
    // but as text they are reserved entries, which read as `<unk>`.
    const idOfEntry = new Uint32Array(RESERVED_WORDS.length + words.length);
    idOfEntry.fill(init.unkId!, 0, RESERVED_WORDS.length);
    for (let id = 1; id < words.length; id++) {
      const entry = table.internWord(words[id]);
      if (entry >= RESERVED_WORDS.length) idOfEntry[entry] = id;
    }
    state.text = { reader: new TokenReader(init.normalize, table, false), idOfEntry };
  }
  return state.text;
}

/** Writes every non-empty counter as sorted run files, one per partition, and clears it. */
async function spillAll(chunk: number, spill: number, runs: RunRecord[]): Promise<void> {
  runs.push(...await spillCounterSet(countState!.counters, {
    fs, jobDir: init.jobDir, partitions: init.partitions, idMax: init.idMax!, chunk, spill,
    fileFor: (order, partition) => runFilePath(order, partition, chunk, spill),
  }));
}

/** Sizes the (empty) counters for the chunks of a group from what earlier groups showed. */
function presizeFor(group: readonly Chunk[], counters: CounterSet): void {
  const bytes = groupBytes(group);
  const gzip = groupHasGzip(group);
  let needs: CounterNeed[];
  if (needsPerByte !== undefined && !gzip) {
    // A little headroom: the next group may be a little richer.
    needs = needsPerByte.map((need) => ({ entries: Math.ceil(1.1 * need.entries * bytes), tableEntries: Math.ceil(1.1 * need.tableEntries * bytes) }));
  } else {
    const rate = ngramsPerByte[gzip ? 'gzip' : 'plain'];
    if (rate === 0) return;
    // Unknown yet: each order has at most as many entries as occurrences, order 1 at most the
    // vocabulary; a guess of an eighth of them repeated (the table grows if that is short).
    const ngrams = Math.ceil(1.1 * rate * bytes);
    needs = Array.from({ length: init.order }, (_, n) => {
      const entries = n === 0 ? Math.min(ngrams, init.idMax!) : ngrams;
      return { entries, tableEntries: n === 0 ? entries : Math.ceil(entries / 8) };
    });
  }
  counters.presize(needs);
}

function groupBytes(group: readonly Chunk[]): number {
  return group.reduce((sum, chunk) => sum + chunk.byteEnd - chunk.byteStart, 0);
}

/** Gzip bytes hold several times more text than plain ones: a group with any is sized by rate. */
function groupHasGzip(group: readonly Chunk[]): boolean {
  return group.some(isCompressedRange);
}

/** Whether a chunk's bytes are compressed ones (a whole gzip input), not text (a range of its
 *  decompressed text, or a plain file's). */
function isCompressedRange(chunk: Chunk): boolean {
  return init.inputs[chunk.fileIndex].gzip && !isTextRange(chunk);
}

/** The sentences of the current block wrapped as id sequences: sentence s is
 *  wrapped[wrappedStarts[s] .. wrappedStarts[s+1]), `<s>` first and `</s>` last. */
let wrapped = new Uint32Array(1 << 16);
let wrappedStarts = new Uint32Array(1 << 12);

/** Turns the block's sentences into word ids (`idOfEntry` of its entries, every one of which it
 *  must cover: for a token file the CRC vouches for the bytes, this for the pairing of file and
 *  map), wrapped; adds their n-gram occurrences per order. */
function wrapSentences(block: TokenBlock | TokenFileBlock, idOfEntry: Uint32Array, occurrences: number[]): void {
  const entries = block.entries;
  const ends = block.sentenceEnds;
  const eosId = init.eosId!;
  const unkId = init.unkId!;
  const orderMax = init.order;
  if (wrapped.length < block.tokens + 2 * block.sentences) wrapped = new Uint32Array(2 * (block.tokens + 2 * block.sentences));
  if (wrappedStarts.length < block.sentences + 1) wrappedStarts = new Uint32Array(2 * (block.sentences + 1));
  const out = wrapped;
  let at = 0;
  let tokenStart = 0;
  for (let s = 0; s < block.sentences; s++) {
    const tokenEnd = ends[s];
    const n = tokenEnd - tokenStart;
    wrappedStarts[s] = at;
    out[at++] = BOS_ID;
    for (let i = tokenStart; i < tokenEnd; i++) {
      const entry = entries[i];
      if (entry >= idOfEntry.length) assert(false, `word-table entry ${entry} outside its map of ${idOfEntry.length} entries`);
      out[at++] = entry < 0 ? unkId : idOfEntry[entry];
    }
    out[at++] = eosId;
    // A wrapped sentence of n+2 ids has an n-gram of order k ending at positions max(1,k−1)..n+1.
    for (let k = 1; k <= orderMax; k++) occurrences[k - 1] += Math.max(0, n + 2 - Math.max(1, k - 1));
    tokenStart = tokenEnd;
  }
  wrappedStarts[block.sentences] = at;
}

/**
 * Counts the wrapped sentences `first .. sentences−1` as long as the budget allows, in batches of
 * up to COUNTER_BATCH_POSITIONS positions (one sentence at a time near the budget). Returns the
 * first sentence not counted (`sentences` when all were).
 */
function countSentences(first: number, sentences: number, counters: CounterSet): number {
  const starts = wrappedStarts;
  let s = first;
  while (s < sentences) {
    let end = s + 1;
    let positions = starts[end] - starts[s] - 1;
    while (end < sentences && positions + (starts[end + 1] - starts[end] - 1) <= COUNTER_BATCH_POSITIONS) {
      positions += starts[end + 1] - starts[end] - 1;
      end++;
    }
    if (!counters.reserve(positions + 1)) {
      if (end - s === 1) return s;
      end = s + 1;
      if (!counters.reserve(starts[end] - starts[s])) return s;
    }
    counters.addSentences(wrapped, starts, s, end);
    s = end;
  }
  return sentences;
}

/**
 * Counts a group of consecutive chunks (count/chunk-groups.ts) as one unit of work: the counters
 * spill when the budget is reached and once at the end of the group, so a finished group is wholly
 * in durable run files. Run files are named after the group's first chunk and recorded with it.
 */
async function countGroup(group: readonly Chunk[]): Promise<void> {
  const state = countStateOf();
  const set = state.counters;
  const first = group[0].index;
  const runs: RunRecord[] = [];
  let spillSeq = 0;
  let budgetSpills = 0;
  presizeFor(group, set);
  const results: ChunkResult[] = [];
  for (const chunk of group) {
    let chunkTokens = 0;
    let chunkSentences = 0;
    const occurrences = new Array<number>(init.order).fill(0);
    const tokenFile = init.tokenFiles?.[chunk.index] ?? null;
    const tokenMap = tokenFile !== null ? init.tokenMaps?.[tokenFile.table] : undefined;
    const fromTokenFile = tokenMap !== undefined && await tokenFileIntact(init.jobDir, chunk.index, tokenFile!);
    const idOfEntry = fromTokenFile ? tokenMap : (await textIdsOf(state)).idOfEntry;
    // Tokens arrive a read block at a time; when the budget runs out in a block, the counters are
    // spilled (async: it writes files) and counting goes on from the sentence that did not fit.
    const onTokens = async (block: TokenBlock | TokenFileBlock): Promise<void> => {
      chunkTokens += block.tokens;
      chunkSentences += block.sentences;
      progressTokens += block.tokens;
      wrapSentences(block, idOfEntry, occurrences);
      let next = countSentences(0, block.sentences, set);
      while (next < block.sentences) {
        await spillAll(first, spillSeq++, runs);
        budgetSpills++;
        const after = countSentences(next, block.sentences, set);
        if (after === next) {
          const length = wrappedStarts[next + 1] - wrappedStarts[next] - 2;
          throw new QuernError('limit', `a sentence of ${length} tokens in ${init.inputs[chunk.fileIndex].path} does not fit the counting budget of ${set.bytesMax} bytes per worker; raise --memory`);
        }
        next = after;
      }
    };
    if (fromTokenFile) {
      // Progress in input bytes, in proportion to the token file read.
      const report = progressReporter();
      const bytes = chunk.byteEnd - chunk.byteStart;
      await readTokenFile(init.jobDir, chunk.index, onTokens, (read, total) => report(Math.round(bytes * read / total)));
    } else {
      await (await textIdsOf(state)).reader.read(init.inputs[chunk.fileIndex], chunk, readOptionsOf(chunk), onTokens, progressReporter());
    }
    learnNgramsPerByte(chunk, chunkTokens + chunkSentences);
    results.push({ chunk: chunk.index, runs: [], spills: 0, tokens: chunkTokens, occurrences, ...(fromTokenFile ? { fromTokenFile } : {}) });
  }
  if (budgetSpills === 0) {
    const bytes = groupBytes(group);
    if (bytes > 0 && !groupHasGzip(group)) needsPerByte = set.counters.map((c) => ({ entries: c.size / bytes, tableEntries: c.tableSize / bytes }));
  }
  // The end of a group is a spill point: a finished group is then wholly in durable run files.
  await spillAll(first, spillSeq++, runs);
  results[0].runs = runs;
  results[0].spills = budgetSpills;
  flushProgress(true);
  post({ type: 'done', results });
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

async function emitTask(partition: number, localOrders: number[]): Promise<void> {
  const runs = await emitContinuations({
    fs, jobDir: init.jobDir, partition, orderMax: init.order, partitions: init.partitions,
    idMax: init.idMax!, counterBytesMax: init.counterBytesMax!, localOrders,
  });
  post({ type: 'done', partition, runs });
}

// ---- estimate phase ------------------------------------------------------------------------

async function estimateTask(partition: number): Promise<void> {
  const result = await estimatePartition(fs, init.jobDir, partition, init.estimate!, (rows) => {
    progressTokens += rows;
    flushProgress(false);
  });
  flushProgress(true);
  post({ type: 'done', ...result });
}

// ---- score phase ---------------------------------------------------------------------------

/** The score phase's model, over the main thread's shared sections (made at the phase's first chunk). */
let scoreModel: PackedModel | undefined;

async function scoreTask(chunk: Chunk): Promise<void> {
  const { model, settings } = init.score!;
  scoreModel ??= modelFromShared(model);
  const result = await scoreChunk(scoreModel, init.inputs[chunk.fileIndex], chunk, settings);
  progressBytes += inputBytesOf(chunk);
  progressTokens += result.sums.tokens;
  flushProgress(true);
  const records = result.records;
  port.postMessage({ type: 'done', ...result } satisfies FromWorker, records === null ? [] : [records.tokens, records.oov, records.log10Prob, records.log10ProbWithUnk, records.line, records.sentences].map((array) => array.buffer as ArrayBuffer));
}

/** Starts a phase: its settings, and a fresh state for it. */
function startPhase(next: WorkerInit): void {
  init = next;
  releasePhaseState();
}

/** Lets the phase's memory go before the next one. */
function releasePhaseState(): void {
  vocabTable = undefined;
  vocabReader = undefined;
  entryCounts = new Float64Array(0);
  countState = undefined;
  needsPerByte = undefined;
  scoreModel = undefined;
}

async function handle(message: ToWorker): Promise<void> {
  if (message.type === 'init') {
    startPhase(message.init);
    return;
  }
  if (message.type === 'finish') {
    if (init.phase === 'vocab') {
      const finished = vocabFinished();
      port.postMessage(finished, [finished.wordBytes.buffer, finished.wordEnds.buffer, finished.counts.buffer] as ArrayBuffer[]);
    } else {
      post({ type: 'finished' });
    }
    releasePhaseState();
    return;
  }
  if (message.type === 'partition') await mergeTask(message.task);
  else if (message.type === 'emit') await emitTask(message.partition, message.localOrders);
  else if (message.type === 'remap') await remapTask(message.chunk, message.files);
  else if (message.type === 'estimate') await estimateTask(message.partition);
  else if (message.type === 'chunk' && init.phase === 'score') await scoreTask(message.chunk);
  else if (message.type === 'chunk') await vocabChunk(message.chunk);
  else if (message.type === 'chunks') await countGroup(message.chunks);
  else assert(false, `unexpected message for a ${init.phase} worker`);
}

port.on('message', (message: ToWorker) => {
  handle(message).catch((error: unknown) => {
    const failure: FromWorker = error instanceof QuernError
      ? { type: 'error', code: error.code, message: error.message, location: error.location }
      : { type: 'error', code: undefined, message: (error as Error)?.message ?? String(error), stack: (error as Error)?.stack };
    post(failure);
  });
});
