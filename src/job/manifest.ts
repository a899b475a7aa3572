/**
 * The job manifest `job.json`: configuration, the inputs with their fingerprints, the chunk plan and
 * the state of every stage. Written atomically (temporary file, fsync, rename) by the main thread
 * only, after the data it records is durable.
 */
import { promises as fsp } from 'node:fs';
import * as path from 'node:path';
import { QuernError } from '../errors.ts';
import type { Chunk, InputFile, NormalizeOptions, ReadStats } from '../corpus/types.ts';
import type { VocabCap } from '../corpus/vocabulary.ts';
import { writeFileAtomic, type StageFs } from './fsio.ts';
import type { ModelHeader } from '../estimate/model-source.ts';
import type { ResultFileRecord } from '../estimate/partition-estimate.ts';
import type { TokenFileRecord } from '../count/token-file.ts';

export const MANIFEST_FILE = 'job.json';
export const MANIFEST_VERSION = 1;

/** Everything that decides the counts. Two runs with equal configs and inputs give equal counts. */
export interface JobConfig {
  order: number;
  partitions: number;
  normalize: NormalizeOptions;
  format: 'text' | 'jsonl' | 'auto';
  textField: string | null;
  skipBad: boolean;
  vocabCap: VocabCap;
  chunkBytes: number;
}

export type StageStatus = 'pending' | 'running' | 'done';

/** One finished chunk of the count stage: its run files and what reading it saw. */
export interface ChunkResult {
  chunk: number;
  runs: RunRecord[];
  /** Spills forced by the memory budget. */
  spills: number;
  tokens: number;
  /** N-gram occurrences counted per order (index 0 = order 1). */
  occurrences: number[];
  /** True when the tokens came from the vocabulary pass's token file rather than the text. */
  fromTokenFile?: boolean;
}

export interface RunRecord {
  /** Path relative to the job directory. */
  file: string;
  order: number;
  partition: number;
  records: number;
  bytes: number;
}

export interface VocabStage {
  status: StageStatus;
  /** While inputs are being added: sha256 of the vocabulary before the addition (vocab.previous.tsv). */
  previousSha?: string;
  /** sha256 of vocab.tsv once written. */
  sha256?: string;
  types?: number;
  /** Read statistics per chunk (index = chunk index), from the vocabulary pass; null for a chunk
   *  not read yet (inputs being added). */
  reads?: Array<ReadStats | null>;
  /** The vocabulary pass's token files for the count pass (count/token-file.ts), until the count
   *  is done: per chunk (index = chunk) its record or null, and the sha256 of each word table's
   *  entry → id map. */
  tokens?: { files: Array<TokenFileRecord | null>; maps: Record<string, string> };
  elapsedMs?: number;
}

export interface CountStage {
  status: StageStatus;
  chunks: ChunkResult[];
  elapsedMs?: number;
}

/** Re-keying the runs of chunks counted before inputs were added (the ids changed). */
export interface RemapStage {
  status: StageStatus;
  /** Chunks whose runs are keyed by the previous vocabulary's ids. */
  chunks: number[];
  chunksDone: number[];
  /** Additions so far; new runs are numbered from generation × REMAP_SPILL_STRIDE. */
  generation: number;
}

export interface MergeStage {
  status: StageStatus;
  /** Partitions whose merge finished (their tallies are in their store's progress record). */
  partitionsDone: number[];
  /** Distinct n-grams per order (index 0 = order 1), once done; the full tallies are in stats.json. */
  distinct?: number[];
  /** Bytes of the store on disk once done (with the continuation counts its merge made). */
  storeBytes?: number;
  elapsedMs?: number;
}

export interface ContinuationStage {
  status: StageStatus;
  /** Source partitions whose suffixes were emitted, with the runs they wrote. */
  emitted: Array<{ partition: number; runs: RunRecord[] }>;
  /** Partitions whose continuation runs are merged into their store. */
  partitionsDone: number[];
  /** Per partition, the orders (≥ 2) whose continuation counts it computes from its own store
   *  (merge/local-continuation.ts) rather than from emitted runs; fixed when the stage starts,
   *  so a resumed stage (even with another --memory) splits the work the same way. */
  local?: number[][];
  /** Bytes of the store on disk once done (raw and continuation counts). */
  storeBytes?: number;
  elapsedMs?: number;
}

/** The streaming estimate (src/estimate/stream-stage.ts): result files per partition, resumable. */
export interface EstimateStage {
  status: StageStatus;
  /** What the results were estimated from and with: method, options and the sha256 of stats.json.
   *  Another key makes the results stale: they are removed and estimated again. */
  key: string;
  /** The order-1 results (probabilities of every id 0..V), once written. */
  unigrams?: ResultFileRecord;
  /** Partitions whose result files are durable, with those files and what their rule counted. */
  partitionsDone: Array<{ partition: number; files: ResultFileRecord[]; katz: unknown }>;
  /** Everything of the model but its rows and vocabulary, once done. */
  header?: Omit<ModelHeader, 'vocabulary'>;
  elapsedMs?: number;
}

export interface JobManifest {
  format: 'quern-job';
  version: number;
  createdAt: string;
  config: JobConfig;
  inputs: InputFile[];
  chunks: Chunk[];
  stages: { vocab: VocabStage; remap?: RemapStage; count: CountStage; merge: MergeStage; continuation: ContinuationStage; estimate?: EstimateStage };
}

export function manifestPath(jobDir: string): string {
  return path.join(jobDir, MANIFEST_FILE);
}

/** Reads the manifest of `jobDir`, or undefined when the job has none yet. */
export async function readManifest(jobDir: string): Promise<JobManifest | undefined> {
  const file = manifestPath(jobDir);
  let text: string;
  try {
    text = await fsp.readFile(file, 'utf8');
  } catch (cause) {
    if ((cause as NodeJS.ErrnoException).code === 'ENOENT') return undefined;
    throw new QuernError('io', `cannot read ${file}: ${(cause as Error).message}`, { cause });
  }
  let manifest: JobManifest;
  try {
    manifest = JSON.parse(text) as JobManifest;
  } catch (cause) {
    throw new QuernError('corrupt', `${file} is not valid JSON: ${(cause as Error).message}`, { cause });
  }
  if (manifest?.format !== 'quern-job' || typeof manifest.version !== 'number') {
    throw new QuernError('corrupt', `${file} is not a quern job manifest`);
  }
  if (manifest.version > MANIFEST_VERSION) {
    throw new QuernError('config', `${file} was written by a newer quern (manifest version ${manifest.version}); upgrade quern`);
  }
  return manifest;
}

/** Writes the manifest atomically. */
export async function writeManifest(fs: StageFs, jobDir: string, manifest: JobManifest): Promise<void> {
  await writeFileAtomic(fs, manifestPath(jobDir), JSON.stringify(manifest, null, 2) + '\n');
}

/**
 * Lists, in plain words, how a stored config and inputs differ from the requested ones; empty when
 * they agree. Used to refuse resuming a job that would mix two different corpora or settings.
 */
export function describeDifferences(stored: JobManifest, config: JobConfig, inputs: InputFile[]): string[] {
  const differences: string[] = [];
  const a = stored.config as unknown as Record<string, unknown>;
  const b = config as unknown as Record<string, unknown>;
  for (const key of Object.keys(b)) {
    if (JSON.stringify(a[key]) !== JSON.stringify(b[key])) {
      differences.push(`${key}: job has ${JSON.stringify(a[key])}, this run asks for ${JSON.stringify(b[key])}`);
    }
  }
  const storedByPath = new Map(stored.inputs.map((f) => [f.path, f]));
  const requested = new Set(inputs.map((f) => f.path));
  for (const file of inputs) {
    const old = storedByPath.get(file.path);
    if (!old) differences.push(`input added: ${file.path}`);
    else if (old.bytes !== file.bytes) differences.push(`input changed size: ${file.path} (${old.bytes} → ${file.bytes} bytes)`);
    else if (old.mtimeMs !== file.mtimeMs) differences.push(`input modified: ${file.path}`);
    else if (old.fingerprint !== file.fingerprint) differences.push(`input content changed: ${file.path}`);
  }
  for (const file of stored.inputs) if (!requested.has(file.path)) differences.push(`input missing from this run: ${file.path}`);
  return differences;
}
