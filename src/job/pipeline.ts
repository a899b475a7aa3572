/**
 * `quern count` as a job: take the lock, find the inputs, create or continue the job, and run
 * vocabulary → count → merge. Any stage may be interrupted at any moment; re-running the same
 * request continues from what job.json and the store record.
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import { discoverInputs } from '../corpus/discover.ts';
import { planChunks } from '../corpus/plan.ts';
import type { InputFile, ReadStats } from '../corpus/types.ts';
import { countStage, readJobVocabulary, sumOccurrences, vocabStage, VOCAB_FILE } from '../count/stage.ts';
import { RUNS_DIR } from '../count/run-layout.ts';
import { mergeStage, STATS_FILE } from '../merge/stage.ts';
import { continuationStage } from '../merge/continuation-stage.ts';
import { checkStoreAddressSpace, STORE_DIR } from '../merge/store.ts';
import { MERGE_SCRATCH_DIR } from '../merge/merge-partition.ts';
import { makeStageContext, silentProgress, type ProgressSink } from './context.ts';
import { stageFs, type StageFs } from './fsio.ts';
import { stopCleanlyOnSignals } from './interrupt.ts';
import { beginAddition, newInputs, remapStage } from './add.ts';
import { WorkerPool } from '../count/pool.ts';
import { lockJob } from './lock.ts';
import { describeDifferences, readManifest, writeManifest, MANIFEST_VERSION, type JobConfig, type JobManifest } from './manifest.ts';

export interface CountRequest {
  jobDir: string;
  inputSpecs: string[];
  config: JobConfig;
  workers: number;
  /** Budget for all counting memory together (counters and vocabulary copies), bytes. */
  memoryBytes: number;
  /** Discard an existing job in jobDir and start over. */
  restart: boolean;
  /** Add the inputs to the existing, counted job instead of starting one. */
  add?: boolean;
  /** Keep the vocabulary pass's tokens on disk for the count pass (default true): faster, and
   *  takes 4 bytes per token and per sentence on disk until the count is done (0.54× the
   *  1 GB benchmark corpus's text). */
  tokenFiles?: boolean;
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
  storeBytes: number;
  skipped: SkippedReport[];
  workers: number;
  memoryBytes: number;
  /** Wall time of this command. */
  elapsedMs: number;
  /** Time spent in each stage over all runs of the job (a resumed job adds up its runs). */
  stageMs: { vocabulary: number; count: number; merge: number; continuation: number };
  tokensPerSecond: number;
  /** True when this run continued an interrupted job or found it already finished. */
  resumed: boolean;
}

async function removeJobData(jobDir: string): Promise<void> {
  for (const name of [RUNS_DIR, STORE_DIR, MERGE_SCRATCH_DIR, VOCAB_FILE, STATS_FILE]) {
    await fsp.rm(path.join(jobDir, name), { recursive: true, force: true });
  }
}

/** Creates the job, or checks that the existing one was started with the same inputs and config. */
async function openJob(request: CountRequest, fs: StageFs): Promise<{ job: JobManifest; resumed: boolean; added: InputFile[] }> {
  const { jobDir, config } = request;
  // A job directory inside an input directory must not count its own files.
  const inputs = (await discoverInputs(request.inputSpecs, config.format === 'auto' ? {} : { format: config.format }))
    .filter((f) => !f.path.startsWith(jobDir + path.sep));
  if (inputs.length === 0) throw new QuernError('input', `no input files in ${request.inputSpecs.join(', ')} (outside the job directory)`);
  const jsonl = inputs.find((f) => f.format === 'jsonl');
  if (jsonl && config.textField === null) {
    throw new QuernError('config', `${jsonl.path} is JSON Lines: say where the text is with --text-field (e.g. --text-field body.text)`);
  }
  const existing = await readManifest(jobDir);
  if (request.add) {
    if (!existing) throw new QuernError('config', `--add: there is no job in ${jobDir} to add to; count without --add first`);
    const added = newInputs(existing, inputs);
    // The inputs given that the job already holds must be unchanged; the job's others are not compared.
    const known = new Set(inputs.filter((f) => !added.includes(f)).map((f) => f.path));
    const differences = describeDifferences({ ...existing, inputs: existing.inputs.filter((f) => known.has(f.path)) }, config, inputs.filter((f) => known.has(f.path)));
    if (differences.length > 0) throw new QuernError('config', `--add: the job in ${jobDir} differs:\n  ${differences.join('\n  ')}`);
    return { job: existing, resumed: true, added };
  }
  if (existing && !request.restart) {
    const differences = describeDifferences(existing, config, inputs);
    if (differences.length === 0) return { job: existing, resumed: true, added: [] };
    throw new QuernError('config', `job ${jobDir} was started with other inputs or settings:\n  ${differences.join('\n  ')}\nre-run with --restart to discard it and start over`);
  }
  await removeJobData(jobDir);
  const job: JobManifest = {
    format: 'quern-job',
    version: MANIFEST_VERSION,
    createdAt: new Date().toISOString(),
    config,
    inputs,
    // A gzip input is cut into ranges only when the vocabulary pass keeps token files: the count
    // pass reads a range without one by decompressing the file up to it (quadratic in its ranges).
    chunks: await planChunks(inputs, config.chunkBytes, request.tokenFiles === false ? {} : { splitGzipFor: { workers: request.workers } }),
    stages: {
      vocab: { status: 'pending' },
      count: { status: 'pending', chunks: [] },
      merge: { status: 'pending', partitionsDone: [] },
      continuation: { status: 'pending', emitted: [], partitionsDone: [] },
    },
  };
  await writeManifest(fs, jobDir, job);
  return { job, resumed: false, added: [] };
}

/** Runs (or continues) counting and merging a job; returns its summary. */
export async function runCount(request: CountRequest): Promise<CountSummary> {
  const started = Date.now();
  // Before hours of counting, not at the merge: the store cannot be opened under such a limit.
  checkStoreAddressSpace();
  const fs = request.fs ?? stageFs();
  const jobDir = path.resolve(request.jobDir);
  await fs.mkdir(jobDir);
  const lock = await lockJob(jobDir);
  const pool = new WorkerPool(request.workers);
  const removeSignalHandlers = stopCleanlyOnSignals(jobDir, lock.file, 're-run the same command to continue it.', () => pool.quiesce());
  try {
    await removeStaleTemporaries(jobDir);
    const { job, resumed, added } = await openJob({ ...request, jobDir }, fs);
    const ctx = makeStageContext({
      jobDir, job, fs, progress: request.progress ?? silentProgress, workers: request.workers, memoryBytes: request.memoryBytes, pool,
      tokenFiles: request.tokenFiles ?? true,
    });
    if (added.length > 0) await beginAddition(ctx, added);
    const vocab = await vocabStage(ctx) ?? await readJobVocabulary(jobDir, job);
    await remapStage(ctx, vocab);
    await countStage(ctx, vocab);
    await mergeStage(ctx);
    await continuationStage(ctx, vocab.words.length);
    return summarize(job, jobDir, vocab.words.length - 1, vocab.typesSeen, vocab.typesCapped, request, Date.now() - started, resumed);
  } finally {
    await pool.close();
    removeSignalHandlers();
    await lock.release();
  }
}

/** Removes temporary files an interrupted atomic write left in the job directory. */
async function removeStaleTemporaries(jobDir: string): Promise<void> {
  for (const name of await fsp.readdir(jobDir)) if (name.endsWith('.tmp')) await fsp.rm(path.join(jobDir, name), { force: true });
}

function summarize(
  job: JobManifest, jobDir: string, vocabularySize: number, typesSeen: number, typesCapped: number,
  request: CountRequest, elapsedMs: number, resumed: boolean,
): CountSummary {
  const reads = (job.stages.vocab.reads ?? []) as ReadStats[]; // all read once the job is done
  const sum = (f: (r: ReadStats) => number): number => reads.reduce((s, r) => s + f(r), 0);
  const count = job.stages.count;
  const runs = count.chunks.flatMap((c) => c.runs);
  const skippedByFile = new Map<number, SkippedReport>();
  // Chunks of a file are consecutive and in byte order: a sample's absolute line is the lines of
  // the file's earlier chunks plus its line within the chunk.
  const linesBefore = new Map<number, number>();
  job.chunks.forEach((chunk, i) => {
    const r = reads[i];
    const base = linesBefore.get(chunk.fileIndex) ?? 0;
    linesBefore.set(chunk.fileIndex, base + r.lines);
    if (r.skipped === 0) return;
    const report = skippedByFile.get(chunk.fileIndex) ?? { file: job.inputs[chunk.fileIndex].path, skipped: 0, samples: [] };
    report.skipped += r.skipped;
    for (const sample of r.skippedSamples as Array<ReadStats['skippedSamples'][number] & { lineInChunk?: number }>) {
      report.samples.push({ ...sample, line: sample.line ?? (sample.lineInChunk === undefined ? undefined : base + sample.lineInChunk) });
    }
    skippedByFile.set(chunk.fileIndex, report);
  });
  const tokens = count.chunks.reduce((s, c) => s + c.tokens, 0);
  const stageMs = {
    vocabulary: job.stages.vocab.elapsedMs ?? 0,
    count: count.elapsedMs ?? 0,
    merge: job.stages.merge.elapsedMs ?? 0,
    continuation: job.stages.continuation.elapsedMs ?? 0,
  };
  const workMs = stageMs.vocabulary + stageMs.count + stageMs.merge + stageMs.continuation;
  return {
    jobDir,
    inputs: job.inputs.length,
    inputBytes: job.inputs.reduce((s, f) => s + f.bytes, 0),
    chunks: job.chunks.length,
    lines: sum((r) => r.lines),
    emptyLines: sum((r) => r.emptyLines),
    sentences: sum((r) => r.sentences),
    tokens,
    vocabularySize,
    typesSeen,
    typesCapped,
    order: job.config.order,
    distinct: job.stages.merge.distinct ?? [],
    occurrences: sumOccurrences(job),
    spills: count.chunks.reduce((s, c) => s + c.spills, 0),
    runFiles: runs.length,
    runBytes: runs.reduce((s, r) => s + r.bytes, 0),
    // The whole store once the continuation counts are in (a job stopped before: as the merge left it).
    storeBytes: job.stages.continuation.storeBytes ?? job.stages.merge.storeBytes ?? 0,
    skipped: [...skippedByFile.values()],
    workers: request.workers,
    memoryBytes: request.memoryBytes,
    elapsedMs,
    stageMs,
    tokensPerSecond: workMs > 0 ? Math.round((tokens / workMs) * 1000) : 0,
    resumed,
  };
}
