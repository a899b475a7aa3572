/**
 * Estimation of one partition, the streaming driver's task (run in a worker thread).
 *
 * The count store partitions n-grams of order ≥ 2 by the last word of their context (count/hash.ts),
 * so for an m-gram w1…wm of partition P, every n-gram of its context and its suffixes of order ≥ 2
 * are in P too; only the unigrams are shared (their probabilities come with the task). The task
 * goes through orders 2..N in key order, gathering windows of whole contexts, and applies the
 * method's per-context rule (method-plan.ts, back-off-form.ts) exactly as the in-memory driver does.
 * p(w | h') of a row is looked up in P's own results of order m−1, held as sorted typed arrays (the
 * rows of h' are contiguous there: one binary search for the context, a galloping search per word).
 *
 * Output per order m (docs/estimate-files.md): the kept rows of order m with log10 p(w | h)
 * (`o{m}.prob`), and the back-off weights of the contexts of order m−1 whose n-grams are in P
 * (`o{m−1}.bow`) — rows of other partitions, joined when the model is read (job-model-source.ts).
 *
 * Memory: P's results of orders m−1 and m (rows × (4·order + 8) bytes), and a window of at most
 * ESTIMATE_WINDOW_ROWS + V rows; `partitionNeedBytes` states it from P's row counts.
 */
import * as path from 'node:path';
import { assert, QuernError } from '../errors.ts';
import { writeFileThrough, type StageFs } from '../job/fsio.ts';
import { ESTIMATE_WINDOW_BYTES_PER_ROW, ESTIMATE_WINDOW_ROWS } from '../limits.ts';
import { PartitionStore, partitionStoreDir, StoreSource } from '../merge/store.ts';
import type { MergeProgress } from '../merge/merge-partition.ts';
import { applyContextRule, contextLevel, log10BackOffOf } from './back-off-form.ts';
import { ngramHash } from '../count/hash.ts';
import type { KatzTallies } from './katz.ts';
import { planMethod, type MethodPlan, type OrderCountOfCounts, type PlannedRequest } from './method-plan.ts';
import { ResultWriter, type ResultKind } from './result-file.ts';
import { compareRows } from '../count/block-codec.ts';

/** Where the streaming estimate keeps its results, relative to the job directory. */
export const ESTIMATE_DIR = 'estimate';

/** Path of a result file, relative to the job directory. */
export function resultFilePath(partition: number | 'all', kind: ResultKind, order: number): string {
  const folder = partition === 'all' ? 'all' : `p${String(partition).padStart(4, '0')}`;
  return path.join(ESTIMATE_DIR, folder, `o${order}.${kind === 'probabilities' ? 'prob' : 'bow'}`);
}

/** A result file as job.json records it. */
export interface ResultFileRecord {
  /** Relative to the job directory. */
  file: string;
  kind: ResultKind;
  order: number;
  rows: number;
  bytes: number;
}

/** What every partition task gets (structured-clone safe). */
export interface PartitionEstimateSettings {
  request: PlannedRequest;
  /** Count-of-counts of every order, from stats.json. */
  orders: OrderCountOfCounts[];
  /** V. */
  size: number;
  /** Minimum raw count per order. */
  cutoffs: number[];
  /** p(w) by id 0..V (the order-1 results). */
  unigramProb: Float64Array;
}

export interface PartitionEstimateResult {
  partition: number;
  files: ResultFileRecord[];
  /** Katz only: the special contexts of this partition (summed by the stage). */
  katz: Pick<KatzTallies, 'contextsDiscountedAboveK' | 'contextsWithoutMass'> | null;
}

/** Distinct n-grams per order (index order − 1) of partition `partition`, from its store's progress record. */
export function partitionRowCounts(store: PartitionStore): number[] {
  const progress = store.readProgress<MergeProgress>('raw');
  assert(progress?.done === true, `the merge of ${store.dir} is finished`);
  return progress.tallies.map((t) => t.distinct);
}

/** Bytes of a table of results of one order. */
function tableBytes(order: number, rows: number): number {
  return rows * 4 * Table.strideOf(order);
}

/** Bytes a partition's task holds at most, from its rows per order (module comment). */
export function partitionNeedBytes(rows: number[], size: number): number {
  const orderMax = rows.length;
  let need = 0;
  for (let m = 2; m <= orderMax; m++) {
    const previous = m > 2 ? tableBytes(m - 1, rows[m - 2]) + ContextIndex.bytesFor(rows[m - 2]) : 0;
    const current = m < orderMax ? tableBytes(m, rows[m - 1]) : 0;
    const window = Math.min(rows[m - 1], ESTIMATE_WINDOW_ROWS + size) * (4 * m + ESTIMATE_WINDOW_BYTES_PER_ROW);
    need = Math.max(need, previous + current + window);
  }
  return need;
}

/**
 * Kept rows of one order of the partition with their probabilities (linear), row by row in one
 * buffer — the ids padded to 8 bytes, then the probability — so a lookup touches one cache line.
 */
class Table {
  /** u32 elements per row (even). */
  readonly stride: number;
  readonly ids: Uint32Array;
  private readonly values: Float64Array;
  rows = 0;

  constructor(readonly order: number, readonly capacity: number) {
    this.stride = Table.strideOf(order);
    const buffer = new ArrayBuffer(capacity * this.stride * 4);
    this.ids = new Uint32Array(buffer);
    this.values = new Float64Array(buffer);
  }

  static strideOf(order: number): number {
    return 2 * Math.ceil(order / 2) + 2;
  }

  /** Appends the row src[offset .. offset+order) with probability p. */
  push(src: Uint32Array, offset: number, p: number): void {
    assert(this.rows < this.capacity, 'a partition table holds at most the rows its store records');
    const base = this.rows * this.stride;
    for (let j = 0; j < this.order; j++) this.ids[base + j] = src[offset + j];
    this.values[(base + this.stride - 2) >> 1] = p;
    this.rows++;
  }

  prob(row: number): number {
    return this.values[(row * this.stride + this.stride - 2) >> 1];
  }
}

/** A growable window of rows of one order (whole contexts, plus the start of the next one). */
class Window {
  rows = 0;
  ids: Uint32Array;
  counts: Float64Array;
  continuation: Float64Array;
  constructor(readonly order: number, capacity: number) {
    this.ids = new Uint32Array(capacity * order);
    this.counts = new Float64Array(capacity);
    this.continuation = new Float64Array(capacity);
  }

  reserve(rows: number): void {
    if (rows <= this.counts.length) return;
    const capacity = Math.max(rows, 2 * this.counts.length);
    const ids = new Uint32Array(capacity * this.order);
    ids.set(this.ids.subarray(0, this.rows * this.order));
    const counts = new Float64Array(capacity);
    counts.set(this.counts.subarray(0, this.rows));
    const continuation = new Float64Array(capacity);
    continuation.set(this.continuation.subarray(0, this.rows));
    this.ids = ids;
    this.counts = counts;
    this.continuation = continuation;
  }

  /** Moves rows [from, rows) to the front. */
  keepFrom(from: number): void {
    const order = this.order;
    this.ids.copyWithin(0, from * order, this.rows * order);
    this.counts.copyWithin(0, from, this.rows);
    this.continuation.copyWithin(0, from, this.rows);
    this.rows -= from;
  }

  /** First row of the last context in the window. */
  lastContextStart(): number {
    const order = this.order;
    const ids = this.ids;
    const last = (this.rows - 1) * order;
    let row = this.rows - 1;
    outer: while (row > 0) {
      const base = (row - 1) * order;
      for (let j = 0; j < order - 1; j++) if (ids[base + j] !== ids[last + j]) break outer;
      row--;
    }
    return row;
  }
}

/**
 * Estimates partition `partition` of the job: writes its result files (atomically, each through
 * writeFileThrough) and returns their records. `onRows` hears of the rows done, for progress.
 */
export async function estimatePartition(
  fs: StageFs,
  jobDir: string,
  partition: number,
  settings: PartitionEstimateSettings,
  onRows: (rows: number) => void = () => undefined,
): Promise<PartitionEstimateResult> {
  const orderMax = settings.orders.length;
  const plan = planMethod(settings.request, settings.orders, settings.size);
  const store = PartitionStore.open(path.join(jobDir, partitionStoreDir(partition)), 'read');
  const files: ResultFileRecord[] = [];
  try {
    const partitionRows = partitionRowCounts(store);
    await fs.mkdir(path.dirname(path.join(jobDir, resultFilePath(partition, 'probabilities', 2))));
    let previous: Table | null = null;
    for (let m = 2; m <= orderMax; m++) {
      const highest = m === orderMax;
      const current: Table | null = highest ? null : new Table(m, partitionRows[m - 1]);
      const probFile = resultFilePath(partition, 'probabilities', m);
      const bowFile = resultFilePath(partition, 'back-off', m - 1);
      await writeFileThrough(fs, path.join(jobDir, probFile), async (probOut) => {
        const probWriter = new ResultWriter(probOut, { kind: 'probabilities', order: m, partition });
        await writeFileThrough(fs, path.join(jobDir, bowFile), async (bowOut) => {
          const bowWriter = new ResultWriter(bowOut, { kind: 'back-off', order: m - 1, partition });
          await estimateOrder(store, m, highest, plan, settings, previous, current, probWriter, bowWriter, onRows);
          files.push({ file: bowFile, kind: 'back-off', order: m - 1, ...(await bowWriter.finish()) });
        });
        files.push({ file: probFile, kind: 'probabilities', order: m, ...(await probWriter.finish()) });
      });
      previous = current;
    }
  } finally {
    await store.close();
  }
  const parameters = plan.header.parameters;
  return {
    partition,
    files,
    katz: parameters.method === 'katz' ? { contextsDiscountedAboveK: parameters.contextsDiscountedAboveK, contextsWithoutMass: parameters.contextsWithoutMass } : null,
  };
}

/** Bytes of encoded results a writer may hold before they are written. */
const DRAIN_BYTES = 1 << 20;

/** Order m of the partition: every context through the rule, results to the writers and `current`. */
async function estimateOrder(
  store: PartitionStore,
  m: number,
  highest: boolean,
  plan: MethodPlan,
  settings: PartitionEstimateSettings,
  previous: Table | null,
  current: Table | null,
  probWriter: ResultWriter,
  bowWriter: ResultWriter,
  onRows: (rows: number) => void,
): Promise<void> {
  const normalised = plan.header.normalised;
  const cutoff = settings.cutoffs[m - 1];
  const withContinuation = plan.usesContinuation && !highest;
  const window = new Window(m, ESTIMATE_WINDOW_ROWS);
  let lower = new Float64Array(0);
  let prob = new Float64Array(0);
  const shorterIndex = previous === null ? null : new ContextIndex(previous);

  /** Applies the rule to the window's first `rows` rows (whole contexts). */
  const process = (rows: number): void => {
    const level = contextLevel(m, rows, window.ids, window.counts, withContinuation ? window.continuation : null, cutoff, highest);
    const rule = plan.ruleFor(level);
    if (lower.length < rows) {
      lower = new Float64Array(Math.max(rows, 2 * lower.length));
      prob = new Float64Array(lower.length);
    }
    const ids = level.ids;
    const kept = level.kept;
    const starts = level.contextStarts;
    for (let context = 0; context + 1 < starts.length; context++) {
      const start = starts[context];
      const end = starts[context + 1];
      let keptRows = 0;
      for (let row = start; row < end; row++) keptRows += kept[row];
      if (keptRows === 0) continue; // backs off entirely (back-off-form.ts)
      if (m === 2) {
        for (let row = start; row < end; row++) if (kept[row] === 1) lower[row] = settings.unigramProb[ids[row * 2 + 1]];
      } else {
        // The rows of h' (w2 … w(m−1)) in this partition's results of order m−1, by the index of
        // their contexts; within them the words ascend, as they do in h's rows: a galloping
        // search forward from the last one finds each.
        const shorter = previous as Table;
        const stride = shorter.stride;
        const slot = (shorterIndex as ContextIndex).find(ids, start * m + 1);
        if (slot < 0) throw suffixMissing(store, m, ids, start * m);
        let suffix = shorterIndex!.slots[slot];
        const suffixEnd = shorterIndex!.slots[slot + 1];
        const shorterIds = shorter.ids;
        const last = m - 2;
        for (let row = start; row < end; row++) {
          if (kept[row] === 0) continue;
          const word = ids[row * m + m - 1];
          // Galloping search forward for the word among the context's rows (their last ids ascend).
          if (shorterIds[suffix * stride + last] < word) {
            let low = suffix;
            let step = 1;
            let high = suffix + 1;
            while (high < suffixEnd && shorterIds[high * stride + last] < word) {
              low = high;
              step *= 2;
              high = suffix + step;
            }
            if (high > suffixEnd) high = suffixEnd;
            while (high - low > 1) {
              const middle = (low + high) >>> 1;
              if (shorterIds[middle * stride + last] < word) low = middle;
              else high = middle;
            }
            suffix = high;
          }
          if (!(suffix < suffixEnd && shorterIds[suffix * stride + last] === word)) {
            throw suffixMissing(store, m, ids, row * m);
          }
          lower[row] = shorter.prob(suffix);
        }
      }
      const weight = applyContextRule(level, rule, start, end, lower, prob, normalised);
      bowWriter.add(ids, start * m, log10BackOffOf(weight));
      for (let row = start; row < end; row++) {
        if (kept[row] === 0) continue;
        probWriter.add(ids, row * m, Math.log10(prob[row]));
        if (current !== null) current.push(ids, row * m, prob[row]);
      }
    }
    onRows(rows);
  };

  const drain = async (): Promise<void> => {
    if (probWriter.pendingByteCount >= DRAIN_BYTES) await probWriter.drain();
    if (bowWriter.pendingByteCount >= DRAIN_BYTES) await bowWriter.drain();
  };

  const raw = new StoreSource(store, m, undefined, 'raw');
  const continuation = withContinuation ? new StoreSource(store, m, undefined, 'continuation') : null;
  let contBatch: { keys: Uint32Array; counts: Float64Array; recordCount: number } | null = null;
  let contIndex = 0;
  try {
    if (continuation !== null) contBatch = await continuation.nextBatch();
    for (let batch = await raw.nextBatch(); batch !== null; batch = await raw.nextBatch()) {
      window.reserve(window.rows + batch.recordCount);
      window.ids.set(batch.keys.subarray(0, batch.recordCount * m), window.rows * m);
      window.counts.set(batch.counts.subarray(0, batch.recordCount), window.rows);
      if (continuation !== null) {
        // Continuation counts are stored for the n-grams something precedes: a subset of the rows.
        for (let j = 0; j < batch.recordCount; j++) {
          let value = 0;
          if (contBatch !== null) {
            const c = compareRows(contBatch.keys, contIndex * m, batch.keys, j * m, m);
            if (c < 0) throw corruptContinuation(store, m);
            if (c === 0) {
              value = contBatch.counts[contIndex++];
              if (contIndex === contBatch.recordCount) {
                contBatch = await continuation.nextBatch();
                contIndex = 0;
              }
            }
          }
          window.continuation[window.rows + j] = value;
        }
      }
      window.rows += batch.recordCount;
      if (window.rows >= ESTIMATE_WINDOW_ROWS) {
        const split = window.lastContextStart();
        if (split > 0) {
          process(split);
          window.keepFrom(split);
          await drain();
        }
      }
    }
    if (contBatch !== null) throw corruptContinuation(store, m);
    if (window.rows > 0) process(window.rows);
    await probWriter.drain();
    await bowWriter.drain();
  } finally {
    await raw.close();
    await continuation?.close();
  }
}

/**
 * A kept n-gram whose suffix is not among the partition's kept n-grams of the order below: with
 * cutoffs that do not decrease (checked) this only happens when the store was partitioned another
 * way (a job counted before n-grams were partitioned by their context's last word) or is damaged.
 */
function suffixMissing(store: PartitionStore, order: number, ids: Uint32Array, offset: number): QuernError {
  const ngram = Array.from(ids.subarray(offset, offset + order)).join(' ');
  return new QuernError('corrupt', `count store ${store.dir}: the suffix of the n-gram [${ngram}] (word ids) is not in the same partition; the job was counted with another partitioning or its store is damaged: count it again with quern count --restart`);
}

function corruptContinuation(store: PartitionStore, order: number): QuernError {
  return new QuernError('corrupt', `count store ${store.dir}: a continuation count of order ${order} has no raw count; re-run quern count with --restart`);
}

/**
 * The contexts of a table of results (runs of rows sharing their first order−1 ids), found by
 * those ids: an open-addressing hash table whose slots hold each context's [first row, end) side
 * by side, so a lookup touches the slot's cache line and the first row's.
 */
export class ContextIndex {
  /** Slot s: slots[s] = first row (−1: empty), slots[s + 1] = end row; s even. */
  readonly slots: Int32Array;
  private readonly mask: number;
  private readonly length: number;

  constructor(private readonly table: Table) {
    const stride = table.stride;
    const length = table.order - 1;
    this.length = length;
    const ids = table.ids;
    const differs = (row: number): boolean => row === 0 || compareRows(ids, (row - 1) * stride, ids, row * stride, length) !== 0;
    let contexts = 0;
    for (let row = 0; row < table.rows; row++) if (differs(row)) contexts++;
    let slotCount = 16;
    while (slotCount < 2 * contexts) slotCount *= 2;
    this.slots = new Int32Array(2 * slotCount).fill(-1);
    this.mask = slotCount - 1;
    let open = -1;
    for (let row = 0; row <= table.rows; row++) {
      if (row < table.rows && !differs(row)) continue;
      if (open >= 0) this.slots[open + 1] = row;
      if (row === table.rows) break;
      let slot = ngramHash(ids, row * stride, length) & this.mask;
      while (this.slots[2 * slot] !== -1) slot = (slot + 1) & this.mask;
      this.slots[2 * slot] = row;
      open = 2 * slot;
    }
  }

  /** Bytes of an index over `rows` rows (at most one context per row, ≤ 4 slots of 8 bytes each). */
  static bytesFor(rows: number): number {
    return rows * 32 + 128;
  }

  /** The slot (even index into `slots`) of the context whose ids are key[keyStart .. keyStart+order−1), or −1. */
  find(key: Uint32Array, keyStart: number): number {
    const { ids, stride } = this.table;
    const length = this.length;
    const slots = this.slots;
    let slot = ngramHash(key, keyStart, length) & this.mask;
    for (;;) {
      const first = slots[2 * slot];
      if (first === -1) return -1;
      if (compareRows(ids, first * stride, key, keyStart, length) === 0) return 2 * slot;
      slot = (slot + 1) & this.mask;
    }
  }
}
