/**
 * The vocabulary pass and the n-gram pass. Each records in job.json what it finished, after the
 * data it records is durable, so a re-run continues where it stopped.
 */
import { createHash } from 'node:crypto';
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import { PROCESS_OVERHEAD_BYTES, VOCAB_BYTES_PER_TYPE, WORKER_COUNTER_BYTES_MIN, WORKER_OVERHEAD_BYTES } from '../limits.ts';
import { TextPieces } from '../corpus/text-pieces.ts';
import { isChunkPiece, isTextRange, type Chunk, type InputFile, type ReadStats } from '../corpus/types.ts';
import { buildRankedVocabulary, formatVocabularyBytes, parseVocabulary, type Vocabulary } from '../corpus/vocabulary.ts';
import { WordListMerger } from '../corpus/word-merge.ts';
import { PREVIOUS_VOCAB_FILE, readVocabularyFile, VOCAB_FILE } from './vocab-file.ts';
import { writeFileAtomic } from '../job/fsio.ts';
import type { StageContext } from '../job/context.ts';
import type { JobManifest } from '../job/manifest.ts';
import type { CountGroupDone, VocabChunkDone, VocabFinished, WorkerInit } from './protocol.ts';
import type { TaskSource } from './pool.ts';
import { groupBytesTarget, groupChunks } from './chunk-groups.ts';
import { RUNS_DIR } from './run-layout.ts';
import { tokenMapPath, TOKENS_DIR, type TokenFileRecord } from './token-file.ts';
import { RESERVED_WORDS } from '../corpus/byte-tokenizer.ts';

export { PREVIOUS_VOCAB_FILE, VOCAB_FILE } from './vocab-file.ts';

/** Splits the memory budget: what each worker's counters may use, after its vocabulary copy. */
export function counterBudgetPerWorker(memoryBytes: number, workers: number, vocabTypes: number): number {
  const perWorker = Math.floor((memoryBytes - workers * vocabTypes * VOCAB_BYTES_PER_TYPE) / workers);
  if (perWorker < WORKER_COUNTER_BYTES_MIN) {
    const needed = workers * (vocabTypes * VOCAB_BYTES_PER_TYPE + WORKER_COUNTER_BYTES_MIN);
    throw new QuernError('config', `--memory ${memoryBytes} bytes is too small for ${workers} workers and ${vocabTypes} word types: give at least ${needed} bytes, fewer workers, or cap the vocabulary`);
  }
  return perWorker;
}

/** Peak resident memory the budget allows, as DEVELOPERS.md documents it. */
export function rssBoundBytes(memoryBytes: number, workers: number): number {
  return memoryBytes + PROCESS_OVERHEAD_BYTES + workers * WORKER_OVERHEAD_BYTES;
}

/** The fields of a worker's start message common to every phase. */
export function baseInit(job: JobManifest, jobDir: string, phase: WorkerInit['phase']): WorkerInit {
  return {
    phase,
    jobDir,
    inputs: job.inputs,
    textField: job.config.textField === null ? undefined : job.config.textField.split('.'),
    skipBad: job.config.skipBad,
    normalize: job.config.normalize,
    order: job.config.order,
    partitions: job.config.partitions,
  };
}

/** Lists every file under the job's runs/ directory (paths relative to the job). */
async function listRunFiles(jobDir: string): Promise<string[]> {
  const root = path.join(jobDir, RUNS_DIR);
  const entries = await fsp.readdir(root, { recursive: true, withFileTypes: true }).catch(() => []);
  return entries.filter((e) => e.isFile()).map((e) => path.relative(jobDir, path.join(e.parentPath, e.name)));
}

/** Reads the job's vocabulary, checking it against the checksum in job.json. */
export function readJobVocabulary(jobDir: string, job: JobManifest): Promise<Vocabulary> {
  return readVocabularyFile(path.join(jobDir, VOCAB_FILE), job.stages.vocab.sha256);
}

function chunkBytes(chunks: Chunk[]): number {
  return chunks.reduce((sum, c) => sum + c.byteEnd - c.byteStart, 0);
}

/** Reads the vocabulary as it was before inputs were added (kept until the runs are re-keyed). */
export function readPreviousVocabulary(jobDir: string, job: JobManifest): Promise<Vocabulary> {
  return readVocabularyFile(path.join(jobDir, PREVIOUS_VOCAB_FILE), job.stages.vocab.previousSha);
}

/**
 * The vocabulary pass: word counts of every chunk not read yet → vocab.tsv. When inputs are being
 * added, the previous vocabulary's counts are the starting point (the job has no cap then, so they
 * are the exact word counts of the earlier chunks). Returns the vocabulary it wrote (the next
 * stages need not read it back), or undefined when the pass was done already.
 */
export async function vocabStage(ctx: StageContext): Promise<Vocabulary | undefined> {
  const { job, jobDir } = ctx;
  if (job.stages.vocab.status === 'done') return undefined;
  const started = Date.now();
  const reads: Array<ReadStats | null> = Array.from({ length: job.chunks.length }, (_, i) => job.stages.vocab.reads?.[i] ?? null);
  const merger = new WordListMerger();
  let unkSeen = 0;
  if (job.stages.vocab.previousSha !== undefined) {
    const previous = await readPreviousVocabulary(jobDir, job);
    for (let id = 1; id < previous.words.length; id++) {
      if (id === previous.eosId) continue;
      if (id === previous.unkId) unkSeen += previous.counts[id];
      else merger.addWord(previous.words[id], previous.counts[id]);
    }
  }
  const todo = job.chunks.filter((c) => reads[c.index] === null);
  // Token files of an earlier, interrupted pass belong to word tables that are gone.
  await removeTokenFiles(jobDir);
  // A plan with ranges of a gzip input (made with token files, resumed with --no-token-files)
  // keeps them all the same: without, the count pass would decompress the file up to each range.
  const writeTokenFiles = ctx.tokenFiles || job.chunks.some(isTextRange);
  if (writeTokenFiles) await ctx.fs.mkdir(path.join(jobDir, TOKENS_DIR));
  const tokenFiles: Array<TokenFileRecord | null> = job.chunks.map(() => null);
  const tables: WorkerWords[] = [];
  ctx.progress.start('vocabulary', chunkBytes(todo));
  // Ranges of a gzip input's text go to the workers with their bytes, cut again here.
  const tasks = todo.some(isTextRange) ? new TextRangeTasks(job.inputs, todo, job.config.chunkBytes) : todo;
  await ctx.pool.run<Chunk, VocabChunkDone, VocabFinished>({ ...baseInit(job, jobDir, 'vocab'), writeTokenFiles }, tasks, {
    message: (chunk) => ({ type: 'chunk', chunk }),
    transfer: (chunk) => (isChunkPiece(chunk) ? [chunk.data.buffer as ArrayBuffer] : []),
    onProgress: (bytes, tokens) => ctx.progress.update(bytes, tokens),
    onDone: (done) => {
      reads[done.chunk] = done.reads;
      if (done.tokenFile) tokenFiles[done.chunk] = done.tokenFile;
    },
    onFinished: (finished) => {
      tables.push({ table: finished.table, into: merger.addList(finished.wordBytes, finished.wordEnds, finished.counts) });
      unkSeen += finished.unkSeen;
    },
  }).finally(async () => {
    ctx.progress.stop();
    if (tasks instanceof TextRangeTasks) await tasks.close();
  });
  const sentences = reads.reduce((sum, r) => sum + r!.sentences, 0);
  const { vocab, idOf } = buildRankedVocabulary(merger.wordCounts(), sentences, unkSeen, job.config.vocabCap);
  const text = formatVocabularyBytes(vocab);
  await writeFileAtomic(ctx.fs, path.join(jobDir, VOCAB_FILE), text);
  const tokens = writeTokenFiles ? { files: tokenFiles, maps: await writeTokenMaps(ctx, vocab, idOf, tables) } : undefined;
  job.stages.vocab = {
    ...(job.stages.vocab.previousSha !== undefined ? { previousSha: job.stages.vocab.previousSha } : {}),
    status: 'done',
    sha256: createHash('sha256').update(text).digest('hex'),
    types: vocab.words.length - 1,
    reads,
    ...(tokens ? { tokens } : {}),
    elapsedMs: (job.stages.vocab.elapsedMs ?? 0) + Date.now() - started,
  };
  await ctx.saveManifest();
  return vocab;
}

/** A vocabulary worker's word table (as token files name it) and where its words went in the
 *  merged list (`WordListMerger.addList`): into[i] for its entry 3 + i. */
interface WorkerWords {
  table: number;
  into: Uint32Array;
}

/**
 * Writes each vocabulary worker's entry → id map (token-file.ts): entries 0..2 are the reserved
 * words, read as `<unk>` like any word the vocabulary cap left out; `idOf` gives each merged word's
 * id. Returns the maps' sha256 by table.
 */
async function writeTokenMaps(ctx: StageContext, vocab: Vocabulary, idOf: Uint32Array, tables: WorkerWords[]): Promise<Record<string, string>> {
  const maps: Record<string, string> = {};
  // One at a time, in the order the workers finished (the fault tests number these writes).
  for (const { table, into } of tables) {
    const map = new Uint32Array(RESERVED_WORDS.length + into.length);
    map.fill(vocab.unkId, 0, RESERVED_WORDS.length);
    for (let i = 0; i < into.length; i++) map[RESERVED_WORDS.length + i] = idOf[into[i]];
    const bytes = new Uint8Array(map.buffer);
    await writeFileAtomic(ctx.fs, path.join(ctx.jobDir, tokenMapPath(table)), bytes);
    maps[String(table)] = createHash('sha256').update(bytes).digest('hex');
  }
  return maps;
}

/** The maps of the token files recorded for the count pass, each checked against its sha256; a
 *  map that is missing or changed is left out (its chunks are read from their text). */
async function readTokenMaps(jobDir: string, job: JobManifest): Promise<Record<number, Uint32Array>> {
  const maps: Record<number, Uint32Array> = {};
  for (const [table, sha256] of Object.entries(job.stages.vocab.tokens?.maps ?? {})) {
    const bytes = await fsp.readFile(path.join(jobDir, tokenMapPath(Number(table)))).catch(() => undefined);
    if (bytes === undefined || bytes.length % 4 !== 0 || createHash('sha256').update(bytes).digest('hex') !== sha256) continue;
    maps[Number(table)] = new Uint32Array(bytes.buffer.slice(bytes.byteOffset, bytes.byteOffset + bytes.length));
  }
  return maps;
}

/** Removes the job's token files, if any. */
async function removeTokenFiles(jobDir: string): Promise<void> {
  await fsp.rm(path.join(jobDir, TOKENS_DIR), { recursive: true, force: true });
}

/** The n-gram pass: every chunk not yet done → sorted, partitioned run files, a group of chunks
 *  (chunk-groups.ts) at a time. */
export async function countStage(ctx: StageContext, vocab: Vocabulary): Promise<void> {
  const { job, jobDir } = ctx;
  const count = job.stages.count;
  if (count.status === 'done') return;
  const started = Date.now();
  const doneChunks = new Set(count.chunks.map((c) => c.chunk));
  const kept = new Set(count.chunks.flatMap((c) => c.runs.map((r) => r.file)));
  // Runs of chunks that did not finish are incomplete: remove them; those chunks are counted again.
  for (const file of await listRunFiles(jobDir)) if (!kept.has(file)) await ctx.fs.unlink(path.join(jobDir, file));
  const todo = job.chunks.filter((c) => !doneChunks.has(c.index));
  const workers = Math.min(ctx.workers, Math.max(1, todo.length));
  const init: WorkerInit = {
    ...baseInit(job, jobDir, 'count'),
    idMax: vocab.words.length,
    vocabSha256: job.stages.vocab.sha256,
    eosId: vocab.eosId,
    unkId: vocab.unkId,
    counterBytesMax: counterBudgetPerWorker(ctx.memoryBytes, workers, vocab.words.length),
    ...(job.stages.vocab.tokens ? { tokenFiles: job.stages.vocab.tokens.files, tokenMaps: await readTokenMaps(jobDir, job) } : {}),
  };
  count.status = 'running';
  const groups = groupChunks(todo, groupBytesTarget(chunkBytes(todo), workers, job.config.chunkBytes));
  ctx.progress.start(`counting to order ${job.config.order}`, chunkBytes(todo));
  await ctx.pool.run<Chunk[], CountGroupDone, unknown>(init, groups, {
    message: (chunks) => ({ type: 'chunks', chunks }),
    onProgress: (bytes, tokens) => ctx.progress.update(bytes, tokens),
    onDone: (done) => {
      count.chunks.push(...done.results);
      return ctx.saveManifest();
    },
  }).finally(() => ctx.progress.stop());
  count.chunks.sort((a, b) => a.chunk - b.chunk);
  count.status = 'done';
  count.elapsedMs = (count.elapsedMs ?? 0) + Date.now() - started;
  delete job.stages.vocab.tokens;
  await ctx.saveManifest();
  // Only now: a count resumed before this point still finds them.
  await removeTokenFiles(jobDir);
}

/** N-gram occurrences per order over every counted chunk. */
export function sumOccurrences(job: JobManifest): number[] {
  const occurrences = new Array<number>(job.config.order).fill(0);
  for (const c of job.stages.count.chunks) for (let n = 0; n < job.config.order; n++) occurrences[n] += c.occurrences[n];
  return occurrences;
}

/**
 * The vocabulary pass's chunks in order, each range of a gzip input's decompressed text with its
 * bytes: the input is decompressed once more, by this thread, and cut as it was planned
 * (TextPieces, the job's chunk size), so the workers share one large gzip input instead of one of
 * them reading it all. A range that no longer matches the plan means the file changed.
 */
class TextRangeTasks implements TaskSource<Chunk> {
  private next_ = 0;
  private pieces: { fileIndex: number; cutter: TextPieces } | undefined;

  constructor(private readonly inputs: InputFile[], private readonly todo: Chunk[], private readonly chunkBytes: number) {}

  async next(): Promise<Chunk | undefined> {
    if (this.next_ === this.todo.length) {
      await this.close();
      return undefined;
    }
    const chunk = this.todo[this.next_++];
    if (!isTextRange(chunk)) return chunk;
    if (this.pieces?.fileIndex !== chunk.fileIndex) {
      await this.close();
      this.pieces = { fileIndex: chunk.fileIndex, cutter: TextPieces.ofFile(this.inputs[chunk.fileIndex], chunk.fileIndex, this.chunkBytes, 0) };
    }
    for (;;) {
      const piece = await this.pieces.cutter.next();
      const file = this.inputs[chunk.fileIndex].path;
      if (piece === undefined || piece.byteStart > chunk.byteStart) {
        throw new QuernError('input', `${file} changed since it was planned: its decompressed text has no chunk at bytes ${chunk.byteStart}..${chunk.byteEnd}`);
      }
      if (piece.byteStart < chunk.byteStart) continue; // a range done already
      if (piece.byteEnd !== chunk.byteEnd || piece.linesBefore !== chunk.linesBefore) {
        throw new QuernError('input', `${file} changed since it was planned: its decompressed text at byte ${chunk.byteStart} no longer ends a chunk at ${chunk.byteEnd}`);
      }
      return { ...piece, index: chunk.index };
    }
  }

  async close(): Promise<void> {
    await this.pieces?.cutter.close();
    this.pieces = undefined;
  }
}
