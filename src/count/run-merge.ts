/**
 * K-way merge of sorted runs of one order: distinct n-grams in lexicographic order of their id
 * tuples, with the counts of equal n-grams summed across runs.
 *
 * A loser tree over the runs' current rows picks the smallest in ⌈log2 k⌉ comparisons per record.
 * The current row of every run is copied into one shared `heads` array, so every comparison reads
 * one typed array. The hot loop (`LoserTreeMerger.fill`) is synchronous; it returns to the async
 * generator only when the output batch is full or a run needs its next block.
 */
import { assert } from '../errors.ts';
import { MERGE_BATCH_RECORDS, RUN_COUNT_MAX } from '../limits.ts';
import type { RunBatch } from './run-file.ts';
import { buildLoserTree, EXHAUSTED_ID, FILL_DONE, FILL_OUTPUT_FULL, headBefore, type Merger } from './loser-tree.ts';
import { WasmLoserTree } from './merge-tree-wasm.ts';
import type { WasmEngine } from '../wasm-module.ts';

/** Anything that yields sorted batches of one order: a run file, or a partition of the store. */
export interface BatchSource {
  /** For messages: a file or store path. */
  readonly name: string;
  readonly order: number;
  /** Set by a source made in memory whose rows strictly increase by construction (sorted and
   *  made distinct there: the local continuation counts, the unigram vectors) and whose batches are
   *  its own fresh arrays of at most MERGE_BATCH_RECORDS rows: the merge of it alone hands its
   *  batches on as they are, checking only where one batch meets the next. */
  readonly madeInOrder?: boolean;
  /** The next batch in increasing order, or null at the end. */
  nextBatch(): Promise<RunBatch | null>;
  close(): Promise<void>;
}

/** Merge state over k sources; knows nothing of files, only of their current blocks. */
class LoserTreeMerger implements Merger {
  readonly order: number;
  readonly sourceCount: number;
  /** Current row of each source, row-major: source s at heads[s*order ..]. */
  readonly heads: Uint32Array;
  readonly headCounts: Float64Array;
  /** 1 when a source has no rows left: its head is then EXHAUSTED_ID in every word, which sorts
   *  above every row (word ids are below VOCAB_TYPES_MAX), so comparisons need no check for it. */
  readonly exhausted: Uint8Array;
  /** tree[0] is the winner (smallest head); tree[1..k) hold the losers at the internal nodes. */
  readonly tree: Int32Array;
  readonly batches: (RunBatch | null)[];
  readonly rowIndexes: Int32Array;
  outKeys: Uint32Array;
  outCounts: Float64Array;
  outSize = 0;

  /** Names of the sources, for messages. */
  readonly sourceNames: string[];

  constructor(sourceNames: string[], order: number) {
    const sourceCount = sourceNames.length;
    this.order = order;
    this.sourceCount = sourceCount;
    this.sourceNames = sourceNames;
    this.heads = new Uint32Array(Math.max(1, sourceCount) * order);
    this.headCounts = new Float64Array(sourceCount);
    this.exhausted = new Uint8Array(sourceCount);
    this.tree = new Int32Array(Math.max(1, sourceCount));
    this.batches = new Array<RunBatch | null>(sourceCount).fill(null);
    this.rowIndexes = new Int32Array(sourceCount);
    this.outKeys = new Uint32Array(MERGE_BATCH_RECORDS * order);
    this.outCounts = new Float64Array(MERGE_BATCH_RECORDS);
  }

  /** Installs source s's next block (null: the source is used up) and loads its first row. */
  setBatch(s: number, batch: RunBatch | null): void {
    this.batches[s] = batch;
    this.rowIndexes[s] = 0;
    if (batch === null) {
      this.exhausted[s] = 1;
      this.heads.fill(EXHAUSTED_ID, s * this.order, (s + 1) * this.order);
      return;
    }
    this.heads.set(batch.keys.subarray(0, this.order), s * this.order);
    this.headCounts[s] = batch.counts[0];
  }

  nextWindow(): boolean {
    return false;
  }

  /** Builds the tree once every source has its first block (buildLoserTree). */
  build(): void {
    const k = this.sourceCount;
    if (k === 0) return;
    this.tree[0] = buildLoserTree(k, (a, b) => headBefore(this.heads, 0, this.order, a, b), (p, loser) => { this.tree[p] = loser; });
  }

  /** Replays the path from source s's leaf to the root after its head changed (once per merged
   *  record: `less` written out). */
  replay(s: number): void {
    const tree = this.tree;
    const heads = this.heads;
    const order = this.order;
    let winner = s;
    for (let p = (s + this.sourceCount) >> 1; p >= 1; p >>= 1) {
      const contender = tree[p];
      let i = contender * order;
      let j = winner * order;
      const end = i + order;
      while (i < end && heads[i] === heads[j]) {
        i++;
        j++;
      }
      if (i === end ? contender < winner : heads[i] < heads[j]) {
        tree[p] = winner;
        winner = contender;
      }
    }
    tree[0] = winner;
  }

  /**
   * Moves rows to the output until it is full (FILL_OUTPUT_FULL), every source is used up
   * (FILL_DONE), or a source's block is used up: then returns that source's index, and the caller
   * installs its next block with setBatch and calls replay before calling fill again.
   */
  fill(): number {
    const order = this.order;
    const k = this.sourceCount;
    const heads = this.heads;
    const headCounts = this.headCounts;
    const tree = this.tree;
    const batches = this.batches;
    const rowIndexes = this.rowIndexes;
    const outKeys = this.outKeys;
    const outCounts = this.outCounts;
    let outSize = this.outSize;
    for (;;) {
      const w = tree[0];
      if (k === 0 || this.exhausted[w] !== 0) {
        // The winner sorts above every row only when every source is used up.
        for (let s = 0; s < k; s++) if (this.exhausted[s] === 0) assert(false, `${this.sourceNames[s]} holds a row of ids ${EXHAUSTED_ID}, above every word id`);
        this.outSize = outSize;
        return FILL_DONE;
      }
      const h = w * order;
      let c = 1;
      if (outSize > 0) {
        const last = (outSize - 1) * order;
        let j = 0;
        while (j < order && heads[h + j] === outKeys[last + j]) j++;
        c = j === order ? 0 : heads[h + j] < outKeys[last + j] ? -1 : 1;
      }
      if (c === 0) {
        const sum = outCounts[outSize - 1] + headCounts[w];
        // Checked with `if` so the message is built only on failure: this runs once per record.
        if (sum > RUN_COUNT_MAX) assert(false, `merged count ${sum} exceeds ${RUN_COUNT_MAX}`);
        outCounts[outSize - 1] = sum;
      } else {
        if (c < 0) assert(false, `merge input out of order: a row of ${this.sourceNames[w]} is below the last merged row`);
        if (outSize === MERGE_BATCH_RECORDS) {
          this.outSize = outSize;
          return FILL_OUTPUT_FULL;
        }
        const o = outSize * order;
        for (let j = 0; j < order; j++) outKeys[o + j] = heads[h + j];
        outCounts[outSize] = headCounts[w];
        outSize += 1;
      }
      const batch = batches[w] as RunBatch;
      const row = rowIndexes[w] + 1;
      if (row === batch.recordCount) {
        this.outSize = outSize;
        return w;
      }
      rowIndexes[w] = row;
      const keys = batch.keys;
      for (let j = 0, r = row * order; j < order; j++, r++) heads[h + j] = keys[r];
      headCounts[w] = batch.counts[row];
      this.replay(w);
    }
  }

  /** Hands out the output batch (trimmed to its size) and starts a new one. */
  takeOutput(): RunBatch {
    const size = this.outSize;
    const batch: RunBatch =
      size === MERGE_BATCH_RECORDS
        ? { keys: this.outKeys, counts: this.outCounts, recordCount: size }
        : { keys: this.outKeys.slice(0, size * this.order), counts: this.outCounts.slice(0, size), recordCount: size };
    this.outKeys = new Uint32Array(MERGE_BATCH_RECORDS * this.order);
    this.outCounts = new Float64Array(MERGE_BATCH_RECORDS);
    this.outSize = 0;
    return batch;
  }
}

/**
 * Merges `readers` (all of n-gram order `order`) and yields batches of 1..MERGE_BATCH_RECORDS
 * distinct n-grams, strictly increasing within and across batches, with counts summed over all
 * runs (`keys.length === recordCount * order`). The merge owns the readers: it reads each to its
 * end (which closes it) and closes all of them if the consumer stops early or a reader fails
 * ('corrupt' or 'io' QuernError, passed on). Rows out of order across the inputs, or a merged
 * count above RUN_COUNT_MAX, are assertion failures. Two sources or more are merged by the
 * WebAssembly loser tree (`WasmLoserTree`) unless `engine` is 'js' or no WebAssembly memory can be
 * had: the same output, record for record.
 */
export async function* mergeRuns(readers: BatchSource[], order: number, engine: WasmEngine = 'auto'): AsyncGenerator<RunBatch> {
  try {
    for (const reader of readers) {
      assert(reader.order === order, `source ${reader.name} has order ${reader.order}, merge expects ${order}`);
    }
    if (readers.length === 1) {
      yield* passThrough(readers[0], order);
      return;
    }
    const names = readers.map((reader) => reader.name);
    const merger: Merger = (engine === 'auto' ? WasmLoserTree.create(names, order) : undefined) ?? new LoserTreeMerger(names, order);
    const nextBatch = async (s: number): Promise<RunBatch | null> => {
      let batch: RunBatch | null;
      do batch = await readers[s].nextBatch();
      while (batch !== null && batch.recordCount === 0);
      return batch;
    };
    for (let s = 0; s < readers.length; s++) merger.setBatch(s, await nextBatch(s));
    merger.build();
    for (;;) {
      const stop = merger.fill();
      if (stop === FILL_DONE) break;
      if (stop === FILL_OUTPUT_FULL) {
        yield merger.takeOutput();
      } else {
        if (!merger.nextWindow(stop)) merger.setBatch(stop, await nextBatch(stop));
        merger.replay(stop);
      }
    }
    if (merger.outSize > 0) yield merger.takeOutput();
  } finally {
    await Promise.all(readers.map((reader) => reader.close().catch(() => {})));
  }
}

/**
 * The merge of a single source: its rows, checked to increase strictly (every source's rows do: a
 * run file's, a store's, the local continuation counts'; equal rows within one source are out of
 * order), copied out in batches of at most MERGE_BATCH_RECORDS — the loser tree's per-row work
 * without the tree. The continuation counts of orders ≥ 2 come from one source per partition
 * (local-continuation.ts).
 */
async function* passThrough(source: BatchSource, order: number): AsyncGenerator<RunBatch> {
  const last = new Uint32Array(order);
  let rows = 0;
  for (;;) {
    const batch = await source.nextBatch();
    if (batch === null) return;
    const { keys, counts, recordCount } = batch;
    if (recordCount === 0) continue;
    // Each row against the row before it: the previous batch's last row for the first.
    let j = 0;
    if (rows > 0) {
      while (j < order && keys[j] === last[j]) j++;
      if (j === order || keys[j] < last[j]) assert(false, `merge input out of order: a row of ${source.name} is not above the row before it`);
    }
    if (source.madeInOrder === true) {
      assert(recordCount <= MERGE_BATCH_RECORDS && keys.length === recordCount * order, `a batch of ${recordCount} rows from ${source.name}`);
      last.set(keys.subarray((recordCount - 1) * order, recordCount * order));
      rows += recordCount;
      yield batch;
      continue;
    }
    for (let at = order, end = recordCount * order; at < end; at += order) {
      j = 0;
      while (j < order && keys[at + j] === keys[at - order + j]) j++;
      if (j === order || keys[at + j] < keys[at - order + j]) assert(false, `merge input out of order: a row of ${source.name} is not above the row before it`);
    }
    for (let first = 0; first < recordCount; first += MERGE_BATCH_RECORDS) {
      const end = Math.min(recordCount, first + MERGE_BATCH_RECORDS);
      yield { keys: keys.slice(first * order, end * order), counts: counts.slice(first, end), recordCount: end - first };
    }
    last.set(keys.subarray((recordCount - 1) * order, recordCount * order));
    rows += recordCount;
  }
}
