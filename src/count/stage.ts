/**
 * The vocabulary pass and the n-gram pass. Each records in job.json what it finished, after the
 * data it records is durable, so a re-run continues where it stopped.
 */
import { createHash } from 'node:crypto';
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import { PROCESS_OVERHEAD_BYTES, VOCAB_BYTES_PER_TYPE, WORKER_COUNTER_BYTES_MIN, WORKER_OVERHEAD_BYTES } from '../limits.ts';
import type { Chunk, ReadStats } from '../corpus/types.ts';
import { buildVocabulary, formatVocabulary, parseVocabulary, type Vocabulary } from '../corpus/vocabulary.ts';
import { writeFileAtomic } from '../job/fsio.ts';
import type { StageContext } from '../job/context.ts';
import type { JobManifest } from '../job/manifest.ts';
import type { CountGroupDone, VocabChunkDone, VocabFinished, WorkerInit } from './protocol.ts';
import { groupBytesTarget, groupChunks } from './chunk-groups.ts';
import { RUNS_DIR } from './run-layout.ts';

export const VOCAB_FILE = 'vocab.tsv';

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
export async function readJobVocabulary(jobDir: string, job: JobManifest): Promise<Vocabulary> {
  const file = path.join(jobDir, VOCAB_FILE);
  const bytes = await fsp.readFile(file).catch((cause) => {
    throw new QuernError('io', `cannot read ${file}: ${(cause as Error).message}`, { cause });
  });
  const sha256 = createHash('sha256').update(bytes).digest('hex');
  if (sha256 !== job.stages.vocab.sha256) {
    throw new QuernError('corrupt', `${file} does not match the checksum recorded in job.json; re-run the count with --restart`);
  }
  return parseVocabulary(bytes.toString('utf8'), file);
}

function chunkBytes(chunks: Chunk[]): number {
  return chunks.reduce((sum, c) => sum + c.byteEnd - c.byteStart, 0);
}

export const PREVIOUS_VOCAB_FILE = 'vocab.previous.tsv';

/** Reads the vocabulary as it was before inputs were added (kept until the runs are re-keyed). */
export async function readPreviousVocabulary(jobDir: string, job: JobManifest): Promise<Vocabulary> {
  const file = path.join(jobDir, PREVIOUS_VOCAB_FILE);
  const bytes = await fsp.readFile(file).catch((cause) => {
    throw new QuernError('io', `cannot read ${file}: ${(cause as Error).message}`, { cause });
  });
  if (createHash('sha256').update(bytes).digest('hex') !== job.stages.vocab.previousSha) {
    throw new QuernError('corrupt', `${file} does not match the checksum recorded in job.json; re-run the count with --restart`);
  }
  return parseVocabulary(bytes.toString('utf8'), file);
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
  const wordCounts = new Map<string, number>();
  let unkSeen = 0;
  if (job.stages.vocab.previousSha !== undefined) {
    const previous = await readPreviousVocabulary(jobDir, job);
    for (let id = 1; id < previous.words.length; id++) {
      if (id === previous.eosId) continue;
      if (id === previous.unkId) unkSeen += previous.counts[id];
      else wordCounts.set(previous.words[id], previous.counts[id]);
    }
  }
  const todo = job.chunks.filter((c) => reads[c.index] === null);
  ctx.progress.start('vocabulary', chunkBytes(todo));
  await ctx.pool.run<Chunk, VocabChunkDone, VocabFinished>(baseInit(job, jobDir, 'vocab'), todo, {
    message: (chunk) => ({ type: 'chunk', chunk }),
    onProgress: (bytes, tokens) => ctx.progress.update(bytes, tokens),
    onDone: (done) => { reads[done.chunk] = done.reads; },
    onFinished: (finished) => {
      for (let i = 0; i < finished.words.length; i++) {
        const word = finished.words[i];
        wordCounts.set(word, (wordCounts.get(word) ?? 0) + finished.counts[i]);
      }
      unkSeen += finished.unkSeen;
    },
  }).finally(() => ctx.progress.stop());
  const sentences = reads.reduce((sum, r) => sum + r!.sentences, 0);
  const vocab = buildVocabulary(wordCounts, sentences, unkSeen, job.config.vocabCap);
  const text = formatVocabulary(vocab);
  await writeFileAtomic(ctx.fs, path.join(jobDir, VOCAB_FILE), text);
  job.stages.vocab = {
    ...(job.stages.vocab.previousSha !== undefined ? { previousSha: job.stages.vocab.previousSha } : {}),
    status: 'done',
    sha256: createHash('sha256').update(text, 'utf8').digest('hex'),
    types: vocab.words.length - 1,
    reads,
    elapsedMs: (job.stages.vocab.elapsedMs ?? 0) + Date.now() - started,
  };
  await ctx.saveManifest();
  return vocab;
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
    words: vocab.words,
    eosId: vocab.eosId,
    unkId: vocab.unkId,
    counterBytesMax: counterBudgetPerWorker(ctx.memoryBytes, workers, vocab.words.length),
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
  await ctx.saveManifest();
}

/** N-gram occurrences per order over every counted chunk. */
export function sumOccurrences(job: JobManifest): number[] {
  const occurrences = new Array<number>(job.config.order).fill(0);
  for (const c of job.stages.count.chunks) for (let n = 0; n < job.config.order; n++) occurrences[n] += c.occurrences[n];
  return occurrences;
}
