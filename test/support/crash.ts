/**
 * Crash-test helpers: run `quern count` in a child process; stop it (SIGKILL, SIGINT, SIGTERM) when
 * the job directory shows a chosen state or at a moment of the work taken from an uninterrupted
 * run's timeline; say which stage a stop hit; compare a finished job with the uninterrupted run
 * (store digests, stats.json, leftovers). Shared by test/e2e/crash.test.ts and faults.test.ts.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { createHash } from 'node:crypto';
import { accessSync, constants, existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, rmSync, statSync } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { expect } from 'vitest';
import { SyntheticModel, writeShardFile } from '../../scripts/lib/synthetic.ts';
import { RunReader } from '../../src/count/run-file.ts';
import { mergeRuns } from '../../src/count/run-merge.ts';
import type { JobManifest } from '../../src/job/manifest.ts';
import { storeDigest } from '../../src/merge/digest.ts';
import { PartitionStore, partitionStoreDir, StoreSource } from '../../src/merge/store.ts';
import { REPO, type CliResult } from './cli.ts';

const BIN = path.join(REPO, 'bin/quern.js');

/**
 * A fresh directory for crash-test jobs. On tmpfs (/dev/shm) when there is one: a SIGKILL loses
 * nothing the kernel already has, so the tests exercise the same states as on disk, while fsync
 * costs nothing and the many interrupted runs fit the time budget.
 */
export function scratchDir(prefix: string): string {
  let base = '/dev/shm';
  try {
    accessSync(base, constants.W_OK);
  } catch {
    base = os.tmpdir();
  }
  return mkdtempSync(path.join(base, prefix));
}

/** A `quern …` child process and its result once it ends. */
export interface RunningQuern {
  child: ChildProcess;
  pid: number;
  /** Wall time since spawn, ms. */
  elapsed(): number;
  /** Settles when the process has exited and its output is closed. */
  done: Promise<CliResult>;
  /** True once the process has exited. */
  exited(): boolean;
}

/** Spawns `node bin/quern.js …args`; QUERN_TEST_FAULT is unset unless `env` sets it. */
export function startQuern(args: string[], env: NodeJS.ProcessEnv = {}): RunningQuern {
  const started = Date.now();
  const child = spawn(process.execPath, [BIN, ...args], {
    cwd: REPO,
    env: { ...process.env, QUERN_TEST_FAULT: '', ...env },
    stdio: ['ignore', 'pipe', 'pipe'],
  });
  let stdout = '';
  let stderr = '';
  let hasExited = false;
  child.stdout!.setEncoding('utf8').on('data', (d: string) => { stdout += d; });
  child.stderr!.setEncoding('utf8').on('data', (d: string) => { stderr += d; });
  const done = new Promise<CliResult>((resolve, reject) => {
    child.on('error', reject);
    child.on('exit', () => { hasExited = true; });
    child.on('close', (status, signal) => resolve({ status, signal, stdout, stderr }));
  });
  if (child.pid === undefined) throw new Error(`could not start ${BIN}`);
  return { child, pid: child.pid, elapsed: () => Date.now() - started, done, exited: () => hasExited };
}

/** Runs `quern …args` to the end. */
export function runToEnd(args: string[], env: NodeJS.ProcessEnv = {}): Promise<CliResult> {
  return startQuern(args, env).done;
}

export interface StopOutcome {
  /** True when the signal reached a running process (false: it had finished already). */
  stopped: boolean;
  result: CliResult;
  /** Milliseconds from spawn to the signal (or to the exit, when it finished first). */
  atMs: number;
  pid: number;
}

const sleep = (ms: number): Promise<void> => new Promise((resolve) => setTimeout(resolve, ms));

/** Sends `signal` to a running quern and waits for it to end. */
export async function stopNow(running: RunningQuern, signal: NodeJS.Signals = 'SIGKILL'): Promise<StopOutcome> {
  const atMs = running.elapsed();
  const sent = !running.exited() && running.child.kill(signal);
  const result = await running.done;
  // A process that exited just before the signal (not yet reaped) ends with status 0.
  const stopped = sent && (result.signal === signal || (result.status !== null && result.status !== 0));
  return { stopped, result, atMs, pid: running.pid };
}

/**
 * Runs `quern …args`, polls the job directory every `pollMs` until the process holds the job lock
 * and `ready(startedAtMs)` holds, waits `afterMs` more, then sends `signal`. If the process ends
 * first, `stopped` is false. `startedAtMs` (the spawn time, Date.now()) lets `ready` tell files
 * this process wrote from those an earlier one left.
 */
export async function runAndStopWhen(
  args: string[],
  jobDir: string,
  ready: (startedAtMs: number) => boolean,
  options: { afterMs?: number; pollMs?: number; signal?: NodeJS.Signals } = {},
): Promise<StopOutcome> {
  const { afterMs = 0, pollMs = 4, signal = 'SIGKILL' } = options;
  const startedAtMs = Date.now();
  const running = startQuern(args);
  for (;;) {
    if (running.exited()) return { stopped: false, result: await running.done, atMs: running.elapsed(), pid: running.pid };
    let hit = false;
    try {
      hit = lockOwner(jobDir) === running.pid && ready(startedAtMs);
    } catch {
      hit = false; // a file read between the writer's steps: look again
    }
    if (hit) break;
    await sleep(pollMs);
  }
  if (afterMs > 0) await sleep(afterMs);
  return stopNow(running, signal);
}

/** The job manifest, or undefined when there is none (yet). */
export function readJob(jobDir: string): JobManifest | undefined {
  let text: string;
  try {
    text = readFileSync(path.join(jobDir, 'job.json'), 'utf8');
  } catch {
    return undefined;
  }
  return JSON.parse(text) as JobManifest;
}

/** Every file under runs/ (modified at or after `sinceMs`, if given), relative to the job directory. */
export function runFilesOnDisk(jobDir: string, sinceMs?: number): string[] {
  const root = path.join(jobDir, 'runs');
  if (!existsSync(root)) return [];
  return readdirSync(root, { recursive: true, withFileTypes: true })
    .filter((e) => e.isFile())
    .map((e) => path.join(e.parentPath, e.name))
    .filter((file) => sinceMs === undefined || (statSync(file, { throwIfNoEntry: false })?.mtimeMs ?? -Infinity) >= sinceMs)
    .map((file) => path.relative(jobDir, file));
}

/** Run files recorded in job.json: the n-gram pass's and the continuation pass's (relative paths). */
export function recordedRunFiles(job: JobManifest): string[] {
  return [
    ...job.stages.count.chunks.flatMap((c) => c.runs.map((r) => r.file)),
    ...(job.stages.continuation?.emitted ?? []).flatMap((e) => e.runs.map((r) => r.file)),
  ];
}

const STAGE_NAMES = ['vocab', 'count', 'merge', 'continuation'] as const;

/** The pid in the job's lock file, or undefined when there is none. */
export function lockOwner(jobDir: string): number | undefined {
  try {
    return Number(readFileSync(path.join(jobDir, 'job.lock'), 'utf8').trim());
  } catch {
    return undefined;
  }
}

/** Where a stop landed, read from the job directory after the process is gone. */
export type StopStage =
  | 'startup' // the process did not hold the job lock yet
  | 'vocabulary' // vocabulary pass not recorded as done
  | 'counting' // n-gram pass running, no run file of an unfinished chunk on disk
  | 'spilling' // n-gram pass running, an unfinished chunk has written (or is writing) run files
  | 'merging' // count done, merge not done
  | 'continuation' // merge done, continuation counts not done
  | 'finished'; // everything recorded; the process was between its last write and its exit

export const STOP_STAGES: StopStage[] = ['startup', 'vocabulary', 'counting', 'spilling', 'merging', 'continuation', 'finished'];

export interface StopPoint {
  stage: StopStage;
  /** A line for the report: stage plus the details seen (chunks done, spill files, partitions). */
  detail: string;
}

/**
 * Reads the job directory of a stopped job and says which stage the stop of process `pid` hit:
 * 'startup' until that process holds the job lock, then the first stage job.json does not record
 * as done (a SIGKILL leaves the lock file behind, with the pid of its owner).
 */
export function classifyStop(jobDir: string, pid?: number): StopPoint {
  const job = readJob(jobDir);
  if (pid !== undefined && lockOwner(jobDir) !== pid) {
    // Not holding the lock: not taken yet, or released at the very end.
    if (job && STAGE_NAMES.every((name) => job.stages[name].status === 'done')) return { stage: 'finished', detail: 'after the lock was released' };
    return { stage: 'startup', detail: `startup: before the lock${job ? '' : ', no job.json yet'}` };
  }
  if (!job) return { stage: 'startup', detail: 'startup: no job.json yet' };
  const { vocab, count, merge, continuation } = job.stages;
  if (vocab.status !== 'done') return { stage: 'vocabulary', detail: 'vocabulary pass' };
  if (count.status !== 'done') {
    const recorded = new Set(recordedRunFiles(job));
    const inFlight = runFilesOnDisk(jobDir).filter((f) => !recorded.has(f));
    const chunks = `${count.chunks.length}/${job.chunks.length} chunks done`;
    if (inFlight.length === 0) return { stage: 'counting', detail: `counting, ${chunks}` };
    const partial = inFlight.filter((f) => f.endsWith('.tmp')).length;
    const spills = new Set(inFlight.map((f) => /(c\d+-s\d+)\.run/.exec(f)?.[1]));
    return { stage: 'spilling', detail: `spilling, ${chunks}, ${inFlight.length} unrecorded run files (${partial} being written) from spills ${[...spills].sort().join(' ')}` };
  }
  if (merge.status !== 'done') {
    return { stage: 'merging', detail: `merging, ${merge.partitionsDone.length}/${job.config.partitions} partitions done${existsSync(path.join(jobDir, 'counts.lmdb')) ? '' : ', no store yet'}` };
  }
  if (continuation.status !== 'done') {
    const partitions = job.config.partitions;
    return { stage: 'continuation', detail: `continuation counts, ${continuation.emitted.length}/${partitions} partitions emitted, ${continuation.partitionsDone.length}/${partitions} merged` };
  }
  return { stage: 'finished', detail: 'after the last record, before the exit' };
}

/** Counts stop points per stage and formats the table that the tests print. */
export class StopTally {
  readonly points: Array<StopPoint & { label: string; atMs: number }> = [];

  add(label: string, point: StopPoint, atMs: number): void {
    this.points.push({ ...point, label, atMs });
  }

  byStage(): Record<StopStage, number> {
    const counts = Object.fromEntries(STOP_STAGES.map((s) => [s, 0])) as Record<StopStage, number>;
    for (const p of this.points) counts[p.stage]++;
    return counts;
  }

  format(title: string): string {
    const counts = this.byStage();
    const lines = [`${title}: ${this.points.length} kill points`];
    for (const stage of STOP_STAGES) lines.push(`  ${stage.padEnd(12)} ${String(counts[stage]).padStart(3)}  ${'#'.repeat(counts[stage])}`);
    return lines.join('\n');
  }

  formatDetails(): string {
    return this.points.map((p) => `  ${p.label.padEnd(44)} at ${String(p.atMs).padStart(5)} ms: ${p.detail}`).join('\n');
  }
}

/**
 * Digest of a finished job's count store (orderMax and partitions from its job.json): storeDigest
 * of the raw counts, and the same over the continuation counts N1+(• x) of orders 1..N−1.
 */
export async function jobDigest(jobDir: string): Promise<{ raw: string; continuation: string }> {
  const job = readJob(jobDir);
  if (!job) throw new Error(`${jobDir} has no job.json`);
  const { order, partitions } = job.config;
  const raw = await storeDigest(jobDir, order, partitions);
  const hash = createHash('sha256');
  const stores = Array.from({ length: partitions }, (_, p) => PartitionStore.open(path.join(jobDir, partitionStoreDir(p)), 'read'));
  try {
    for (let n = 1; n < order; n++) {
      hash.update(`continuation order ${n}\n`);
      for await (const batch of mergeRuns(stores.map((s) => new StoreSource(s, n, undefined, 'continuation')), n)) {
        hash.update(new Uint8Array(batch.keys.buffer, batch.keys.byteOffset, batch.recordCount * n * 4));
        hash.update(new Uint8Array(batch.counts.buffer, batch.counts.byteOffset, batch.recordCount * 8));
      }
    }
  } finally {
    await Promise.all(stores.map((s) => s.close()));
  }
  return { raw, continuation: hash.digest('hex') };
}

/** sha256 of a text, for comparing long outputs without printing them. */
export function sha256(text: string | Uint8Array): string {
  return createHash('sha256').update(text).digest('hex');
}

/** Removes a job or scratch directory. */
export function removeDir(dir: string): void {
  rmSync(dir, { recursive: true, force: true });
}

/**
 * How far a job has got: the number of units of work job.json records as done (job created,
 * vocabulary, each chunk, the count, each partition's merge, the merge, each partition's
 * continuation emit and merge, the continuation counts). Only grows while a job is interrupted
 * and resumed.
 */
export function progressOf(job: JobManifest | undefined): number {
  if (!job) return 0;
  const { vocab, count, merge, continuation } = job.stages;
  const done = (status: string): number => (status === 'done' ? 1 : 0);
  return 1 + done(vocab.status) + count.chunks.length + done(count.status) + merge.partitionsDone.length + done(merge.status)
    + continuation.emitted.length + continuation.partitionsDone.length + done(continuation.status);
}

/** When an uninterrupted run recorded each step of progress (ms after its spawn). */
export interface Timeline {
  wallMs: number;
  /** steps[p] = first time progress p was seen (steps[0] = 0, the spawn). */
  steps: number[];
  result: CliResult;
}

/** Runs `quern …args` to the end, noting when job.json records each unit of work. */
export async function runWithTimeline(args: string[], jobDir: string, pollMs = 5): Promise<Timeline> {
  const running = startQuern(args);
  const steps = [0];
  const note = (): void => {
    let progress = 0;
    try {
      progress = progressOf(readJob(jobDir));
    } catch {
      return;
    }
    while (steps.length <= progress) steps.push(running.elapsed());
  };
  while (!running.exited()) {
    note();
    await sleep(pollMs);
  }
  const result = await running.done;
  note();
  return { wallMs: running.elapsed(), steps, result };
}

/** A moment of an uninterrupted run, as "`offsetMs` after progress `progress` was reached". */
export interface KillPoint {
  pointMs: number;
  progress: number;
  offsetMs: number;
}

/** Kill points drawn uniformly over the timeline's wall time, sorted, each anchored to its progress. */
export function drawKillPoints(random: () => number, count: number, timeline: Timeline): KillPoint[] {
  const points = Array.from({ length: count }, () => Math.floor(random() * timeline.wallMs)).sort((a, b) => a - b);
  return points.map((pointMs) => {
    let progress = 0;
    while (progress + 1 < timeline.steps.length && timeline.steps[progress + 1] <= pointMs) progress++;
    return { pointMs, progress, offsetMs: pointMs - timeline.steps[progress] };
  });
}

/**
 * Runs `quern …args` and SIGKILLs it at the same place of the work as `point` in the uninterrupted
 * run: `offsetMs` after the job reached the point's progress (from the spawn when that is 0).
 * A re-run that starts at that progress already is timed from when it takes the job lock.
 */
export async function runAndKillAt(args: string[], jobDir: string, point: KillPoint, pollMs = 5): Promise<StopOutcome> {
  const running = startQuern(args);
  let reachedAt = point.progress === 0 ? 0 : -1;
  for (;;) {
    if (running.exited()) return { stopped: false, result: await running.done, atMs: running.elapsed(), pid: running.pid };
    if (reachedAt < 0) {
      try {
        if (lockOwner(jobDir) === running.pid && progressOf(readJob(jobDir)) >= point.progress) reachedAt = running.elapsed();
      } catch {
        // job.json read between the writer's steps: look again
      }
    }
    if (reachedAt >= 0 && running.elapsed() >= reachedAt + point.offsetMs) return stopNow(running, 'SIGKILL');
    await sleep(reachedAt >= 0 ? Math.min(pollMs, Math.max(1, reachedAt + point.offsetMs - running.elapsed())) : pollMs);
  }
}

/**
 * The corpus the crash and fault tests count: four generated shards (2.3 MB) of a 3,000-word
 * vocabulary. With the options below each shard makes two chunks, 448 KiB and the rest: 8 chunks,
 * and the four large ones spill in the middle, since the counters get the least a worker may have
 * (4 MiB, WORKER_COUNTER_BYTES_MIN) and about 80,000 tokens' n-grams of orders 1–4 do not fit it.
 * (A chunk holding less than about 50,000 tokens fits: a smaller --chunk-size gives no such spill.)
 */
export function writeCrashCorpus(dir: string): string {
  const corpus = path.join(dir, 'corpus');
  mkdirSync(corpus, { recursive: true });
  const model = new SyntheticModel({ seed: 11, vocabularyTypes: 3000, successorRanks: 3000, phraseCount: 3000 });
  [600_000, 580_000, 560_000, 540_000].forEach((bytes, shard) => writeShardFile(model, shard, bytes, path.join(corpus, `shard-${shard}.txt`)));
  return corpus;
}

/** `quern count` of the crash corpus into `jobDir`: order 4, 2 workers, the smallest budget they allow. */
export function countArgs(corpus: string, jobDir: string): string[] {
  return [
    'count', corpus, '--job', jobDir, '--order', '4', '--workers', '2', '--partitions', '4',
    '--chunk-size', '448KiB', '--memory', '9MiB', '--quiet',
  ];
}

/** What a finished job is compared with: the uninterrupted run's store digests and stats.json. */
export interface JobReference {
  digest: { raw: string; continuation: string };
  stats: unknown;
}

export async function captureReference(jobDir: string): Promise<JobReference> {
  return { digest: await jobDigest(jobDir), stats: JSON.parse(readFileSync(path.join(jobDir, 'stats.json'), 'utf8')) };
}

/**
 * Checks a finished job against the reference: same store digests (raw and continuation counts),
 * same stats.json, no lock, no temporary file in the job directory, and on disk exactly the run
 * files job.json records (an interrupted or failed run leaves nothing behind once re-run).
 */
export async function expectLikeReference(jobDir: string, reference: JobReference, what: string): Promise<void> {
  expect(await jobDigest(jobDir), `${what}: store digests`).toEqual(reference.digest);
  expect(JSON.parse(readFileSync(path.join(jobDir, 'stats.json'), 'utf8')), `${what}: stats.json`).toEqual(reference.stats);
  expect(existsSync(path.join(jobDir, 'job.lock')), `${what}: lock released`).toBe(false);
  expect(readdirSync(jobDir).filter((f) => f.endsWith('.tmp')), `${what}: temporary files`).toEqual([]);
  expect(runFilesOnDisk(jobDir).sort(), `${what}: run files on disk`).toEqual(recordedRunFiles(readJob(jobDir)!).sort());
}

/** Reads a run file from its header to its trailer; throws what RunReader throws on damage. */
export async function readRunFile(file: string): Promise<number> {
  const reader = await RunReader.open(file);
  let records = 0;
  for (let batch = await reader.nextBatch(); batch !== null; batch = await reader.nextBatch()) records += batch.recordCount;
  return records;
}
