/**
 * `quern verify`: re-reads what a job directory holds and checks it against what job.json records,
 * without changing any of it. Five checks, each with a verdict and the numbers behind it:
 *
 *   manifest    job.json parses, is a quern job, and its stage states agree with each other and
 *               with the run files on disk (present, with the recorded sizes)
 *   vocabulary  vocab.tsv has the sha256 recorded in job.json, parses, and its marker counts agree
 *               with the sentences and tokens read
 *   runs        every recorded run file (n-gram runs and continuation runs) reads to its end
 *               (checksums, record counts, sums), holds what its record says, and the runs of each
 *               order sum to the occurrences counted (continuation runs: to the distinct n-grams
 *               of the order above)
 *   store       every block of every partition, key space and order decodes; the per-order tallies
 *               recomputed from the blocks equal the partitions' progress records and stats.json;
 *               Σ r·n_r = total; unigram Σ = tokens + sentences = occurrences counted; unigram
 *               counts = vocab.tsv; Σ N1+(• x) at order m = distinct n-grams of order m+1
 *   inputs      (on request) the inputs still have their recorded size, mtime and fingerprint
 *
 * A job that is not finished is verified as far as it goes: the checks of stages that have not run
 * are skipped and the report lists the pending stages. Memory: one run-file block or one store
 * block at a time, the vocabulary's counts, and count-of-counts tallies (small).
 */
import { VERIFY_PROBLEMS_MAX } from '../limits.ts';
import { createHash } from 'node:crypto';
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import { ORDER_MAX, PARTITIONS_MAX } from '../limits.ts';
import { discoverInputs } from '../corpus/discover.ts';
import { BOS_ID, parseVocabulary, type Vocabulary } from '../corpus/vocabulary.ts';
import { compareRows } from '../count/block-codec.ts';
import { partitionOf } from '../count/hash.ts';
import { RunReader } from '../count/run-file.ts';
import { RUNS_DIR } from '../count/run-layout.ts';
import { sumOccurrences, VOCAB_FILE } from '../count/stage.ts';
import type { MergeProgress } from '../merge/merge-partition.ts';
import { STATS_FILE } from '../merge/stage.ts';
import { PartitionStore, partitionStoreDir, type KeySpace } from '../merge/store.ts';
import { sumTallies, TallyBuilder, type OrderTally } from '../merge/tally.ts';
import type { CountOfCounts } from '../stats/types.ts';
import { lockJob, type JobLock } from './lock.ts';
import {
  describeDifferences, MANIFEST_FILE, readManifest, type ContinuationStage, type JobManifest, type RunRecord, type StageStatus,
} from './manifest.ts';

/**
 * Problems kept per check: enough to see a pattern, bounded however damaged the job is (the rest
 * are counted in `problemsOmitted`). Belongs in src/limits.ts with the other limits.
 */

/** What to verify besides the job directory itself. */
export interface VerifyOptions {
  /** Also re-read every input's size, mtime and fingerprint and compare them with job.json. */
  inputs?: boolean;
}

/** The checks, in the order they run (see the file comment). */
export type CheckName = 'manifest' | 'vocabulary' | 'runs' | 'store' | 'inputs';
/** 'skipped': the stage has not run yet, or (inputs) the check was not asked for. */
export type CheckStatus = 'ok' | 'failed' | 'skipped';

/** The verdict of one check. */
export interface VerifyCheck {
  name: CheckName;
  status: CheckStatus;
  /** The numbers behind the verdict, or why the check was skipped, in one line. */
  summary: string;
  /** What failed, each naming the file it concerns (at most VERIFY_PROBLEMS_MAX). */
  problems: string[];
  /** Problems found beyond VERIFY_PROBLEMS_MAX. */
  problemsOmitted: number;
  /** The figures of the summary for programs (names as in the summary). */
  figures: Record<string, number | number[]>;
}

/** Everything verify found: the verdict of each check, the stages, what is pending. */
export interface VerifyReport {
  jobDir: string;
  /** True when no check failed (skipped checks do not count against it). */
  ok: boolean;
  /** Highest order and partitions of the job; 0 when job.json could not be read. */
  order: number;
  partitions: number;
  stages: { vocab: StageStatus; count: StageStatus; merge: StageStatus; continuation: StageStatus } | null;
  /** Stages not finished yet, in words (e.g. "merge (1 of 4 partitions merged)"). */
  pending: string[];
  checks: VerifyCheck[];
}

/** Collects one check's problems and figures. */
class CheckRecorder {
  readonly problems: string[] = [];
  problemsOmitted = 0;
  readonly figures: Record<string, number | number[]> = {};

  constructor(readonly name: CheckName) {}

  fail(problem: string): void {
    if (this.problems.length < VERIFY_PROBLEMS_MAX) this.problems.push(problem);
    else this.problemsOmitted++;
  }

  get failed(): boolean {
    return this.problems.length > 0;
  }

  done(summary: string): VerifyCheck {
    return {
      name: this.name, status: this.failed ? 'failed' : 'ok', summary,
      problems: this.problems, problemsOmitted: this.problemsOmitted, figures: this.figures,
    };
  }
}

function skipped(name: CheckName, why: string): VerifyCheck {
  return { name, status: 'skipped', summary: why, problems: [], problemsOmitted: 0, figures: {} };
}

/** Integers with thousands separators, the same in every locale. */
function num(n: number): string {
  return n.toLocaleString('en-US');
}

/** "1 file", "2 files". */
function plural(n: number, noun: string): string {
  return `${num(n)} ${noun}${n === 1 ? '' : 's'}`;
}

function sum(values: number[]): number {
  return values.reduce((s, v) => s + v, 0);
}

function isCount(value: unknown): value is number {
  return typeof value === 'number' && Number.isSafeInteger(value) && value >= 0;
}

/**
 * Verifies the job in `jobDir` and returns the report; never changes the job's files. It holds the
 * job's lock while it reads, so a count cannot change the files under it.
 *
 * @throws QuernError('config') when `jobDir` is not a job directory or a running count holds it;
 *   a damaged job is not thrown but reported (see `verifyFailure` to turn a report into an error).
 */
export async function verifyJob(jobDir: string, options: VerifyOptions = {}): Promise<VerifyReport> {
  if (typeof jobDir !== 'string' || jobDir === '') throw new QuernError('config', `jobDir: expected the path of a job directory, got ${JSON.stringify(jobDir)}`);
  const dir = path.resolve(jobDir);
  const stat = await fsp.stat(dir).catch(() => undefined);
  if (!stat?.isDirectory()) throw new QuernError('config', `${dir} is not a directory; give the job directory of a quern count`);
  const manifestStat = await fsp.stat(path.join(dir, MANIFEST_FILE)).catch(() => undefined);
  if (!manifestStat) throw new QuernError('config', `${dir} is not a quern job (no ${MANIFEST_FILE}); give the job directory of a quern count`);
  let lock: JobLock | undefined;
  try {
    lock = await lockJob(dir);
  } catch (error) {
    // A live count holds the job: its files are changing. A read-only job cannot be locked, and
    // needs no lock.
    if (!(error instanceof QuernError && error.code === 'io')) throw error;
  }
  try {
    return await verifyLocked(dir, options);
  } finally {
    await lock?.release();
  }
}

async function verifyLocked(jobDir: string, options: VerifyOptions): Promise<VerifyReport> {
  const report: VerifyReport = { jobDir, ok: true, order: 0, partitions: 0, stages: null, pending: [], checks: [] };
  const { check: manifestCheck, job } = await checkManifest(jobDir);
  report.checks.push(manifestCheck);
  if (job === undefined) {
    const why = `${MANIFEST_FILE} cannot be used`;
    for (const name of ['vocabulary', 'runs', 'store', 'inputs'] as const) report.checks.push(skipped(name, why));
    report.ok = false;
    return report;
  }
  const { vocab, count, merge, continuation } = job.stages;
  report.order = job.config.order;
  report.partitions = job.config.partitions;
  report.stages = { vocab: vocab.status, count: count.status, merge: merge.status, continuation: continuation.status };
  if (vocab.status !== 'done') report.pending.push('vocabulary');
  if (count.status !== 'done') report.pending.push(`count (${count.chunks.length} of ${job.chunks.length} chunks counted)`);
  if (merge.status !== 'done') report.pending.push(`merge (${merge.partitionsDone.length} of ${job.config.partitions} partitions merged)`);
  if (continuation.status !== 'done') {
    report.pending.push(`continuation counts (${continuation.emitted.length} of ${job.config.partitions} partitions emitted, ${continuation.partitionsDone.length} merged)`);
  }

  const vocabResult = await checkVocabulary(jobDir, job);
  report.checks.push(vocabResult.check);
  report.checks.push(await checkRuns(jobDir, job, vocabResult.vocab));
  report.checks.push(await checkStore(jobDir, job, vocabResult.vocab));
  report.checks.push(options.inputs ? await checkInputs(job) : skipped('inputs', 'not checked (--inputs re-reads each input\'s size, mtime and fingerprint)'));
  report.ok = report.checks.every((c) => c.status !== 'failed');
  return report;
}

// ---- 1. job.json --------------------------------------------------------------------------------

/** Checks job.json; returns the job only when it is sound enough for the other checks to use. */
async function checkManifest(jobDir: string): Promise<{ check: VerifyCheck; job: JobManifest | undefined }> {
  const check = new CheckRecorder('manifest');
  const file = path.join(jobDir, MANIFEST_FILE);
  let job: JobManifest | undefined;
  try {
    job = await readManifest(jobDir);
  } catch (error) {
    // A manifest of a newer quern ('config') or an unreadable file ('io') is not damage.
    if (!(error instanceof QuernError && error.code === 'corrupt')) throw error;
    check.fail(error.message);
    return { check: check.done(`${MANIFEST_FILE} cannot be read`), job: undefined };
  }
  if (job === undefined) throw new QuernError('config', `${jobDir} is not a quern job (no ${MANIFEST_FILE})`);
  const shape = shapeProblems(job);
  if (shape.length > 0) {
    for (const problem of shape) check.fail(`${file}: ${problem}`);
    return { check: check.done(`${MANIFEST_FILE} does not have the shape of a quern job`), job: undefined };
  }

  // A job written before the continuation stage existed has not run it.
  job.stages.continuation ??= { status: 'pending', emitted: [], partitionsDone: [] };
  const { config, chunks, inputs } = job;
  const { vocab, count, merge, continuation } = job.stages;
  // Stage order: a stage runs only after the one before it finished.
  if (count.status !== 'pending' && vocab.status !== 'done') check.fail(`${file}: count is ${count.status} but the vocabulary is ${vocab.status}`);
  // (While inputs are being added to a job, the chunks counted before wait for the new vocabulary.)
  if (count.chunks.length > 0 && vocab.status !== 'done' && vocab.previousSha === undefined) check.fail(`${file}: ${count.chunks.length} chunks are counted but the vocabulary is ${vocab.status}`);
  if (merge.status !== 'pending' && count.status !== 'done') check.fail(`${file}: merge is ${merge.status} but the count is ${count.status}`);
  if (merge.partitionsDone.length > 0 && count.status !== 'done') check.fail(`${file}: ${merge.partitionsDone.length} partitions are merged but the count is ${count.status}`);
  if (vocab.status === 'done') {
    if (typeof vocab.sha256 !== 'string' || !/^[0-9a-f]{64}$/.test(vocab.sha256)) check.fail(`${file}: the vocabulary is done but has no sha256`);
    if (!Array.isArray(vocab.reads) || vocab.reads.length !== chunks.length || !vocab.reads.every((r) => isCount(r?.sentences))) {
      check.fail(`${file}: the vocabulary is done but its read statistics do not cover the ${chunks.length} chunks`);
    }
  }
  // Chunks: each counted at most once, each one of the plan.
  const seen = new Set<number>();
  for (const c of count.chunks) {
    if (!Number.isInteger(c.chunk) || c.chunk < 0 || c.chunk >= chunks.length) check.fail(`${file}: counted chunk ${c.chunk} is not in the plan of ${chunks.length} chunks`);
    else if (seen.has(c.chunk)) check.fail(`${file}: chunk ${c.chunk} is recorded as counted more than once`);
    else seen.add(c.chunk);
  }
  if (count.status === 'done' && seen.size !== chunks.length) check.fail(`${file}: the count is done but ${chunks.length - seen.size} of ${chunks.length} chunks are not recorded`);
  // Merge: each partition at most once; all of them once done.
  const merged = partitionSet(merge.partitionsDone, config.partitions, 'merged counts', file, check);
  if (merge.status === 'done') {
    if (merged.size !== config.partitions) check.fail(`${file}: the merge is done but ${config.partitions - merged.size} of ${config.partitions} partitions are not recorded as merged`);
    if (!Array.isArray(merge.distinct) || merge.distinct.length !== config.order) check.fail(`${file}: the merge is done but its distinct counts do not cover orders 1..${config.order}`);
  }
  // Continuation counts: emitted from and merged into each partition at most once, after the merge.
  if (continuation.status !== 'pending' && merge.status !== 'done') check.fail(`${file}: continuation counts are ${continuation.status} but the merge is ${merge.status}`);
  const emitted = partitionSet(continuation.emitted.map((e) => e.partition), config.partitions, 'emitted continuation counts', file, check);
  const contMerged = partitionSet(continuation.partitionsDone, config.partitions, 'merged continuation counts', file, check);
  if ((emitted.size > 0 || contMerged.size > 0) && merge.status !== 'done') check.fail(`${file}: continuation counts are recorded but the merge is ${merge.status}`);
  if (continuation.status === 'done' && config.order >= 2) {
    if (emitted.size !== config.partitions) check.fail(`${file}: continuation counts are done but ${config.partitions - emitted.size} of ${config.partitions} partitions are not recorded as emitted`);
    if (contMerged.size !== config.partitions) check.fail(`${file}: continuation counts are done but ${config.partitions - contMerged.size} of ${config.partitions} partitions are not recorded as merged`);
  }
  // Run files: each recorded once, inside runs/, present with its recorded size.
  const files = new Set<string>();
  const runs = recordedRuns(job);
  let runFilesMissing = 0;
  let runFilesResized = 0;
  for (const { run, origin } of runs) {
    const normal = path.normalize(run.file);
    if (path.isAbsolute(normal) || !normal.startsWith(RUNS_DIR + path.sep)) {
      check.fail(`${file}: run file ${run.file} (${origin}) is not under ${RUNS_DIR}/`);
      runFilesMissing++;
      continue;
    }
    if (files.has(normal)) check.fail(`${file}: run file ${run.file} is recorded more than once`);
    files.add(normal);
    const size = await fsp.stat(path.join(jobDir, normal)).then((s) => s.size, () => undefined);
    if (size === undefined) {
      check.fail(`run file ${run.file} (${origin}) is recorded in ${MANIFEST_FILE} but missing`);
      runFilesMissing++;
    } else if (size !== run.bytes) {
      runFilesResized++;
      check.fail(`run file ${run.file} (${origin}) is ${num(size)} bytes, ${MANIFEST_FILE} records ${num(run.bytes)}`);
    }
  }
  const runBytes = sum(runs.map((r) => r.run.bytes));
  Object.assign(check.figures, {
    inputs: inputs.length, inputBytes: sum(inputs.map((f) => f.bytes)), chunks: chunks.length, chunksCounted: seen.size,
    runFiles: runs.length, runBytes, runFilesMissing, runFilesResized, partitions: config.partitions, partitionsMerged: merged.size,
    partitionsEmitted: emitted.size, partitionsContinuationMerged: contMerged.size,
  });
  const summary = `${MANIFEST_FILE}: order ${config.order}, ${inputs.length} inputs (${num(check.figures.inputBytes as number)} bytes), `
    + `${chunks.length} chunks of which ${seen.size} counted, ${runs.length} run files (${num(runBytes)} bytes)`
    + `${runFilesMissing + runFilesResized === 0 ? ' all present with their recorded sizes' : `, ${runFilesMissing} missing, ${runFilesResized} of another size`}; `
    + `of ${config.partitions} partitions ${merged.size} merged, ${emitted.size} emitted and ${contMerged.size} merged continuation counts`;
  return { check: check.done(summary), job };
}

/** The distinct partitions of a list, each checked to be in range and listed once. */
function partitionSet(list: number[], partitions: number, what: string, file: string, check: CheckRecorder): Set<number> {
  const set = new Set<number>();
  for (const p of list) {
    if (!Number.isInteger(p) || p < 0 || p >= partitions) check.fail(`${file}: ${what} of partition ${p}, which is not one of the ${partitions} partitions`);
    else if (set.has(p)) check.fail(`${file}: ${what} of partition ${p} are recorded more than once`);
    else set.add(p);
  }
  return set;
}

/** A recorded run file, with what wrote it. */
interface RecordedRun {
  run: RunRecord;
  kind: 'count' | 'continuation';
  /** The provenance number in the run's header: the chunk, or the source partition of continuation runs. */
  headerChunk: number;
  /** Where its counts come from, in words. */
  origin: string;
}

/** Every run file job.json records: the count's, then the continuation stage's. */
function recordedRuns(job: JobManifest): RecordedRun[] {
  const runs: RecordedRun[] = [];
  for (const c of job.stages.count.chunks) {
    for (const run of c.runs) runs.push({ run, kind: 'count', headerChunk: c.chunk, origin: describeChunk(job, c.chunk) });
  }
  for (const e of job.stages.continuation.emitted) {
    const origin = `continuation counts emitted from the order 2..${job.config.order} n-grams of partition ${e.partition}`;
    for (const run of e.runs) runs.push({ run, kind: 'continuation', headerChunk: e.partition, origin });
  }
  return runs;
}

/** What a chunk is, for messages: "chunk i: bytes a–b of input <path>". */
function describeChunk(job: JobManifest, chunkIndex: number): string {
  const chunk = job.chunks[chunkIndex];
  const input = chunk === undefined ? undefined : job.inputs[chunk.fileIndex];
  if (input === undefined) return `chunk ${chunkIndex}`;
  return `chunk ${chunkIndex}: bytes ${chunk.byteStart}–${chunk.byteEnd} of input ${input.path}${chunk.linesBefore !== undefined ? ' (decompressed)' : ''}`;
}

/** The fields the other checks rely on, with the types they need; problems in words. */
function shapeProblems(job: JobManifest): string[] {
  const problems: string[] = [];
  const config = job.config as Partial<JobManifest['config']> | undefined;
  if (typeof config !== 'object' || config === null) return ['no config'];
  if (!Number.isInteger(config.order) || config.order! < 1 || config.order! > ORDER_MAX) problems.push(`config.order ${config.order} is not in 1..${ORDER_MAX}`);
  if (!Number.isInteger(config.partitions) || config.partitions! < 1 || config.partitions! > PARTITIONS_MAX) problems.push(`config.partitions ${config.partitions} is not in 1..${PARTITIONS_MAX}`);
  if (!Array.isArray(job.inputs) || !job.inputs.every((f) => typeof f?.path === 'string' && isCount(f.bytes))) problems.push('inputs are not a list of files with their sizes');
  if (!Array.isArray(job.chunks)) problems.push('chunks are not a list');
  else if (Array.isArray(job.inputs)) {
    job.chunks.forEach((c, i) => {
      const input = job.inputs[c?.fileIndex];
      // A range of a gzip input's decompressed text (linesBefore) may lie past the file's size.
      const textRange = c?.linesBefore !== undefined;
      if (c?.index !== i || input === undefined || !isCount(c.byteStart) || !(c.byteEnd >= c.byteStart && (textRange || c.byteEnd <= input.bytes)) || (textRange && !(input.gzip && isCount(c.linesBefore)))) {
        problems.push(`chunk ${i} is not a byte range of one of the ${job.inputs.length} inputs`);
      }
    });
  }
  const stages = job.stages as Partial<JobManifest['stages']> | undefined;
  const statuses = ['pending', 'running', 'done'];
  if (!statuses.includes(stages?.vocab?.status as string)) problems.push('stages.vocab has no valid status');
  if (!statuses.includes(stages?.count?.status as string) || !Array.isArray(stages?.count?.chunks)) problems.push('stages.count has no valid status or chunk list');
  else {
    for (const c of stages.count.chunks) {
      if (!isCount(c?.tokens) || !Array.isArray(c.occurrences) || c.occurrences.length !== config.order || !c.occurrences.every(isCount) || !Array.isArray(c.runs)) {
        problems.push(`counted chunk ${c?.chunk} lacks its tokens, occurrences per order or run list`);
        continue;
      }
      for (const r of c.runs) runRecordProblem(r, config.order!, config.partitions!, `chunk ${c.chunk}`, problems);
    }
  }
  if (!statuses.includes(stages?.merge?.status as string) || !Array.isArray(stages?.merge?.partitionsDone)) problems.push('stages.merge has no valid status or list of merged partitions');
  const continuation = stages?.continuation as Partial<ContinuationStage> | undefined;
  if (continuation !== undefined) {
    if (!statuses.includes(continuation.status as string) || !Array.isArray(continuation.emitted) || !Array.isArray(continuation.partitionsDone)) {
      problems.push('stages.continuation has no valid status, list of emitted partitions or list of merged partitions');
    } else {
      for (const e of continuation.emitted) {
        if (!Array.isArray(e?.runs)) {
          problems.push(`emitted continuation counts of partition ${e?.partition} have no run list`);
          continue;
        }
        for (const r of e.runs) runRecordProblem(r, config.order! - 1, config.partitions!, `continuation counts of partition ${e.partition}`, problems);
      }
    }
  }
  return problems;
}

function runRecordProblem(r: RunRecord, orderMax: number, partitions: number, owner: string, problems: string[]): void {
  if (typeof r?.file !== 'string' || !isCount(r.bytes) || !isCount(r.records) || !Number.isInteger(r.order) || r.order < 1 || r.order > orderMax
    || !Number.isInteger(r.partition) || r.partition < 0 || r.partition >= partitions) {
    problems.push(`a run record of ${owner} (${JSON.stringify(r?.file)}) has no valid file, size, records, order (1..${orderMax}) or partition`);
  }
}

// ---- 2. vocab.tsv -------------------------------------------------------------------------------

async function checkVocabulary(jobDir: string, job: JobManifest): Promise<{ check: VerifyCheck; vocab: Vocabulary | undefined }> {
  const stage = job.stages.vocab;
  if (stage.status !== 'done') return { check: skipped('vocabulary', 'vocabulary stage pending'), vocab: undefined };
  const check = new CheckRecorder('vocabulary');
  const file = path.join(jobDir, VOCAB_FILE);
  let bytes: Buffer;
  try {
    bytes = await fsp.readFile(file);
  } catch (cause) {
    const reason = (cause as NodeJS.ErrnoException).code === 'ENOENT' ? 'is missing' : `cannot be read: ${(cause as Error).message}`;
    check.fail(`${file} ${reason} (${MANIFEST_FILE} records the vocabulary as done)`);
    return { check: check.done(`${VOCAB_FILE} not read`), vocab: undefined };
  }
  const sha256 = createHash('sha256').update(bytes).digest('hex');
  if (sha256 !== stage.sha256) {
    check.fail(`${file}: sha256 ${sha256} does not match ${stage.sha256} recorded in ${MANIFEST_FILE} (${num(bytes.length)} bytes)`);
    return { check: check.done(`${VOCAB_FILE}: ${num(bytes.length)} bytes, checksum differs`), vocab: undefined };
  }
  let vocab: Vocabulary;
  try {
    vocab = parseVocabulary(bytes.toString('utf8'), file);
  } catch (error) {
    if (!(error instanceof QuernError)) throw error;
    check.fail(error.message);
    return { check: check.done(`${VOCAB_FILE}: sha256 matches but it does not parse`), vocab: undefined };
  }
  const types = vocab.words.length - 1;
  if (stage.types !== undefined && stage.types !== types) check.fail(`${file}: ${num(types)} entries besides <s>, ${MANIFEST_FILE} records ${num(stage.types)}`);
  const sentences = sum((stage.reads ?? []).map((r) => r?.sentences ?? 0));
  const eosCount = vocab.counts[vocab.eosId];
  if (vocab.counts[BOS_ID] !== sentences) check.fail(`${file}: <s> count ${num(vocab.counts[BOS_ID])} ≠ ${num(sentences)} sentences read`);
  if (eosCount !== sentences) check.fail(`${file}: </s> count ${num(eosCount)} ≠ ${num(sentences)} sentences read`);
  const predicted = sum(vocab.counts) - vocab.counts[BOS_ID];
  let tokensNote = '';
  if (job.stages.count.status === 'done') {
    const tokens = sum(job.stages.count.chunks.map((c) => c.tokens));
    if (predicted !== tokens + sentences) check.fail(`${file}: Σ counts without <s> ${num(predicted)} ≠ ${num(tokens)} tokens + ${num(sentences)} sentences counted`);
    else tokensNote = ` = tokens + sentences counted`;
  }
  Object.assign(check.figures, { bytes: bytes.length, types, sentences, predicted });
  return {
    check: check.done(`${VOCAB_FILE}: ${num(bytes.length)} bytes, sha256 matches ${MANIFEST_FILE}, ${num(types)} types with </s> and <unk>, `
      + `<s> = </s> = ${num(sentences)} sentences, Σ counts ${num(predicted)}${tokensNote}`),
    vocab,
  };
}

// ---- 3. run files -------------------------------------------------------------------------------

/**
 * Checks one row of an n-gram: its partition, its ids within the vocabulary, and `<s>` only where
 * it can be — first in a raw n-gram of order ≥ 2 (a context, never predicted), nowhere in a
 * continuation n-gram (a suffix never starts a sentence).
 */
function rowProblem(
  keys: Uint32Array, offset: number, order: number, space: KeySpace, partition: number, partitions: number, vocabSize: number,
): string | undefined {
  for (let k = 0; k < order; k++) {
    const id = keys[offset + k];
    if (vocabSize > 0 && id >= vocabSize) return `word id ${id} is outside the vocabulary of ${vocabSize} ids`;
    if (id === BOS_ID && (k > 0 || order === 1 || space === 'continuation')) return `<s> at position ${k + 1} of an n-gram of order ${order}`;
  }
  const home = partitionOf(keys, offset, order, partitions);
  if (home !== partition) return `n-gram [${Array.from(keys.subarray(offset, offset + order)).join(' ')}] belongs to partition ${home}`;
  return undefined;
}

/** Reads one run file to its end; returns its header, or throws QuernError('corrupt' | 'io'). */
async function readRun(filePath: string, recorded: RecordedRun, partitions: number, vocabSize: number): Promise<{ order: number; recordCount: number; countSum: number }> {
  const { run, headerChunk, kind } = recorded;
  const reader = await RunReader.open(filePath);
  try {
    const info = reader.info;
    const header: string[] = [];
    if (info.order !== run.order) header.push(`order ${info.order} (recorded ${run.order})`);
    if (info.partition !== run.partition) header.push(`partition ${info.partition} (recorded ${run.partition})`);
    if (info.chunk !== headerChunk) header.push(`${kind === 'count' ? 'chunk' : 'source partition'} ${info.chunk} (recorded ${headerChunk})`);
    if (info.recordCount !== run.records) header.push(`${num(info.recordCount)} records (recorded ${num(run.records)})`);
    if (header.length > 0) throw new QuernError('corrupt', `run file ${filePath}: its header says ${header.join(', ')}`);
    const space: KeySpace = kind === 'count' ? 'raw' : 'continuation';
    for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch()) {
      for (let j = 0; j < batch.recordCount; j++) {
        const problem = rowProblem(batch.keys, j * info.order, info.order, space, run.partition, partitions, vocabSize);
        if (problem !== undefined) throw new QuernError('corrupt', `run file ${filePath}: ${problem}`);
      }
    }
    return info;
  } finally {
    await reader.close().catch(() => {});
  }
}

async function checkRuns(jobDir: string, job: JobManifest, vocab: Vocabulary | undefined): Promise<VerifyCheck> {
  const { order: orderMax, partitions } = job.config;
  const runs = recordedRuns(job);
  if (runs.length === 0) return skipped('runs', job.stages.count.chunks.length === 0 ? 'no chunk counted yet' : 'no run files recorded');
  const check = new CheckRecorder('runs');
  const vocabSize = vocab?.words.length ?? 0;
  // Per kind and order: records and Σ counts of the files read; files not read cleanly.
  const records = { count: new Array<number>(orderMax).fill(0), continuation: new Array<number>(Math.max(0, orderMax - 1)).fill(0) };
  const countSums = { count: new Array<number>(orderMax).fill(0), continuation: new Array<number>(Math.max(0, orderMax - 1)).fill(0) };
  const unread = { count: 0, continuation: 0 };
  for (const recorded of runs) {
    const filePath = path.join(jobDir, path.normalize(recorded.run.file));
    try {
      if (!(await fsp.stat(filePath).catch(() => undefined))) {
        unread[recorded.kind]++; // reported by the manifest check
        continue;
      }
      const info = await readRun(filePath, recorded, partitions, vocabSize);
      records[recorded.kind][info.order - 1] += info.recordCount;
      countSums[recorded.kind][info.order - 1] += info.countSum;
    } catch (error) {
      if (!(error instanceof QuernError)) throw error;
      unread[recorded.kind]++;
      check.fail(`${error.message} — the run holds ${recorded.kind === 'count' ? 'counts of ' : ''}${recorded.origin}`);
    }
  }
  const filesRead = runs.length - unread.count - unread.continuation;
  Object.assign(check.figures, {
    files: runs.length, filesRead, records: records.count, countSums: countSums.count,
    continuationRecords: records.continuation, continuationCountSums: countSums.continuation,
  });
  const perOrder = (kind: 'count' | 'continuation'): string => records[kind].map((r, n) => `order ${n + 1} ${num(r)} records Σ ${num(countSums[kind][n])}`).join('; ');

  // Totals: the count's runs of each order sum to the occurrences counted while reading; the
  // continuation runs of order m (every partition emitted) to the distinct n-grams of order m+1.
  let countTotals = '';
  if (unread.count > 0) countTotals = ` (totals not compared: ${plural(unread.count, 'file')} unreadable or missing)`;
  else {
    const occurrences = sumOccurrences(job);
    let same = true;
    for (let n = 1; n <= orderMax; n++) {
      if (countSums.count[n - 1] === occurrences[n - 1]) continue;
      same = false;
      check.fail(`${path.join(jobDir, RUNS_DIR)}: the runs of order ${n} sum to ${num(countSums.count[n - 1])}, ${MANIFEST_FILE} records ${num(occurrences[n - 1])} occurrences counted`);
    }
    if (same) countTotals = ' (each = occurrences counted)';
  }
  let summary = `${filesRead} of ${runs.length} run files read to the end; counts: ${perOrder('count')}${countTotals}`;
  const continuation = job.stages.continuation;
  if (continuation.emitted.length > 0) {
    let contTotals = '';
    const distinct = job.stages.merge.distinct;
    if (unread.continuation > 0) contTotals = ` (totals not compared: ${plural(unread.continuation, 'file')} unreadable or missing)`;
    else if (continuation.emitted.length === partitions && distinct !== undefined) {
      let same = true;
      // Orders whose continuation counts some partition computed from its own store
      // (merge/local-continuation.ts) have no runs there: their runs hold only part of the total.
      const localOrders = new Set((continuation.local ?? []).flat());
      for (let m = 1; m < orderMax; m++) {
        if (localOrders.has(m)) continue;
        if (countSums.continuation[m - 1] === distinct[m]) continue;
        same = false;
        check.fail(`${path.join(jobDir, RUNS_DIR)}: the continuation runs of order ${m} sum to ${num(countSums.continuation[m - 1])}, the merge records ${num(distinct[m])} distinct n-grams of order ${m + 1}`);
      }
      if (same) contTotals = localOrders.size === 0 ? ' (each = distinct n-grams of the order above)'
        : ` (each = distinct n-grams of the order above; ${localOrders.size === 1 ? 'order' : 'orders'} ${[...localOrders].sort((a, b) => a - b).join(', ')} not compared: counted inside the partitions)`;
    }
    summary += `; continuation: ${perOrder('continuation')}${contTotals}`;
  }
  return check.done(summary);
}

// ---- 4. the count store -------------------------------------------------------------------------

/** How each key space is named in messages. */
const SPACE_NAME: Record<KeySpace, string> = { raw: 'order', continuation: 'continuation counts of order' };

/** Count-of-counts fields of a tally, with their names in messages. */
const PAIR_FIELDS = [
  ['raw', 'count-of-counts'],
  ['contexts', 'context count-of-counts'],
  ['bosRaw', 'count-of-counts of n-grams starting with <s>'],
] as const;

/** The first difference between two tallies of one order, in words; undefined when equal. */
function tallyDifference(found: OrderTally, expected: OrderTally, foundName: string, expectedName: string): string | undefined {
  for (const field of ['distinct', 'total', 'contextCount'] as const) {
    if (found[field] !== expected[field]) return `${field} is ${num(found[field])} in ${foundName}, ${num(expected[field])} in ${expectedName}`;
  }
  for (const [field, what] of PAIR_FIELDS) {
    const a = new Map(found[field] ?? []);
    const b = new Map(expected[field] ?? []);
    const rs = [...new Set([...a.keys(), ...b.keys()])].sort((x, y) => x - y);
    for (const r of rs) {
      if (a.get(r) !== b.get(r)) return `${what} n_${r} (field ${field}) is ${num(a.get(r) ?? 0)} in ${foundName}, ${num(b.get(r) ?? 0)} in ${expectedName}`;
    }
  }
  return undefined;
}

/** Σ r·n_r of a count-of-counts. */
function weightedSum(pairs: CountOfCounts): number {
  return pairs.reduce((s, [r, n]) => s + r * n, 0);
}

function isPairs(value: unknown): value is CountOfCounts {
  return Array.isArray(value) && value.every((e) => Array.isArray(e) && e.length === 2 && isCount(e[0]) && isCount(e[1]));
}

/** The first malformed tally of a list that should hold orders 1..count, in words. */
function talliesProblem(tallies: unknown, count: number, what: string): string | undefined {
  if (!Array.isArray(tallies) || tallies.length !== count) return `does not hold ${what} of orders 1..${count}`;
  for (let n = 1; n <= count; n++) {
    const t = tallies[n - 1] as OrderTally | undefined;
    if (t?.order !== n || !isCount(t.distinct) || !isCount(t.total) || !isCount(t.contextCount) || !isPairs(t.raw) || !isPairs(t.contexts)
      || (t.bosRaw !== undefined && !isPairs(t.bosRaw))) {
      return `the ${what} of order ${n} are malformed`;
    }
  }
  return undefined;
}

/** Reads stats.json: its raw tallies, and its continuation tallies when that stage is done. */
async function readStats(file: string, orderMax: number, continuationDone: boolean): Promise<{ tallies: OrderTally[]; continuation: OrderTally[] } | string> {
  let value: { order?: unknown; tallies?: unknown; continuation?: unknown };
  try {
    value = JSON.parse(await fsp.readFile(file, 'utf8'));
  } catch (cause) {
    return (cause as NodeJS.ErrnoException).code === 'ENOENT' ? `${file} is missing (the merge is recorded as done)` : `${file} cannot be read: ${(cause as Error).message}`;
  }
  if (value?.order !== orderMax) return `${file} is not the stats of order ${orderMax}`;
  const problem = talliesProblem(value.tallies, orderMax, 'tallies')
    ?? (continuationDone ? talliesProblem(value.continuation, orderMax - 1, 'continuation tallies') : undefined);
  if (problem !== undefined) return `${file} ${problem}`;
  return { tallies: value.tallies as OrderTally[], continuation: continuationDone ? value.continuation as OrderTally[] : [] };
}

/** What the scan of the store's blocks adds up across partitions and orders. */
interface StoreScan {
  check: CheckRecorder;
  partitions: number;
  vocab: Vocabulary | undefined;
  blocks: number;
  /** Unigrams read (when the vocabulary could be read), and how many differ from its counts. */
  unigrams: number;
  unigramMismatches: number;
}

/**
 * Reads every block of one order and key space of one partition: each decodes (checksum, first
 * n-gram = key), follows the block before it, and holds rows of this partition within the
 * vocabulary. Returns the tally recomputed from the rows, or a problem in words.
 */
function scanOrder(scan: StoreScan, store: PartitionStore, partition: number, order: number, space: KeySpace): OrderTally | string {
  const { vocab } = scan;
  const vocabSize = vocab?.words.length ?? 0;
  const tally = new TallyBuilder(order);
  const last = new Uint32Array(order);
  const unigrams = order === 1 && space === 'raw' && vocab !== undefined;
  let first = true;
  try {
    // Decoded into the same arrays block after block (the last row is copied into `last`).
    for (const block of store.blocks(order, undefined, space, true)) {
      scan.blocks++;
      if (!first && compareRows(block.keys, 0, last, 0, order) <= 0) {
        return `block at [${Array.from(block.keys.subarray(0, order)).join(' ')}] does not follow the previous block's last n-gram`;
      }
      first = false;
      for (let j = 0; j < block.recordCount; j++) {
        const problem = rowProblem(block.keys, j * order, order, space, partition, scan.partitions, vocabSize);
        if (problem !== undefined) return problem;
        tally.addRows(block.keys, block.counts, j, j + 1);
        if (!unigrams) continue;
        scan.unigrams++;
        const id = block.keys[j];
        if (block.counts[j] !== vocab.counts[id]) {
          scan.unigramMismatches++;
          scan.check.fail(`count store partition ${partition}: unigram ${JSON.stringify(vocab.words[id])} (id ${id}) has count ${num(block.counts[j])}, ${VOCAB_FILE} says ${num(vocab.counts[id])}`);
        }
      }
      last.set(block.keys.subarray((block.recordCount - 1) * order, block.recordCount * order));
    }
  } catch (error) {
    if (!isStoreDamage(error)) throw error;
    return (error as Error).message;
  }
  return tally.finish();
}

/**
 * A corrupt block (QuernError) or an error LMDB itself raises on a damaged file (MDB_CORRUPTED,
 * MDB_PAGE_NOTFOUND, …); anything else is a programmer error and passes on.
 */
function isStoreDamage(error: unknown): boolean {
  return error instanceof QuernError || (error instanceof Error && /\bMDB_[A-Z_]+/.test(error.message));
}

/**
 * Checks the key spaces of one partition that job.json records as merged; returns the tallies per
 * order of each space that reads cleanly.
 */
async function scanPartition(
  scan: StoreScan, jobDir: string, partition: number, orderMax: number, spaces: KeySpace[],
): Promise<Partial<Record<KeySpace, OrderTally[]>>> {
  const { check } = scan;
  const dir = path.join(jobDir, partitionStoreDir(partition));
  const where = `count store partition ${partition} (${dir})`;
  const dataFile = path.join(dir, 'data.mdb');
  if (!(await fsp.stat(dataFile).catch(() => undefined))) {
    check.fail(`${where}: ${dataFile} is missing (${MANIFEST_FILE} records the partition as merged)`);
    return {};
  }
  let store: PartitionStore;
  try {
    store = PartitionStore.open(dir, 'read');
  } catch (error) {
    if (!isStoreDamage(error)) throw error;
    check.fail(`${where}: ${(error as Error).message}`);
    return {};
  }
  const result: Partial<Record<KeySpace, OrderTally[]>> = {};
  try {
    for (const space of spaces) {
      let progress: MergeProgress | undefined;
      try {
        progress = store.readProgress<MergeProgress>(space);
      } catch (error) {
        if (!isStoreDamage(error)) throw error;
        check.fail(`${where}: ${(error as Error).message}`);
      }
      if (progress?.done !== true) {
        const said = progress === undefined ? 'nothing was merged' : `order ${progress.order} with ${num(progress.records)} records merged, not done`;
        check.fail(`${where}: its ${space} progress record says ${said}`);
      }
      const orders = space === 'raw' ? orderMax : orderMax - 1;
      const tallies: OrderTally[] = [];
      for (let order = 1; order <= orders; order++) {
        const at = `${where}, ${SPACE_NAME[space]} ${order}`;
        const found = scanOrder(scan, store, partition, order, space);
        if (typeof found === 'string') {
          check.fail(`${at}: ${found}`);
          continue;
        }
        tallies.push(found);
        const recorded = progress?.tallies?.[order - 1];
        const difference = recorded === undefined ? undefined : tallyDifference(found, recorded, 'the blocks', 'its progress record');
        if (difference !== undefined) check.fail(`${at}: ${difference}`);
      }
      if (tallies.length === orders) result[space] = tallies;
    }
    return result;
  } finally {
    await store.close();
  }
}

/** The valid partitions of a list, sorted. */
function validPartitions(list: number[], partitions: number): number[] {
  return [...new Set(list)].filter((p) => Number.isInteger(p) && p >= 0 && p < partitions).sort((a, b) => a - b);
}

async function checkStore(jobDir: string, job: JobManifest, vocab: Vocabulary | undefined): Promise<VerifyCheck> {
  const { merge, continuation } = job.stages;
  const { order: orderMax, partitions } = job.config;
  const all = Array.from({ length: partitions }, (_, p) => p);
  const mergeDone = merge.status === 'done';
  const continuationDone = continuation.status === 'done' && orderMax >= 2;
  const rawParts = new Set(mergeDone ? all : validPartitions(merge.partitionsDone, partitions));
  const contParts = new Set(orderMax < 2 ? [] : continuationDone ? all : validPartitions(continuation.partitionsDone, partitions));
  const toCheck = all.filter((p) => rawParts.has(p) || contParts.has(p));
  if (toCheck.length === 0) return skipped('store', 'merge pending: no partition merged yet');
  const check = new CheckRecorder('store');
  const scan: StoreScan = { check, partitions, vocab, blocks: 0, unigrams: 0, unigramMismatches: 0 };
  const raw: OrderTally[][] = [];
  const cont: OrderTally[][] = [];
  let partitionsBad = 0;
  for (const p of toCheck) {
    const failuresBefore = check.problems.length + check.problemsOmitted;
    const spaces: KeySpace[] = [...(rawParts.has(p) ? ['raw' as const] : []), ...(contParts.has(p) ? ['continuation' as const] : [])];
    const tallies = await scanPartition(scan, jobDir, p, orderMax, spaces);
    if (tallies.raw) raw.push(tallies.raw);
    if (tallies.continuation) cont.push(tallies.continuation);
    if (check.problems.length + check.problemsOmitted > failuresBefore) partitionsBad++;
  }
  Object.assign(check.figures, { partitions: toCheck.length, partitionsBad, blocks: scan.blocks });
  const head = `${toCheck.length} of ${partitions} partitions (${rawParts.size} with counts, ${contParts.size} with continuation counts), ${num(scan.blocks)} blocks decoded`;
  if (!mergeDone) return check.done(`${head} (merge pending: totals not compared)`);
  if (partitionsBad > 0) return check.done(`${head}, ${plural(partitionsBad, 'partition')} damaged (totals not compared)`);

  // Totals of the whole store against stats.json and what reading counted.
  const tallies = Array.from({ length: orderMax }, (_, n) => sumTallies(n + 1, raw.map((t) => t[n])));
  const statsFile = path.join(jobDir, STATS_FILE);
  const stats = await readStats(statsFile, orderMax, continuationDone);
  if (typeof stats === 'string') check.fail(stats);
  const occurrences = sumOccurrences(job);
  const tokens = sum(job.stages.count.chunks.map((c) => c.tokens));
  const sentences = sum((job.stages.vocab.reads ?? []).map((r) => r?.sentences ?? 0));
  for (let n = 1; n <= orderMax; n++) {
    const t = tallies[n - 1];
    if (weightedSum(t.raw) !== t.total) check.fail(`count store order ${n}: Σ r·n_r ${num(weightedSum(t.raw))} ≠ total count ${num(t.total)}`);
    if (t.total !== occurrences[n - 1]) check.fail(`count store order ${n}: Σ counts ${num(t.total)} ≠ ${num(occurrences[n - 1])} occurrences counted while reading (${MANIFEST_FILE})`);
    if (merge.distinct?.[n - 1] !== t.distinct) check.fail(`${path.join(jobDir, MANIFEST_FILE)}: merge records ${merge.distinct?.[n - 1]} distinct n-grams of order ${n}, the store holds ${num(t.distinct)}`);
    if (typeof stats === 'string') continue;
    const s = stats.tallies[n - 1];
    if (weightedSum(s.raw) !== s.total) check.fail(`${statsFile} order ${n}: Σ r·n_r ${num(weightedSum(s.raw))} ≠ total ${num(s.total)}`);
    const difference = tallyDifference(s, t, STATS_FILE, 'the store');
    if (difference !== undefined) check.fail(`${statsFile} order ${n}: ${difference}`);
  }
  const unigramTotal = tallies[0].total;
  if (unigramTotal !== tokens + sentences) check.fail(`count store order 1: Σ counts ${num(unigramTotal)} ≠ ${num(tokens)} tokens + ${num(sentences)} sentences (${MANIFEST_FILE})`);
  if (vocab !== undefined) {
    const seenTypes = vocab.counts.filter((c, id) => id !== BOS_ID && c > 0).length;
    if (scan.unigramMismatches === 0 && scan.unigrams !== seenTypes) check.fail(`count store order 1: ${num(scan.unigrams)} unigrams stored, ${VOCAB_FILE} has ${num(seenTypes)} types with a count`);
  }
  Object.assign(check.figures, { distinct: tallies.map((t) => t.distinct), total: tallies.map((t) => t.total), tokens, sentences });
  let summary = `${head}: ${tallies.map((t) => `order ${t.order} ${num(t.distinct)} distinct Σ ${num(t.total)}`).join('; ')}`;

  // Continuation counts: N1+(• x) over the x of order m adds up to the distinct n-grams of order m+1.
  if (continuationDone) {
    const contTallies = Array.from({ length: orderMax - 1 }, (_, m) => sumTallies(m + 1, cont.map((t) => t[m])));
    for (let m = 1; m < orderMax; m++) {
      const t = contTallies[m - 1];
      const where = `count store continuation counts of order ${m}`;
      if (weightedSum(t.raw) !== t.total) check.fail(`${where}: Σ r·n_r ${num(weightedSum(t.raw))} ≠ Σ N1+ ${num(t.total)}`);
      if (t.total !== tallies[m].distinct) check.fail(`${where}: Σ N1+(• x) ${num(t.total)} ≠ ${num(tallies[m].distinct)} distinct n-grams of order ${m + 1}`);
      if (t.distinct > tallies[m - 1].distinct) check.fail(`${where}: ${num(t.distinct)} n-grams, more than the ${num(tallies[m - 1].distinct)} n-grams of order ${m}`);
      if (typeof stats === 'string') continue;
      const difference = tallyDifference(stats.continuation[m - 1], t, STATS_FILE, 'the store');
      if (difference !== undefined) check.fail(`${statsFile} continuation order ${m}: ${difference}`);
    }
    Object.assign(check.figures, { continuationDistinct: contTallies.map((t) => t.distinct), continuationTotal: contTallies.map((t) => t.total) });
    summary += `; continuation ${contTallies.map((t) => `order ${t.order} ${num(t.distinct)} distinct Σ N1+ ${num(t.total)}`).join('; ')}`;
  }
  if (check.failed) return check.done(`${summary} (tokens ${num(tokens)}, sentences ${num(sentences)})`);
  return check.done(`${summary}. Σ r·n_r = Σ counts = occurrences counted at each order; `
    + `order 1 Σ = ${num(tokens)} tokens + ${num(sentences)} sentences${vocab ? ` and each unigram = its ${VOCAB_FILE} count` : ''}; `
    + `${continuationDone ? 'Σ N1+ at order m = distinct n-grams of order m+1; ' : 'continuation counts pending; '}`
    + `progress records and ${STATS_FILE} agree with the blocks`);
}

// ---- 5. inputs ----------------------------------------------------------------------------------

async function checkInputs(job: JobManifest): Promise<VerifyCheck> {
  const check = new CheckRecorder('inputs');
  let same = 0;
  for (const stored of job.inputs) {
    let current;
    try {
      [current] = await discoverInputs([stored.path], { format: stored.format });
    } catch (error) {
      if (!(error instanceof QuernError)) throw error;
      check.fail(`input ${stored.path}: ${error.code === 'input' ? 'missing' : error.message}`);
      continue;
    }
    const differences = describeDifferences({ ...job, inputs: [stored] }, job.config, [current]);
    if (differences.length > 0) check.fail(differences.join('; '));
    else same++;
  }
  check.figures.inputs = job.inputs.length;
  check.figures.unchanged = same;
  return check.done(`${same} of ${job.inputs.length} inputs have their recorded size, mtime and fingerprint`);
}

// ---- the verdict as an error --------------------------------------------------------------------

/**
 * Turns a report with failed checks into one QuernError('corrupt') whose message is a paragraph
 * naming each failed check and its first problems; undefined when the report is ok.
 */
export function verifyFailure(report: VerifyReport): QuernError | undefined {
  const failed = report.checks.filter((c) => c.status === 'failed');
  if (failed.length === 0) return undefined;
  const shown = 3;
  const parts = failed.map((c) => {
    const more = c.problems.length - Math.min(shown, c.problems.length) + c.problemsOmitted;
    return `${c.name}: ${c.problems.slice(0, shown).join('; ')}${more > 0 ? `; and ${more} more` : ''}`;
  });
  const onlyInputs = failed.every((c) => c.name === 'inputs');
  const advice = onlyInputs
    ? 'The counts describe the inputs as they were when counted; count them again with --restart to describe them as they are now.'
    : 'The job\'s files are damaged or were changed after they were written; re-run the count with --restart to rebuild the job.';
  return new QuernError('corrupt', `job ${report.jobDir} failed ${failed.length} of ${report.checks.length} checks. ${parts.join('. ')}. ${advice}`);
}
