/** Messages between the main thread and the count workers (structured-clone safe). */
import type { Chunk, InputFile, NormalizeOptions, ReadStats } from '../corpus/types.ts';
import type { ChunkResult, RunRecord } from '../job/manifest.ts';
import type { PartitionMergeTask } from '../merge/merge-partition.ts';
import type { TokenFileRecord } from './token-file.ts';
import type { OrderTally } from '../merge/tally.ts';
import type { PartitionEstimateResult, PartitionEstimateSettings } from '../estimate/partition-estimate.ts';
import type { SharedModel } from '../pack/reader.ts';
import type { ChunkScore, ScoreSettings } from '../score/score-chunk.ts';

export type Phase = 'vocab' | 'count' | 'remap' | 'merge' | 'continuation-emit' | 'continuation-merge' | 'estimate' | 'score';

export interface WorkerInit {
  phase: Phase;
  jobDir: string;
  inputs: InputFile[];
  /** JSONL text field path (e.g. ['body','text']); the format comes from each input. */
  textField: string[] | undefined;
  skipBad: boolean;
  normalize: NormalizeOptions;
  order: number;
  partitions: number;
  /** vocab phase: keep each chunk's tokens in a token file for the count pass (token-file.ts). */
  writeTokenFiles?: boolean;
  /** count phase: the token file of each chunk (index = chunk), null where there is none, and the
   *  entry → id map of each word table they use; a chunk without both is read from its text. */
  tokenFiles?: Array<TokenFileRecord | null>;
  tokenMaps?: Record<number, Uint32Array>;
  /** count phase: the sha256 of the job's vocab.tsv, which a worker reads (and checks) only when
   *  it reads a chunk from its text rather than its token file. */
  vocabSha256?: string;
  eosId?: number;
  unkId?: number;
  /** count and continuation-emit phases: the budget of this worker's counters. */
  counterBytesMax?: number;
  /** count, continuation-emit and remap phases: vocabulary size + 1 (bounds word ids). */
  idMax?: number;
  /** remap phase: idMap[oldId] = newId, and the first spill number of the new runs. */
  idMap?: Uint32Array;
  spillBase?: number;
  /** estimate phase: the method, its global parameters and the unigram results. */
  estimate?: PartitionEstimateSettings;
  /** score phase (`quern score`, a chunk per task): the model, shared, and how to read and score. */
  score?: { model: SharedModel; settings: ScoreSettings };
}

export type ToWorker =
  | { type: 'init'; init: WorkerInit }
  | { type: 'chunk'; chunk: Chunk }
  /** Count phase: consecutive chunks counted as one unit of work (count/chunk-groups.ts). */
  | { type: 'chunks'; chunks: Chunk[] }
  | { type: 'partition'; task: PartitionMergeTask }
  | { type: 'emit'; partition: number; localOrders: number[] }
  | { type: 'remap'; chunk: number; files: string[] }
  | { type: 'estimate'; partition: number }
  | { type: 'finish' };

export interface RemapDone {
  type: 'done';
  chunk: number;
  runs: RunRecord[];
}

export interface EmitDone {
  type: 'done';
  partition: number;
  runs: RunRecord[];
}

export interface MergeDone {
  type: 'done';
  partition: number;
  tallies: OrderTally[];
}

export type EstimateDone = { type: 'done' } & PartitionEstimateResult;

export type ScoreChunkDone = { type: 'done' } & ChunkScore;

export interface VocabChunkDone {
  type: 'done';
  chunk: number;
  reads: ReadStats;
  tokens: number;
  /** The chunk's token file, when the phase writes them. */
  tokenFile?: TokenFileRecord;
}

/**
 * A counted group of chunks: one result per chunk, in chunk order. The group's run files (and its
 * budget spills) are recorded with its first chunk; the others have none of their own.
 */
export interface CountGroupDone {
  type: 'done';
  results: ChunkResult[];
}

/** Sent once at 'finish' by a vocabulary worker: its word counts over all its chunks. */
export interface VocabFinished {
  type: 'finished';
  /** This worker's word table, as token files name it; its words are its entries from 3 on. */
  table: number;
  /** The words' UTF-8 bytes end to end: word i is wordBytes[wordEnds[i − 1] (0 for i = 0) ..
   *  wordEnds[i]). */
  wordBytes: Uint8Array;
  wordEnds: Uint32Array;
  /** counts[i]: the occurrences of word i in this worker's chunks. */
  counts: Float64Array;
  unkSeen: number;
}

export interface CountFinished {
  type: 'finished';
}

export interface Progress {
  type: 'progress';
  bytes: number;
  tokens: number;
}

export interface WorkerFailure {
  type: 'error';
  code: string | undefined;
  message: string;
  location?: { file: string; line?: number; byteOffset?: number };
  stack?: string;
}

export type FromWorker = VocabChunkDone | CountGroupDone | MergeDone | EmitDone | RemapDone | EstimateDone | ScoreChunkDone | VocabFinished | CountFinished | Progress | WorkerFailure;
