/**
 * The count stage: plan → vocabulary pass → n-gram pass → tally, each recorded in job.json when
 * its data is durable, so that re-running the same command continues where it stopped.
 */
import { createHash } from 'node:crypto';
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { assert, QuernError } from '../errors.ts';
import {
  PROCESS_OVERHEAD_BYTES, VOCAB_BYTES_PER_TYPE, WORKER_COUNTER_BYTES_MIN, WORKER_OVERHEAD_BYTES,
} from '../limits.ts';
import { discoverInputs } from '../corpus/discover.ts';
import { planChunks } from '../corpus/plan.ts';
import type { ReadStats } from '../corpus/types.ts';
import { buildVocabulary, formatVocabulary, parseVocabulary, type Vocabulary } from '../corpus/vocabulary.ts';
import { nodeFs, writeFileAtomic, type StageFs } from '../job/fsio.ts';
import { lockJob } from '../job/lock.ts';
import {
  describeDifferences, readManifest, writeManifest, MANIFEST_VERSION,
  type JobConfig, type JobManifest,
} from '../job/manifest.ts';
import pLimit from 'p-limit';
import { runPool } from './pool.ts';
import type { CountChunkDone, PartitionTask, TallyDone, VocabChunkDone, VocabFinished, WorkerInit } from './protocol.ts';
import { RUNS_DIR } from './run-layout.ts';

export const VOCAB_FILE = 'vocab.tsv';

/** Receives progress of long work; the CLI draws it, tests ignore it. */
export interface ProgressSink {
  start(label: string, totalBytes: number): void;
  update(bytesDelta: number, tokensDelta: number): void;
  stop(): void;
}

export const silentProgress: ProgressSink = { start() {}, update() {}, stop() {} };

export interface CountRequest {
  jobDir: string;
  inputSpecs: string[];
  config: JobConfig;
  workers: number;
  /** Budget for all counting memory together (counters and vocabulary copies), bytes. */
  memoryBytes: number;
  /** Start the job over even if job.json holds another config or inputs. */
  restart: boolean;
  progress?: ProgressSink;
  fs?: StageFs;
}

export interface SkippedReport {
  file: string;
  skipped: number;
  samples: ReadStats['skippedSamples'];
}

/** What `quern count` prints at the end (also as --json). */
export interface CountSummary {
  jobDir: string;
  inputs: number;
  inputBytes: number;
  chunks: number;
  lines: number;
  emptyLines: number;
  sentences: number;
  tokens: number;
  /** Vocabulary size including `</s>` and `<unk>` (not `<s>`). */
  vocabularySize: number;
  typesSeen: number;
  typesCapped: number;
  order: number;
  /** Distinct n-grams per order (index 0 = order 1). */
  distinct: number[];
  /** N-gram occurrences per order. */
  occurrences: number[];
  spills: number;
  runFiles: number;
  runBytes: number;
  skipped: SkippedReport[];
  workers: number;
  memoryBytes: number;
  elapsedMs: number;
  tokensPerSecond: number;
  /** True when this run continued an interrupted job or found it already finished. */
  resumed: boolean;
}

/** Splits the memory budget: what each worker's counters may use, after the vocabulary copies. */
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

async function removeJobData(jobDir: string): Promise<void> {
  await fsp.rm(path.join(jobDir, RUNS_DIR), { recursive: true, force: true });
  await fsp.rm(path.join(jobDir, VOCAB_FILE), { force: true });
}

/** Lists every run file under the job's runs/ directory (relative paths). */
async function listRunFiles(jobDir: string): Promise<string[]> {
  const root = path.join(jobDir, RUNS_DIR);
  const entries = await fsp.readdir(root, { recursive: true, withFileTypes: true }).catch(() => []);
  return entries
    .filter((e) => e.isFile())
    .map((e) => path.relative(jobDir, path.join(e.parentPath ?? (e as unknown as { path: string }).path, e.name)));
}

export async function readJobVocabulary(jobDir: string, manifest: JobManifest): Promise<Vocabulary> {
  const file = path.join(jobDir, VOCAB_FILE);
  const bytes = await fsp.readFile(file).catch((cause) => {
    throw new QuernError('io', `cannot read ${file}: ${(cause as Error).message}`, { cause });
  });
  const sha256 = createHash('sha256').update(bytes).digest('hex');
  if (sha256 !== manifest.stages.vocab.sha256) {
    throw new QuernError('corrupt', `${file} does not match the checksum recorded in job.json; re-run the count with --restart`);
  }
  return parseVocabulary(bytes.toString('utf8'), file);
}

/** Runs (or continues) the count stage of a job. */
export async function runCount(request: CountRequest): Promise<CountSummary> {
  const started = Date.now();
  const fs = request.fs ?? nodeFs;
  const progress = request.progress ?? silentProgress;
  const { jobDir, config } = request;
  await fs.mkdir(jobDir);
  const lock = await lockJob(jobDir);
  try {
    const inputs = await discoverInputs(request.inputSpecs, config.format === 'auto' ? {} : { format: config.format });
    const jsonl = inputs.find((f) => f.format === 'jsonl');
    if (jsonl && config.textField === null) {
      throw new QuernError('config', `${jsonl.path} is JSON Lines: say where the text is with --text-field (e.g. --text-field body.text)`);
    }
    let manifest = await readManifest(jobDir);
    let resumed = false;
    if (manifest) {
      const differences = describeDifferences(manifest, config, inputs);
      if (differences.length > 0 && !request.restart) {
        throw new QuernError('config', `job ${jobDir} was started with other inputs or settings:\n  ${differences.join('\n  ')}\nre-run with --restart to discard it and start over`);
      }
      if (differences.length > 0 || request.restart) manifest = undefined;
      else resumed = true;
    }
    if (!manifest) {
      await removeJobData(jobDir);
      manifest = {
        format: 'quern-job',
        version: MANIFEST_VERSION,
        createdAt: new Date().toISOString(),
        config,
        inputs,
        chunks: await planChunks(inputs, config.chunkBytes),
        stages: { vocab: { status: 'pending' }, count: { status: 'pending', chunks: [] } },
      };
      await writeManifest(fs, jobDir, manifest);
    }
    const job = manifest;
    const totalBytes = job.chunks.reduce((sum, c) => sum + c.byteEnd - c.byteStart, 0);

    // ---- vocabulary pass ----
    if (job.stages.vocab.status !== 'done') {
      const vocabStarted = Date.now();
      const reads: ReadStats[] = new Array(job.chunks.length);
      const wordCounts = new Map<string, number>();
      let unkSeen = 0;
      progress.start('vocabulary', totalBytes);
      const init: WorkerInit = baseInit(job, jobDir, 'vocab');
      await runPool<typeof job.chunks[number], VocabChunkDone, VocabFinished>(request.workers, init, job.chunks, {
        message: (chunk) => ({ type: 'chunk', chunk }),
        onProgress: (bytes, tokens) => progress.update(bytes, tokens),
        onDone: (done) => { reads[done.chunk] = done.reads; },
        onFinished: (finished) => {
          for (let i = 0; i < finished.words.length; i++) {
            const word = finished.words[i];
            wordCounts.set(word, (wordCounts.get(word) ?? 0) + finished.counts[i]);
          }
          unkSeen += finished.unkSeen;
        },
      }).finally(() => progress.stop());
      const sentences = reads.reduce((sum, r) => sum + r.sentences, 0);
      const vocab = buildVocabulary(wordCounts, sentences, unkSeen, config.vocabCap);
      const text = formatVocabulary(vocab);
      await writeFileAtomic(fs, path.join(jobDir, VOCAB_FILE), text);
      job.stages.vocab = {
        status: 'done',
        sha256: createHash('sha256').update(text, 'utf8').digest('hex'),
        types: vocab.words.length - 1,
        reads,
        elapsedMs: Date.now() - vocabStarted,
      };
      await writeManifest(fs, jobDir, job);
    }
    const vocab = await readJobVocabulary(jobDir, job);
    const reads = job.stages.vocab.reads!;

    // ---- n-gram pass ----
    const count = job.stages.count;
    if (count.status !== 'done') {
      const countStarted = Date.now();
      const doneChunks = new Set(count.chunks.map((c) => c.chunk));
      const kept = new Set(count.chunks.flatMap((c) => c.runs.map((r) => r.file)));
      // Runs of chunks that did not finish are incomplete: remove them, the chunk is counted again.
      for (const file of await listRunFiles(jobDir)) if (!kept.has(file)) await fs.unlink(path.join(jobDir, file));
      const todo = job.chunks.filter((c) => !doneChunks.has(c.index));
      const todoBytes = todo.reduce((sum, c) => sum + c.byteEnd - c.byteStart, 0);
      const init: WorkerInit = {
        ...baseInit(job, jobDir, 'count'),
        words: vocab.words,
        eosId: vocab.eosId,
        unkId: vocab.unkId,
        counterBytesMax: counterBudgetPerWorker(request.memoryBytes, Math.min(request.workers, Math.max(1, todo.length)), vocab.words.length),
      };
      count.status = 'running';
      // Workers finish chunks concurrently; their manifest updates are written one at a time.
      const manifestWrites = pLimit(1);
      progress.start(`counting to order ${config.order}`, todoBytes);
      await runPool<typeof todo[number], CountChunkDone, unknown>(request.workers, init, todo, {
        message: (chunk) => ({ type: 'chunk', chunk }),
        onProgress: (bytes, tokens) => progress.update(bytes, tokens),
        onDone: (done) => manifestWrites(async () => {
          count.chunks.push({ chunk: done.chunk, runs: done.runs, spills: done.spills, tokens: done.tokens, occurrences: done.occurrences });
          await writeManifest(fs, jobDir, job);
        }),
      }).finally(() => progress.stop());
      count.chunks.sort((a, b) => a.chunk - b.chunk);

      // ---- tally: merge each partition's runs, counting distinct n-grams and checking totals ----
      const tasks: PartitionTask[] = [];
      const byKey = new Map<string, PartitionTask>();
      for (const result of count.chunks) {
        for (const run of result.runs) {
          const key = `${run.order}/${run.partition}`;
          let task = byKey.get(key);
          if (!task) {
            task = { order: run.order, partition: run.partition, files: [] };
            byKey.set(key, task);
            tasks.push(task);
          }
          task.files.push(run.file);
        }
      }
      const distinct = new Array<number>(config.order).fill(0);
      const totals = new Array<number>(config.order).fill(0);
      await runPool<PartitionTask, TallyDone, unknown>(request.workers, baseInit(job, jobDir, 'tally'), tasks, {
        message: (task) => ({ type: 'partition', task }),
        onDone: (done) => {
          distinct[done.order - 1] += done.distinct;
          totals[done.order - 1] += done.total;
        },
      });
      const occurrences = sumOccurrences(job);
      for (let n = 1; n <= config.order; n++) {
        assert(totals[n - 1] === occurrences[n - 1], `order ${n}: Σ counts in runs ${totals[n - 1]} ≠ occurrences counted ${occurrences[n - 1]}`);
      }
      count.status = 'done';
      count.distinct = distinct;
      count.totals = totals;
      count.elapsedMs = Date.now() - countStarted;
      await writeManifest(fs, jobDir, job);
    }
    return summarize(job, jobDir, vocab, reads, request, started, resumed);
  } finally {
    await lock.release();
  }
}

function baseInit(job: JobManifest, jobDir: string, phase: WorkerInit['phase']): WorkerInit {
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

function sumOccurrences(job: JobManifest): number[] {
  const occurrences = new Array<number>(job.config.order).fill(0);
  for (const c of job.stages.count.chunks) for (let n = 0; n < job.config.order; n++) occurrences[n] += c.occurrences[n];
  return occurrences;
}

function summarize(
  job: JobManifest, jobDir: string, vocab: Vocabulary, reads: ReadStats[], request: CountRequest, started: number, resumed: boolean,
): CountSummary {
  const sum = (f: (r: ReadStats) => number): number => reads.reduce((s, r) => s + f(r), 0);
  const count = job.stages.count;
  const runs = count.chunks.flatMap((c) => c.runs);
  const skippedByFile = new Map<number, SkippedReport>();
  job.chunks.forEach((chunk, i) => {
    const r = reads[i];
    if (r.skipped === 0) return;
    const report = skippedByFile.get(chunk.fileIndex) ?? { file: job.inputs[chunk.fileIndex].path, skipped: 0, samples: [] };
    report.skipped += r.skipped;
    report.samples.push(...r.skippedSamples);
    skippedByFile.set(chunk.fileIndex, report);
  });
  const tokens = count.chunks.reduce((s, c) => s + c.tokens, 0);
  const elapsedMs = Date.now() - started;
  const workMs = (job.stages.vocab.elapsedMs ?? 0) + (count.elapsedMs ?? 0);
  return {
    jobDir,
    inputs: job.inputs.length,
    inputBytes: job.inputs.reduce((s, f) => s + f.bytes, 0),
    chunks: job.chunks.length,
    lines: sum((r) => r.lines),
    emptyLines: sum((r) => r.emptyLines),
    sentences: sum((r) => r.sentences),
    tokens,
    vocabularySize: vocab.words.length - 1,
    typesSeen: vocab.typesSeen,
    typesCapped: vocab.typesCapped,
    order: job.config.order,
    distinct: count.distinct ?? [],
    occurrences: sumOccurrences(job),
    spills: count.chunks.reduce((s, c) => s + c.spills, 0),
    runFiles: runs.length,
    runBytes: runs.reduce((s, r) => s + r.bytes, 0),
    skipped: [...skippedByFile.values()],
    workers: request.workers,
    memoryBytes: request.memoryBytes,
    elapsedMs,
    tokensPerSecond: workMs > 0 ? Math.round((tokens / workMs) * 1000) : 0,
    resumed,
  };
}
