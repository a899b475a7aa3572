/**
 * The k-way merge's loser tree in WebAssembly (run-merge.wasm, compiled from run-merge.as.ts by
 * `npm run build:wasm`): `WasmLoserTree` does what run-merge.ts's `LoserTreeMerger` does, record for
 * record, over a memory of its own into which each source's rows are copied a window of at most
 * MERGE_WINDOW_RECORDS at a time (the copy is a small part of the merge's work; the comparisons and
 * moves are the rest). Where no memory can be had, or the module not loaded, mergeRuns uses
 * `LoserTreeMerger`.
 */
import { assert } from '../errors.ts';
import { wasmModuleAt } from '../wasm-module.ts';
import { MERGE_BATCH_RECORDS, MERGE_WINDOW_RECORDS, RUN_COUNT_MAX, VOCAB_TYPES_MAX } from '../limits.ts';
import type { RunBatch } from './run-file.ts';

/** Which code merges two sources or more: 'auto' = the WebAssembly loser tree when it can be had. */
export type MergeEngine = 'auto' | 'js';

/** The head of a used-up source in every word: above every word id (VOCAB_TYPES_MAX). */
export const EXHAUSTED_ID = 0xffff_ffff;
assert(VOCAB_TYPES_MAX < EXHAUSTED_ID, 'a used-up source sorts above every row');

/** `fill` stopped because every run is used up. */
export const FILL_DONE = -1;
/** `fill` stopped because the output batch is full and the next row is a new n-gram. */
export const FILL_OUTPUT_FULL = -2;
/** The WebAssembly `fill`'s failed checks (run-merge.as.ts): a source not used up holds a row of
 *  ids EXHAUSTED_ID; a merged count above RUN_COUNT_MAX; a row below the last merged one. */
const FILL_ROW_ABOVE_IDS = -3;
const FILL_COUNT_ABOVE_MAX = -4;
const FILL_OUT_OF_ORDER = -5;
assert(RUN_COUNT_MAX === 2 ** 53 - 1, 'run-merge.as.ts checks sums against 2^53 − 1');

/** True when source a's head sorts before source b's, the heads being rows of `order` ids from
 *  word `at` of `heads` (ties by source index, for determinism). */
export function headBefore(heads: Uint32Array, at: number, order: number, a: number, b: number): boolean {
  let i = at + a * order;
  let j = at + b * order;
  const end = i + order;
  while (i < end && heads[i] === heads[j]) {
    i++;
    j++;
  }
  return i === end ? a < b : heads[i] < heads[j];
}

/**
 * The loser tree over k ≥ 1 sources whose heads `less` orders (ties by source index): leaves
 * k..2k−1, the children of node p are 2p and 2p+1; `setLoser(p, s)` keeps the loser at node p
 * (1..k−1). Returns the winner, for node 0.
 */
export function buildLoserTree(k: number, less: (a: number, b: number) => boolean, setLoser: (node: number, source: number) => void): number {
  const winners = new Int32Array(2 * k);
  for (let s = 0; s < k; s++) winners[k + s] = s;
  for (let p = k - 1; p >= 1; p--) {
    const a = winners[2 * p];
    const b = winners[2 * p + 1];
    const aWins = less(a, b);
    winners[p] = aWins ? a : b;
    setLoser(p, aWins ? b : a);
  }
  return k === 1 ? 0 : winners[1];
}

/** What mergeRuns asks of a merge state over k sources (LoserTreeMerger, WasmLoserTree). */
export interface Merger {
  readonly outSize: number;
  /** Installs source s's next block (null: the source is used up) and loads its first row. */
  setBatch(s: number, batch: RunBatch | null): void;
  /** After `fill` returned s: loads the next rows of source s's block when it has more (true);
   *  false when the block is used up (the caller installs the next with setBatch). Then replay. */
  nextWindow(s: number): boolean;
  build(): void;
  replay(s: number): void;
  fill(): number;
  takeOutput(): RunBatch;
}

interface MergeExports {
  init(): void;
  fill(): number;
  replay(s: number): void;
}

// Parameter block (u32 at these byte offsets; run-merge.as.ts reads it).
const P_ORDER = 0;
const P_K = 4;
const P_OUT_CAPACITY = 8;
const P_OUT_SIZE = 12;
const P_DETAIL = 16;
const P_ADDRESSES = 20; // heads, head counts, exhausted, tree, source keys/counts/rows/at, out keys/counts
const PARAMS_BYTES = 64;
const PAGE_BYTES = 65536;
/** The memory's largest size: what 32-bit addresses reach. */
const MEMORY_BYTES_MAX = 2 ** 32;

const mergeModule = wasmModuleAt(new URL('./run-merge.wasm', import.meta.url));

export class WasmLoserTree implements Merger {
  private readonly exports: MergeExports;
  private readonly u32: Uint32Array;
  private readonly f64: Float64Array;
  private readonly heads: number;
  private readonly headCounts: number;
  private readonly exhausted: number;
  private readonly tree: number;
  private readonly sourceRows: number;
  private readonly sourceAt: number;
  private readonly outKeys: number;
  private readonly outCounts: number;
  /** Word offset of source s's window of ids, and f64 offset of its counts. */
  private readonly windowKeys: number[] = [];
  private readonly windowCounts: number[] = [];
  /** Each source's current block, and the row its window starts at. */
  private readonly batches: Array<RunBatch | null>;
  private readonly windowStart: Int32Array;

  private constructor(private readonly sourceNames: string[], private readonly order: number, memory: WebAssembly.Memory, instance: WebAssembly.Instance) {
    const k = sourceNames.length;
    this.exports = instance.exports as unknown as MergeExports;
    this.u32 = new Uint32Array(memory.buffer);
    this.f64 = new Float64Array(memory.buffer);
    const layout = WasmLoserTree.layout(k, order);
    this.heads = layout.heads;
    this.headCounts = layout.headCounts;
    this.exhausted = layout.exhausted;
    this.tree = layout.tree;
    this.sourceRows = layout.sourceRows;
    this.sourceAt = layout.sourceAt;
    this.outKeys = layout.outKeys;
    this.outCounts = layout.outCounts;
    const u32 = this.u32;
    u32[P_ORDER / 4] = order;
    u32[P_K / 4] = k;
    u32[P_OUT_CAPACITY / 4] = MERGE_BATCH_RECORDS;
    u32[P_OUT_SIZE / 4] = 0;
    [layout.heads, layout.headCounts, layout.exhausted, layout.tree, layout.sourceKeys, layout.sourceCounts, layout.sourceRows, layout.sourceAt, layout.outKeys, layout.outCounts]
      .forEach((address, i) => { u32[P_ADDRESSES / 4 + i] = address; });
    for (let s = 0; s < k; s++) {
      const keys = layout.windows + s * layout.windowBytes;
      const counts = keys + MERGE_WINDOW_RECORDS * order * 4;
      u32[layout.sourceKeys / 4 + s] = keys;
      u32[layout.sourceCounts / 4 + s] = counts;
      this.windowKeys.push(keys / 4);
      this.windowCounts.push(counts / 8);
    }
    this.batches = new Array<RunBatch | null>(k).fill(null);
    this.windowStart = new Int32Array(k);
    this.exports.init();
  }

  /** Byte addresses of everything in the memory of a merge of k sources of `order`. */
  private static layout(k: number, order: number) {
    const align8 = (n: number): number => Math.ceil(n / 8) * 8;
    const heads = PARAMS_BYTES;
    const headCounts = align8(heads + 4 * k * order);
    const exhausted = headCounts + 8 * k;
    const tree = exhausted + 4 * k;
    const sourceKeys = tree + 4 * k;
    const sourceCounts = sourceKeys + 4 * k;
    const sourceRows = sourceCounts + 4 * k;
    const sourceAt = sourceRows + 4 * k;
    const outKeys = align8(sourceAt + 4 * k);
    const outCounts = align8(outKeys + 4 * MERGE_BATCH_RECORDS * order);
    const windows = outCounts + 8 * MERGE_BATCH_RECORDS;
    const windowBytes = align8(MERGE_WINDOW_RECORDS * (4 * order + 8));
    return { heads, headCounts, exhausted, tree, sourceKeys, sourceCounts, sourceRows, sourceAt, outKeys, outCounts, windows, windowBytes, bytes: windows + k * windowBytes };
  }

  /** A merge state for these sources, or undefined when the WebAssembly one cannot be had. */
  static create(sourceNames: string[], order: number): WasmLoserTree | undefined {
    const k = sourceNames.length;
    if (k < 2) return undefined;
    const bytes = WasmLoserTree.layout(k, order).bytes;
    const module = mergeModule();
    if (bytes > MEMORY_BYTES_MAX || module instanceof Error) return undefined;
    try {
      const pages = Math.ceil(bytes / PAGE_BYTES);
      const memory = new WebAssembly.Memory({ initial: pages, maximum: pages });
      return new WasmLoserTree(sourceNames, order, memory, new WebAssembly.Instance(module, { env: { memory } }));
    } catch {
      return undefined;
    }
  }

  get outSize(): number {
    return this.u32[P_OUT_SIZE / 4];
  }

  setBatch(s: number, batch: RunBatch | null): void {
    this.batches[s] = batch;
    if (batch === null) {
      this.u32[this.exhausted / 4 + s] = 1;
      this.u32.fill(EXHAUSTED_ID, this.heads / 4 + s * this.order, this.heads / 4 + (s + 1) * this.order);
      return;
    }
    this.loadWindow(s, 0);
  }

  nextWindow(s: number): boolean {
    const batch = this.batches[s];
    const next = this.windowStart[s] + MERGE_WINDOW_RECORDS;
    if (batch === null || next >= batch.recordCount) return false;
    this.loadWindow(s, next);
    return true;
  }

  /** Copies rows start.. of source s's block into its window and its first row into its head. */
  private loadWindow(s: number, start: number): void {
    const batch = this.batches[s] as RunBatch;
    const order = this.order;
    const rows = Math.min(MERGE_WINDOW_RECORDS, batch.recordCount - start);
    assert(rows >= 1, `a window of source ${s} from row ${start} of ${batch.recordCount}`);
    this.windowStart[s] = start;
    this.u32.set(batch.keys.subarray(start * order, (start + rows) * order), this.windowKeys[s]);
    this.f64.set(batch.counts.subarray(start, start + rows), this.windowCounts[s]);
    this.u32[this.sourceRows / 4 + s] = rows;
    this.u32[this.sourceAt / 4 + s] = 0;
    this.u32.copyWithin(this.heads / 4 + s * order, this.windowKeys[s], this.windowKeys[s] + order);
    this.f64[this.headCounts / 8 + s] = this.f64[this.windowCounts[s]];
  }

  build(): void {
    const tree = this.tree / 4;
    this.u32[tree] = buildLoserTree(this.sourceNames.length, (a, b) => headBefore(this.u32, this.heads / 4, this.order, a, b), (p, loser) => { this.u32[tree + p] = loser; });
  }

  replay(s: number): void {
    this.exports.replay(s);
  }

  fill(): number {
    const stop = this.exports.fill();
    if (stop >= FILL_OUTPUT_FULL) return stop;
    const detail = this.u32[P_DETAIL / 4];
    if (stop === FILL_ROW_ABOVE_IDS) assert(false, `${this.sourceNames[detail]} holds a row of ids ${EXHAUSTED_ID}, above every word id`);
    if (stop === FILL_OUT_OF_ORDER) assert(false, `merge input out of order: a row of ${this.sourceNames[detail]} is below the last merged row`);
    if (stop === FILL_COUNT_ABOVE_MAX) {
      // The sum the module refused, of the last merged row's count and the winner's (unchanged).
      const sum = this.f64[this.outCounts / 8 + this.outSize - 1] + this.f64[this.headCounts / 8 + this.u32[this.tree / 4]];
      assert(false, `merged count ${sum} exceeds ${RUN_COUNT_MAX}`);
    }
    assert(false, `the WebAssembly merge stopped with ${stop}`);
  }

  /** Hands out the output batch (a copy, trimmed to its size) and starts a new one. */
  takeOutput(): RunBatch {
    const size = this.outSize;
    const batch: RunBatch = {
      keys: this.u32.slice(this.outKeys / 4, this.outKeys / 4 + size * this.order),
      counts: this.f64.slice(this.outCounts / 8, this.outCounts / 8 + size),
      recordCount: size,
    };
    this.u32[P_OUT_SIZE / 4] = 0;
    return batch;
  }
}
