/** What every stage of a running job gets: the job, its directory, and how to record progress. */
import pLimit from 'p-limit';
import type { StageFs } from './fsio.ts';
import type { WorkerPool } from '../count/pool.ts';
import { writeManifest, type JobManifest } from './manifest.ts';

/** Receives progress of long work; the CLI draws it, tests ignore it. */
export interface ProgressSink {
  /**
   * `total`: the bytes or tasks to do, or undefined when they are not known ahead (standard input
   * being read: only what is done can be shown). `items`: what the second count of `update` counts
   * (default 'tokens').
   */
  start(label: string, total: number | undefined, unit?: 'bytes' | 'tasks', items?: string): void;
  update(doneDelta: number, tokensDelta: number): void;
  stop(): void;
}

export const silentProgress: ProgressSink = { start() {}, update() {}, stop() {} };

export interface StageContext {
  jobDir: string;
  job: JobManifest;
  fs: StageFs;
  progress: ProgressSink;
  workers: number;
  /** Budget for all counting memory together, bytes. */
  memoryBytes: number;
  /** Whether the vocabulary pass keeps its tokens on disk for the count pass (count/token-file.ts). */
  tokenFiles: boolean;
  /** The job's worker threads (ctx.workers of them at most), shared by every phase. */
  pool: WorkerPool;
  /** Writes job.json atomically; concurrent calls are written one at a time, in call order. */
  saveManifest(): Promise<void>;
}

export function makeStageContext(fields: Omit<StageContext, 'saveManifest'>): StageContext {
  const serial = pLimit(1);
  return { ...fields, saveManifest: () => serial(() => writeManifest(fields.fs, fields.jobDir, fields.job)) };
}
