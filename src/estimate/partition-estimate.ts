/**
 * Estimation of one partition, the streaming driver's task (run in a worker thread).
 *
 * The count store partitions n-grams of order ≥ 2 by the last word of their context (count/hash.ts),
 * so for an m-gram w1…wm of partition P, every n-gram of its context and its suffixes of order ≥ 2
 * are in P too; only the unigrams are shared (their probabilities come with the task). The task
 * goes through orders 2..N in key order, gathering windows of whole contexts, and applies the
 * method's per-context rule (method-plan.ts, back-off-form.ts) exactly as the in-memory driver does.
 * p(w | h') of a row is looked up in P's own results of order m−1, held in a hash table of 64-bit
 * fingerprints of their ids and their probabilities (ProbabilityTable, exact: a fingerprint met
 * twice restarts the task under another seed): one lookup per row by its suffix, a window's lookups
 * in batches so that their cache misses overlap.
 *
 * Files: each order's two result files are written while the order is estimated (writes run ahead
 * of the estimate, result-file.ts); their fsync and rename go on while the next order is estimated,
 * and the task ends once every file is durable.
 *
 * Output per order m (docs/estimate-files.md): the kept rows of order m with log10 p(w | h)
 * (`o{m}.prob`), and the back-off weights of the contexts of order m−1 whose n-grams are in P
 * (`o{m−1}.bow`) — rows of other partitions, joined when the model is read (job-model-source.ts).
 *
 * Memory: P's results of orders m−1 and m (2 slots of 16 bytes per row of the order), each in a
 * buffer of the largest such table's size that the thread keeps for the next order and partition,
 * and a window of at most ESTIMATE_WINDOW_ROWS + V rows; `partitionNeedBytes` states it from P's
 * row counts.
 */
import * as path from 'node:path';
import { assert, QuernError } from '../errors.ts';
import { writeFileThrough, type StageFs, type WritableFile } from '../job/fsio.ts';
import { ESTIMATE_WINDOW_BYTES_PER_ROW, ESTIMATE_WINDOW_ROWS } from '../limits.ts';
import { PartitionStore, partitionStoreDir, StoreSource } from '../merge/store.ts';
import type { MergeProgress } from '../merge/merge-partition.ts';
import { applyContextRule, BackOffLog10Memo, contextLevel, type LevelScratch } from './back-off-form.ts';
import { mix32 } from '../count/hash.ts';
import { BOS_ID } from '../corpus/vocabulary.ts';
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

/** Bytes of each of a partition's table buffers: the slots of its largest table (orders 2..N−1). */
function tableBufferBytes(rows: number[]): number {
  let bytes = 0;
  for (let m = 2; m < rows.length; m++) bytes = Math.max(bytes, ProbabilityTable.slotBytesFor(rows[m - 1]));
  return bytes;
}

/** Bytes a partition's task holds at most, from its rows per order (module comment). */
export function partitionNeedBytes(rows: number[], size: number): number {
  const orderMax = rows.length;
  // Tables of orders m−1 and m at once (one when N = 3, none when N = 2), each in a buffer of the largest's size.
  const tables = Math.max(0, Math.min(2, orderMax - 2));
  let window = 0;
  for (let m = 2; m <= orderMax; m++) window = Math.max(window, Math.min(rows[m - 1], ESTIMATE_WINDOW_ROWS + size) * (4 * m + ESTIMATE_WINDOW_BYTES_PER_ROW));
  return tables * (tableBufferBytes(rows) + ProbabilityTable.scratchBytesFor()) + window;
}

/**
 * Table buffers this thread keeps between the orders and the partitions it estimates (at most the
 * two a partition uses at once), so that a table is written into memory that is mapped already:
 * fresh memory costs the kernel a page fault and a page of zeros per 4 KiB. The stage runs the
 * largest partitions first, so later ones fit in the buffers of the first.
 */
const spareTableBuffers: ArrayBuffer[] = [];

function takeTableBuffer(bytes: number): ArrayBuffer {
  const index = spareTableBuffers.findIndex((buffer) => buffer.byteLength >= bytes);
  if (index >= 0) return spareTableBuffers.splice(index, 1)[0];
  spareTableBuffers.length = 0; // too small for this partition: let them go before a larger one is allocated
  return new ArrayBuffer(bytes);
}

function giveTableBuffer(buffer: ArrayBuffer): void {
  if (spareTableBuffers.length < 2) spareTableBuffers.push(buffer);
}

/**
 * A ProbabilityTable's hash of the row ids[offset .. offset+order), which places the row:
 * the ids multiplied in one after another, then murmur3's finaliser — one multiplication per id,
 * where the counters' ngramHash (count/hash.ts) mixes after every id to be extendable leftwards,
 * which a table never needs.
 */
function tableHash(ids: Uint32Array, offset: number, order: number): number {
  let h = 0x3c6ef372;
  for (let j = 0; j < order; j++) h = Math.imul(h ^ ids[offset + j], 0x9e3779b1);
  return mix32(h);
}

/**
 * The second half of a row's fingerprint: a hash of the same ids with other multipliers, started
 * from `seed`, so that two rows whose fingerprints agree under one seed almost surely differ under
 * the next (a ProbabilityTable that meets such a pair is built again with another seed).
 */
function fingerprintHash(ids: Uint32Array, offset: number, order: number, seed: number): number {
  let h = Math.imul(0x27d4eb2f ^ seed, 0x165667b1);
  for (let j = 0; j < order; j++) h = Math.imul(h ^ ids[offset + j], 0x85ebca77) ^ (h >>> 15);
  return mix32(h);
}

/** Two rows of one table with the same fingerprint under the table's seed (module comment). */
export class FingerprintCollision extends Error {
  constructor(readonly order: number, readonly seed: number) {
    super(`two n-grams of order ${order} share a 64-bit table fingerprint under seed ${seed}`);
  }
}

/**
 * Tests only: tables of order ≥ narrowedFromOrder under seeds below narrowedSeeds keep 4 bits of
 * the placing hash and none of the second, so that their rows collide
 * (test/estimate/table-fingerprint.test.ts); no table otherwise.
 */
let narrowedSeeds = 0;
let narrowedFromOrder = 2;

/** Tests only: makes this thread's tables of order ≥ fromOrder under seeds 0 .. seeds − 1 collide. */
export function narrowFingerprintsForTests(seeds: number, fromOrder = 2): void {
  narrowedSeeds = seeds;
  narrowedFromOrder = fromOrder;
}

/** Seeds a partition's task tries before it gives up (each try meets a collision with a chance of
 *  about rows² / 2^65, some 10^-6 for the largest tables of the benchmark job). */
const FINGERPRINT_SEEDS = 4;

/** Rows a ProbabilityTable inserts, or looks up, together. */
const TABLE_BATCH_ROWS = 1024;

/** Slots of a ProbabilityTable per row it may hold: at most half of the slots are used. */
const TABLE_SLOTS_PER_ROW = 2;

/** Bytes of a ProbabilityTable slot: the two 32-bit halves of a fingerprint, a float64. */
const TABLE_SLOT_BYTES = 16;

/**
 * Kept rows of one order of the partition with their probabilities (linear), found by their ids:
 * an open-addressing hash table (linear probing) of 16-byte slots, four to a cache line. A slot
 * holds a 64-bit fingerprint of the row's ids instead of the ids — the hash that placed it
 * (`tableHash`) and a second one (`fingerprintHash`) — and its probability. An empty slot holds NaN
 * as its probability (a probability never is: applyContextRule checks them).
 *
 * Exact, not probabilistic: every row the table holds has a fingerprint of its own, because an
 * insert compares the fingerprints of the slots it passes, and a row with the same fingerprint has
 * the same home slot, so it lies on that path (linear probing, no deletions). An insert that meets
 * one throws FingerprintCollision and the partition is estimated again with another seed. A lookup
 * for a row the table holds therefore finds that row; one for a row it does not hold (a damaged or
 * differently partitioned store) is reported as missing unless its fingerprint equals a held row's.
 *
 * A window's kept rows are inserted straight from the window (`insertKept`), and a window's lookups
 * made (`suffixProbabilities`), a batch of TABLE_BATCH_ROWS rows at a time in three passes: the
 * fingerprints and home slots of the batch (arithmetic); a read of each home slot that only brings
 * it into the cache (a loop without branches on what it reads, so the processor has many of these
 * misses under way at once); then the probes proper, whose branches on the slots' contents now cost
 * a cache hit when mispredicted instead of a wait for memory.
 */
class ProbabilityTable {
  private readonly slotCount: number;
  /** Slot s: fingerprint halves at [4s], [4s + 1]. */
  private readonly keys: Int32Array;
  /** Slot s: probability at [2s + 1]. */
  private readonly values: Float64Array;
  /** Rows inserted. */
  rows = 0;
  /** slotCount / 2^32: a hash times this, rounded down, is its home slot (exact: a power of two divides). */
  private readonly homeScale: number;
  /** Scratch of a batch: home slots and fingerprints. */
  private readonly homes = new Int32Array(TABLE_BATCH_ROWS);
  private readonly firsts = new Int32Array(TABLE_BATCH_ROWS);
  private readonly seconds = new Int32Array(TABLE_BATCH_ROWS);
  /** What the cache-warming passes read (kept, so that the compiler cannot drop them). */
  private sink = 0;

  /**
   * A table of `order` for `capacity` rows in `buffer` (at least `slotBytesFor(capacity)` bytes;
   * whatever it held before is overwritten), fingerprints under `seed`.
   */
  constructor(readonly order: number, readonly capacity: number, readonly buffer: ArrayBuffer, readonly seed: number) {
    assert(order >= 2, 'a probability table holds n-grams of order 2 or more');
    this.slotCount = ProbabilityTable.slotsFor(capacity);
    this.homeScale = this.slotCount / 4294967296;
    assert(buffer.byteLength >= this.slotCount * TABLE_SLOT_BYTES, 'a table buffer holds every slot of the table');
    this.keys = new Int32Array(buffer, 0, this.slotCount * 4);
    this.values = new Float64Array(buffer, 0, this.slotCount * 2);
    // Every slot empty: NaN in every 8 bytes, fingerprints included (a native fill); an empty
    // slot's fingerprint is never taken as found.
    this.values.fill(NaN);
  }

  private static slotsFor(capacity: number): number {
    return Math.max(16, Math.ceil(capacity * TABLE_SLOTS_PER_ROW));
  }

  /** Bytes of the slots of a table for `rows` rows at most (of any order). */
  static slotBytesFor(rows: number): number {
    return ProbabilityTable.slotsFor(rows) * TABLE_SLOT_BYTES;
  }

  /** Bytes of a table's scratch arrays (its batch's home slots and fingerprints, beside its buffer). */
  static scratchBytesFor(): number {
    return TABLE_BATCH_ROWS * 4 * 3;
  }

  /**
   * The first two passes over a batch (class comment) for the kept rows in [from, to) of `src`,
   * whose row `row` is src[row·rowLength + offset ..][0 .. order): their fingerprints and home
   * slots into the scratch arrays, then a read of each home slot that only brings it into the cache.
   */
  private locateBatch(src: Uint32Array, rowLength: number, offset: number, from: number, to: number, kept: Uint8Array): void {
    const { order, keys, homes, firsts, seconds, homeScale, seed } = this;
    const narrowed = seed < narrowedSeeds && order >= narrowedFromOrder;
    const firstMask = narrowed ? 0xf : -1;
    const secondMask = narrowed ? 0 : -1;
    for (let row = from; row < to; row++) {
      const i = row - from;
      if (kept[row] === 0) {
        homes[i] = 0;
        continue;
      }
      const at = row * rowLength + offset;
      const first = (tableHash(src, at, order) & firstMask) >>> 0;
      homes[i] = Math.floor(first * homeScale);
      firsts[i] = first;
      seconds[i] = fingerprintHash(src, at, order, seed) & secondMask;
    }
    let sink = 0;
    for (let i = 0; i < to - from; i++) sink |= keys[homes[i] << 2];
    this.sink |= sink;
  }

  /**
   * Inserts the kept rows (kept[row] = 1) among rows [0, rows) of `src` (rows of this table's order,
   * as a window holds them) with their probabilities `values[row]`, a batch at a time (class
   * comment). Rows are distinct; a row whose fingerprint another row has already throws
   * FingerprintCollision.
   */
  insertKept(src: Uint32Array, rows: number, kept: Uint8Array, values: Float64Array): void {
    const { keys, values: slotValues, homes, firsts, seconds, slotCount } = this;
    let keptRows = 0;
    for (let row = 0; row < rows; row++) keptRows += kept[row];
    assert(this.rows + keptRows <= this.capacity, 'a partition table holds at most the rows its store records');
    for (let from = 0; from < rows; from += TABLE_BATCH_ROWS) {
      const to = Math.min(rows, from + TABLE_BATCH_ROWS);
      this.locateBatch(src, this.order, 0, from, to, kept);
      for (let row = from; row < to; row++) {
        if (kept[row] === 0) continue;
        const i = row - from;
        const first = firsts[i];
        const second = seconds[i];
        let slot = homes[i];
        for (;;) {
          const value = slotValues[(slot << 1) + 1];
          if (value !== value) break; // NaN: free
          if (keys[slot << 2] === first && keys[(slot << 2) + 1] === second) throw new FingerprintCollision(this.order, this.seed);
          slot = slot + 1 === slotCount ? 0 : slot + 1;
        }
        keys[slot << 2] = first;
        keys[(slot << 2) + 1] = second;
        slotValues[(slot << 1) + 1] = values[row];
      }
    }
    this.rows += keptRows;
  }

  /**
   * lower[row] = the probability of the suffix w2 … wm of each kept row w1 … wm of `ids` (rows of
   * order m = this table's order + 1); throws `suffixMissing` for a kept row whose suffix is not in
   * the table.
   */
  suffixProbabilities(ids: Uint32Array, m: number, rows: number, kept: Uint8Array, lower: Float64Array, store: PartitionStore): void {
    assert(this.order === m - 1, 'the suffixes of order m are the inserted rows of order m − 1');
    const { keys, values, homes, firsts, seconds, slotCount } = this;
    for (let from = 0; from < rows; from += TABLE_BATCH_ROWS) {
      const to = Math.min(rows, from + TABLE_BATCH_ROWS);
      this.locateBatch(ids, m, 1, from, to, kept);
      for (let row = from; row < to; row++) {
        if (kept[row] === 0) continue;
        const i = row - from;
        const first = firsts[i];
        const second = seconds[i];
        let slot = homes[i];
        for (;;) {
          const value = values[(slot << 1) + 1];
          if (keys[slot << 2] === first && keys[(slot << 2) + 1] === second && value === value) {
            lower[row] = value;
            break;
          }
          if (value !== value) throw suffixMissing(store, m, ids, row * m);
          slot = slot + 1 === slotCount ? 0 : slot + 1;
        }
      }
    }
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
  for (let seed = 0; ; seed++) {
    let rowsReported = 0;
    try {
      return await estimatePartitionOnce(fs, jobDir, partition, settings, seed, (rows) => {
        rowsReported += rows;
        onRows(rows);
      });
    } catch (error) {
      // Two rows with one fingerprint (ProbabilityTable): the files written so far are written
      // again, under the next seed. Progress counted for this try is taken back.
      if (!(error instanceof FingerprintCollision) || seed + 1 >= FINGERPRINT_SEEDS) throw error;
      onRows(-rowsReported);
    }
  }
}

async function estimatePartitionOnce(
  fs: StageFs,
  jobDir: string,
  partition: number,
  settings: PartitionEstimateSettings,
  seed: number,
  onRows: (rows: number) => void,
): Promise<PartitionEstimateResult> {
  const orderMax = settings.orders.length;
  const plan = planMethod(settings.request, settings.orders, settings.size);
  const store = PartitionStore.open(path.join(jobDir, partitionStoreDir(partition)), 'read');
  const files: ResultFileRecord[] = [];
  /** Files written whose fsync and rename are under way while the next order is estimated. */
  const syncing: Array<Promise<void>> = [];
  try {
    const partitionRows = partitionRowCounts(store);
    await fs.mkdir(path.dirname(path.join(jobDir, resultFilePath(partition, 'probabilities', 2))));
    const bufferBytes = tableBufferBytes(partitionRows);
    let previous: ProbabilityTable | null = null;
    for (let m = 2; m <= orderMax; m++) {
      const highest = m === orderMax;
      const current: ProbabilityTable | null = highest ? null : new ProbabilityTable(m, partitionRows[m - 1], takeTableBuffer(bufferBytes), seed);
      const probFile = resultFilePath(partition, 'probabilities', m);
      const bowFile = resultFilePath(partition, 'back-off', m - 1);
      const prob = await openThrough(fs, path.join(jobDir, probFile));
      syncing.push(prob.done);
      let bow: ThroughFile;
      try {
        bow = await openThrough(fs, path.join(jobDir, bowFile));
      } catch (error) {
        prob.end(error);
        throw error;
      }
      syncing.push(bow.done);
      try {
        const probWriter = new ResultWriter(prob.file, { kind: 'probabilities', order: m, partition });
        const bowWriter = new ResultWriter(bow.file, { kind: 'back-off', order: m - 1, partition });
        await estimateOrder(store, m, highest, plan, settings, previous, current, probWriter, bowWriter, partitionRows[m - 1], onRows);
        files.push({ file: bowFile, kind: 'back-off', order: m - 1, ...(await bowWriter.finish()) });
        files.push({ file: probFile, kind: 'probabilities', order: m, ...(await probWriter.finish()) });
      } catch (error) {
        bow.end(error);
        prob.end(error);
        throw error;
      }
      bow.end();
      prob.end();
      if (previous !== null) giveTableBuffer(previous.buffer);
      previous = current;
    }
    if (previous !== null) giveTableBuffer(previous.buffer);
    await Promise.all(syncing);
  } finally {
    await Promise.allSettled(syncing);
    await store.close();
  }
  const parameters = plan.header.parameters;
  return {
    partition,
    files,
    katz: parameters.method === 'katz' ? { contextsDiscountedAboveK: parameters.contextsDiscountedAboveK, contextsWithoutMass: parameters.contextsWithoutMass } : null,
  };
}

/**
 * A file written through writeFileThrough (temporary name, fsync, rename) whose end the caller
 * decides: `end()` once everything is written lets the fsync and rename go on in the background,
 * `end(error)` removes the temporary file instead; `done` settles when either has happened (and
 * rejects with what failed).
 */
interface ThroughFile {
  file: WritableFile;
  end(failure?: unknown): void;
  done: Promise<void>;
}

/** Creates `filePath`'s temporary file and returns it as a ThroughFile. */
function openThrough(fs: StageFs, filePath: string): Promise<ThroughFile> {
  return new Promise<ThroughFile>((resolveOpened, rejectOpened) => {
    let end: (failure?: unknown) => void = () => undefined;
    const ended = new Promise<void>((resolve, reject) => {
      end = (failure) => (failure === undefined ? resolve() : reject(failure));
    });
    let done: Promise<void> | undefined;
    done = writeFileThrough(fs, filePath, (file) => {
      resolveOpened({ file, end, done: done as Promise<void> });
      return ended;
    });
    done.catch(rejectOpened); // fails the open when creating the file fails; handled later otherwise
  });
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
  previous: ProbabilityTable | null,
  current: ProbabilityTable | null,
  probWriter: ResultWriter,
  bowWriter: ResultWriter,
  expectedRows: number,
  onRows: (rows: number) => void,
): Promise<void> {
  const normalised = plan.header.normalised;
  const cutoff = settings.cutoffs[m - 1];
  const withContinuation = plan.usesContinuation && !highest;
  const window = new Window(m, ESTIMATE_WINDOW_ROWS);
  let lower = new Float64Array(0);
  let prob = new Float64Array(0);
  const backOffLog10 = new BackOffLog10Memo();
  let scratch: LevelScratch = { kept: new Uint8Array(0), starts: new Uint32Array(1), counts: new Float64Array(0) };

  /** Applies the rule to the window's first `rows` rows (whole contexts). */
  const process = (rows: number): void => {
    if (scratch.kept.length < rows) {
      const capacity = Math.max(rows, 2 * scratch.kept.length);
      scratch = { kept: new Uint8Array(capacity), starts: new Uint32Array(capacity + 1), counts: new Float64Array(capacity) };
    }
    const level = contextLevel(m, rows, window.ids, window.counts, withContinuation ? window.continuation : null, cutoff, highest, scratch);
    const rule = plan.ruleFor(level);
    if (lower.length < rows) {
      lower = new Float64Array(Math.max(rows, 2 * lower.length));
      prob = new Float64Array(lower.length);
    }
    const ids = level.ids;
    const kept = level.kept;
    const starts = level.contextStarts;
    // p(w | h') of every kept row: at order 2 the unigram of w; above, the probability of the
    // suffix h' w, a row of this partition's results of order m−1 (found by its ids).
    if (m === 2) {
      const unigramProb = settings.unigramProb;
      for (let row = 0; row < rows; row++) if (kept[row] === 1) lower[row] = unigramProb[ids[row * 2 + 1]];
    } else {
      (previous as ProbabilityTable).suffixProbabilities(ids, m, rows, kept, lower, store);
    }
    for (let context = 0; context + 1 < starts.length; context++) {
      const start = starts[context];
      const end = starts[context + 1];
      let keptRows = 0;
      for (let row = start; row < end; row++) keptRows += kept[row];
      if (keptRows === 0) continue; // backs off entirely (back-off-form.ts)
      const weight = applyContextRule(level, rule, start, end, lower, prob, normalised);
      bowWriter.add(ids, start * m, backOffLog10.log10(weight));
      for (let row = start; row < end; row++) {
        if (kept[row] === 0) continue;
        probWriter.add(ids, row * m, Math.log10(prob[row]));
      }
    }
    if (current !== null) current.insertKept(ids, rows, kept, prob);
    onRows(rows);
  };

  const drain = async (): Promise<void> => {
    if (probWriter.pendingByteCount >= DRAIN_BYTES) await probWriter.drain();
    if (bowWriter.pendingByteCount >= DRAIN_BYTES) await bowWriter.drain();
  };

  /** Appends a batch's rows to the window with their raw and continuation counts (null: none, so 0
   *  where the level uses them); processes the window's whole contexts once it holds
   *  ESTIMATE_WINDOW_ROWS rows. */
  const append = async (keys: Uint32Array, counts: Float64Array, continuationCounts: Float64Array | null, rows: number): Promise<void> => {
    window.reserve(window.rows + rows);
    window.ids.set(keys.subarray(0, rows * m), window.rows * m);
    window.counts.set(counts.subarray(0, rows), window.rows);
    if (continuationCounts !== null) window.continuation.set(continuationCounts.subarray(0, rows), window.rows);
    else if (withContinuation) window.continuation.fill(0, window.rows, window.rows + rows); // the level reads them
    window.rows += rows;
    if (window.rows >= ESTIMATE_WINDOW_ROWS) {
      const split = window.lastContextStart();
      if (split > 0) {
        process(split);
        window.keepFrom(split);
        await drain();
      }
    }
  };

  if (withContinuation && cutoff <= 1) await readContinuationOnly(store, m, expectedRows, append);
  else await readRawWithContinuation(store, m, withContinuation, append);
  if (window.rows > 0) process(window.rows);
  await probWriter.drain();
  await bowWriter.drain();
}

/** Takes a batch of rows: ids, raw counts, continuation counts (null: none stored, 0), row count. */
type AppendRows = (keys: Uint32Array, counts: Float64Array, continuation: Float64Array | null, rows: number) => Promise<void>;

/**
 * Order m's rows in key order from the raw counts, with their continuation counts joined when
 * `withContinuation` (stored for the n-grams something precedes: a subset of the rows, 0 for the
 * others). Both sources decode into reused arrays: a raw batch is copied into the window at once,
 * and a continuation batch (its own source, so its own arrays) is held only while it is walked.
 */
async function readRawWithContinuation(store: PartitionStore, m: number, withContinuation: boolean, append: AppendRows): Promise<void> {
  const raw = new StoreSource(store, m, undefined, 'raw', true);
  const continuation = withContinuation ? new StoreSource(store, m, undefined, 'continuation', true) : null;
  let contBatch: { keys: Uint32Array; counts: Float64Array; recordCount: number } | null = null;
  let contIndex = 0;
  let joined = new Float64Array(0);
  try {
    if (continuation !== null) contBatch = await continuation.nextBatch();
    for (let batch = await raw.nextBatch(); batch !== null; batch = await raw.nextBatch()) {
      if (continuation !== null) {
        if (joined.length < batch.recordCount) joined = new Float64Array(batch.recordCount);
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
          joined[j] = value;
        }
      }
      await append(batch.keys, batch.counts, continuation === null ? null : joined, batch.recordCount);
    }
    if (contBatch !== null) throw corruptContinuation(store, m);
  } finally {
    await raw.close();
    await continuation?.close();
  }
}

/**
 * Order m's rows in key order for a method that reads, below the highest order, raw counts only for
 * the n-grams that begin with `<s>` and continuation counts for the rest (Kneser-Ney:
 * kneserNeyCounts), when no cutoff applies at this order: the rows that begin with `<s>` (the first
 * ones, BOS_ID being 0) from the raw counts, then every other row from the continuation counts —
 * nothing precedes an n-gram that begins with `<s>`, and something precedes every other one, so
 * together they are all the rows, each read once. An n-gram's raw count stands in for the others'
 * (it is ≥ 1, as the continuation count is, so no row is cut: `cutoff` ≤ 1). The rows are checked
 * against the number the store's merge recorded, `expectedRows`.
 */
async function readContinuationOnly(store: PartitionStore, m: number, expectedRows: number, append: AppendRows): Promise<void> {
  const bos = new StoreSource(store, m, Uint32Array.of(BOS_ID), 'raw', true);
  const continuation = new StoreSource(store, m, undefined, 'continuation', true);
  let rows = 0;
  try {
    for (let batch = await bos.nextBatch(); batch !== null; batch = await bos.nextBatch()) {
      await append(batch.keys, batch.counts, null, batch.recordCount);
      rows += batch.recordCount;
    }
    let first = true;
    for (let batch = await continuation.nextBatch(); batch !== null; batch = await continuation.nextBatch()) {
      if (first && batch.recordCount > 0 && batch.keys[0] === BOS_ID) throw corruptContinuation(store, m);
      first = false;
      await append(batch.keys, batch.counts, batch.counts, batch.recordCount);
      rows += batch.recordCount;
    }
  } finally {
    await bos.close();
    await continuation.close();
  }
  if (rows !== expectedRows) {
    throw new QuernError('corrupt', `count store ${store.dir}: order ${m} holds ${rows} n-grams that begin with <s> or have a continuation count, but its merge recorded ${expectedRows}; re-run quern count with --restart`);
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
