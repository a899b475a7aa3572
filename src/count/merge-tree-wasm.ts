/**
 * The k-way merge's loser tree in WebAssembly (run-merge.wasm, compiled from run-merge.as.ts by
 * `npm run build:wasm`): `WasmLoserTree` does what run-merge.ts's `LoserTreeMerger` does, record for
 * record, over a memory of its own into which each source's rows are copied a window of at most
 * MERGE_WINDOW_RECORDS at a time (the copy is a small part of the merge's work; the comparisons and
 * moves are the rest). Where no memory can be had, or the module not loaded, mergeRuns uses
 * `LoserTreeMerger`.
 */
import { assert } from '../errors.ts';
import { instanceWithMemory, wasmModuleAt } from '../wasm-module.ts';
import { MERGE_BATCH_RECORDS, MERGE_WINDOW_RECORDS, RUN_COUNT_MAX } from '../limits.ts';
import { buildLoserTree, EXHAUSTED_ID, FILL_OUTPUT_FULL, headBefore, type Merger } from './loser-tree.ts';
import type { RunBatch } from './run-file.ts';

/** The WebAssembly `fill`'s failed checks (run-merge.as.ts): a source not used up holds a row of
 *  ids EXHAUSTED_ID; a merged count above RUN_COUNT_MAX; a row below the last merged one. */
const FILL_ROW_ABOVE_IDS = -3;
const FILL_COUNT_ABOVE_MAX = -4;
const FILL_OUT_OF_ORDER = -5;
assert(RUN_COUNT_MAX === 2 ** 53 - 1, 'run-merge.as.ts checks sums against 2^53 − 1');

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

const mergeModule = wasmModuleAt(new URL('./run-merge.wasm', import.meta.url));

/** Byte addresses of everything in the memory of a merge of k sources of `order`. */
function mergeLayout(k: number, order: number) {
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

type MergeLayout = ReturnType<typeof mergeLayout>;

export class WasmLoserTree implements Merger {
  private readonly exports: MergeExports;
  private readonly u32: Uint32Array;
  private readonly f64: Float64Array;
  /** Byte addresses in the memory (`layout`). */
  private readonly at: MergeLayout;
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
    const layout = mergeLayout(k, order);
    this.at = layout;
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

  /** A merge state for these sources, or undefined when the WebAssembly one cannot be had. */
  static create(sourceNames: string[], order: number): WasmLoserTree | undefined {
    const k = sourceNames.length;
    if (k < 2) return undefined;
    const made = instanceWithMemory(mergeModule(), mergeLayout(k, order).bytes);
    return made instanceof Error ? undefined : new WasmLoserTree(sourceNames, order, made.memory, made.instance);
  }

  get outSize(): number {
    return this.u32[P_OUT_SIZE / 4];
  }

  setBatch(s: number, batch: RunBatch | null): void {
    this.batches[s] = batch;
    if (batch === null) {
      this.u32[this.at.exhausted / 4 + s] = 1;
      this.u32.fill(EXHAUSTED_ID, this.at.heads / 4 + s * this.order, this.at.heads / 4 + (s + 1) * this.order);
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
    this.u32[this.at.sourceRows / 4 + s] = rows;
    this.u32[this.at.sourceAt / 4 + s] = 0;
    this.u32.copyWithin(this.at.heads / 4 + s * order, this.windowKeys[s], this.windowKeys[s] + order);
    this.f64[this.at.headCounts / 8 + s] = this.f64[this.windowCounts[s]];
  }

  build(): void {
    const tree = this.at.tree / 4;
    this.u32[tree] = buildLoserTree(this.sourceNames.length, (a, b) => headBefore(this.u32, this.at.heads / 4, this.order, a, b), (p, loser) => { this.u32[tree + p] = loser; });
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
      const sum = this.f64[this.at.outCounts / 8 + this.outSize - 1] + this.f64[this.at.headCounts / 8 + this.u32[this.at.tree / 4]];
      assert(false, `merged count ${sum} exceeds ${RUN_COUNT_MAX}`);
    }
    assert(false, `the WebAssembly merge stopped with ${stop}`);
  }

  /** Hands out the output batch (a copy, trimmed to its size) and starts a new one. */
  takeOutput(): RunBatch {
    const size = this.outSize;
    const batch: RunBatch = {
      keys: this.u32.slice(this.at.outKeys / 4, this.at.outKeys / 4 + size * this.order),
      counts: this.f64.slice(this.at.outCounts / 8, this.at.outCounts / 8 + size),
      recordCount: size,
    };
    this.u32[P_OUT_SIZE / 4] = 0;
    return batch;
  }
}
