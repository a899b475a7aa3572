/**
 * The counters of one worker, one per order, sharing one memory budget. Before a sentence is
 * counted, `reserve` makes sure every counter has room for all its n-grams, growing its structures
 * while the budget allows; when it does not, the owner spills every counter to run files and clears
 * them (keeping their memory), so the worker never holds more than its budget.
 *
 * What the budget covers (`chargedTotal`): every counter's table, log and seen-filter
 * (`counterBytes`), plus the scratch a spill sorts in — a row and a partition number for each entry
 * the largest counter can hold (`sortScratchBytes`). Only one counter is sorted at a time, so the
 * scratch is charged once, for the largest; it is allocated by the spill (`sortScratch`) and dropped
 * by `clear`. While a structure is resized its old and new arrays live at once; the old one is
 * charged in place of the scratch then (`chargedBytes`), since no spill runs meanwhile.
 */
import { assert } from '../errors.ts';
import { COUNTER_APPEND_DISTINCT_MIN, COUNTER_LOG_ROWS_MIN, COUNTER_PRESIZE_SHRINK_FACTOR, COUNTER_SLOTS_MIN } from '../limits.ts';
import { filterBitsFor, NgramCounter } from './counter.ts';
import { WasmSorter } from './sort-wasm.ts';
import type { WasmEngine } from '../wasm-module.ts';
import { combine32, HASH_SEED, ngramHash } from './hash.ts';

/** The sizes of one counter's structures. */
export interface CounterShape {
  order: number;
  /** Table slots. */
  slots: number;
  /** Log capacity in rows (ignored for order 1). */
  logRows: number;
  /** Seen-filter bits (ignored for order 1). */
  filterBits: number;
  /** Order 1 indexed by id: the id bound (`slots` is ignored then). */
  denseIds?: number;
}

/** Bytes of a counter's table, log and seen-filter. */
export function counterBytes(shape: CounterShape): number {
  if (shape.denseIds !== undefined) return NgramCounter.denseBytes(shape.denseIds);
  const rowBytes = NgramCounter.slotBytes(shape.order);
  const tableBytes = shape.slots * rowBytes;
  return shape.order === 1 ? tableBytes : tableBytes + shape.logRows * rowBytes + shape.filterBits / 8;
}

/** Bytes of the spill sort's scratch for a counter: per entry it can hold, one row and the uint16
 *  partition (spill-sort.ts). */
export function sortScratchBytes(shape: CounterShape): number {
  const rows = shape.denseIds ?? (shape.order === 1 ? NgramCounter.sizeMaxOf(shape.slots) : shape.logRows);
  return rows * (NgramCounter.slotBytes(shape.order) + 2);
}

/**
 * Bytes charged for counters of these shapes: their structures, and the larger of the sort scratch
 * and `transientBytes` — an old array that lives beside its replacement while a structure is resized
 * (no spill runs then, so the two never add up).
 */
export function chargedBytes(shapes: readonly CounterShape[], transientBytes = 0): number {
  let structures = 0;
  let scratch = transientBytes;
  for (const shape of shapes) {
    structures += counterBytes(shape);
    scratch = Math.max(scratch, sortScratchBytes(shape));
  }
  return structures + scratch;
}

/** Slots a table needs to hold `entries` entries without growing: a power of two ≥ COUNTER_SLOTS_MIN. */
export function slotsFor(entries: number): number {
  let slots = COUNTER_SLOTS_MIN;
  while (NgramCounter.sizeMaxOf(slots) < entries && slots < 2 ** 31) slots *= 2;
  return slots;
}

function shapeOf(counter: NgramCounter): CounterShape {
  const shape: CounterShape = { order: counter.order, slots: counter.slots, logRows: counter.logCapacity, filterBits: counter.filterBits };
  if (counter.dense) shape.denseIds = counter.slots;
  return shape;
}

/** What a stretch of input is expected to put in one counter (CounterSet.presize). */
export interface CounterNeed {
  /** Entries: distinct n-grams, plus those with a row in both the log and the table. */
  entries: number;
  /** Entries of the table (order ≥ 2: repeated n-grams; order 1: all). */
  tableEntries: number;
}

/** How a CounterSet runs its counters. */
export interface CounterSetOptions {
  /** Counters of this order and up start append-only (counter.ts), and after each spill every
   *  counter of order ≥ 2 is append-only when that spill found at least
   *  COUNTER_APPEND_DISTINCT_MIN distinct n-grams per occurrence. Without it, none ever is. */
  appendFrom?: number;
  /** Which code sorts the spills' packed keys (sort-wasm.ts); default 'auto'. */
  sortEngine?: WasmEngine;
}

export class CounterSet {
  readonly counters: NgramCounter[];
  private readonly adaptive: boolean;
  private scratch: Uint32Array | undefined;
  /** The WebAssembly sort whose memory holds `scratch`, when it does. */
  private sorter: WasmSorter | undefined;
  private readonly sortEngine: WasmEngine;
  /** addSentences' running hash of each position, from one order to the next. */
  private hashes = new Int32Array(1 << 12);

  /**
   * @param order highest order counted (counters for 1..order)
   * @param bytesMax the budget for all counters together, including growth and spill scratch
   * @param idMax when given, every id is below it, and unigrams are counted in an array indexed
   *   by id (the count pass) if that takes at most a quarter of the budget; otherwise in a hash
   *   table like the other orders
   */
  constructor(order: number, readonly bytesMax: number, idMax?: number, options: CounterSetOptions = {}) {
    const dense = idMax !== undefined && 4 * chargedBytes([{ order: 1, slots: 0, logRows: 0, filterBits: 0, denseIds: idMax }]) <= bytesMax;
    this.counters = [];
    for (let n = 1; n <= order; n++) this.counters.push(new NgramCounter(n, undefined, undefined, undefined, n === 1 && dense ? idMax : undefined));
    this.adaptive = options.appendFrom !== undefined;
    this.sortEngine = options.sortEngine ?? 'auto';
    if (options.appendFrom !== undefined) for (const c of this.counters) if (c.logged && c.order >= options.appendFrom) c.setAppendOnly(true);
    assert(this.chargedTotal() <= bytesMax, `budget ${bytesMax} B below the counters' minimum ${this.chargedTotal()} B`);
  }

  chargedTotal(): number {
    return chargedBytes(this.counters.map(shapeOf));
  }

  /** Entries held now, all orders. */
  get size(): number {
    let size = 0;
    for (const c of this.counters) size += c.size;
    return size;
  }

  /**
   * Makes room for the n-grams of a wrapped sentence of `length` ids, growing counters within the
   * budget. Returns false when the budget does not allow it: the owner must spill and clear.
   */
  reserve(length: number): boolean {
    const needed = length - 1;
    const counters = this.counters;
    for (let n = 0; n < counters.length; n++) {
      const counter = counters[n];
      while (counter.tableFree < needed) {
        const shapes = counters.map(shapeOf);
        shapes[n].slots *= 2;
        if (chargedBytes(shapes, counter.table.byteLength) > this.bytesMax) return false;
        counter.grow(ngramHash);
      }
      while (counter.logFree < needed) {
        const shapes = counters.map(shapeOf);
        const shape = shapes[n];
        shape.logRows = Math.max(2 * shape.logRows, counter.size + needed);
        // The filter keeps its bits per row as the log grows (an append-only counter reads none).
        if (!counter.appendOnly) shape.filterBits = Math.max(shape.filterBits, filterBitsFor(shape.logRows));
        if (chargedBytes(shapes, counter.log.byteLength + shape.filterBits / 8) > this.bytesMax) return false;
        counter.resizeLog(shape.logRows);
        if (shape.filterBits !== counter.filterBits) counter.resizeFilter(shape.filterBits, ngramHash);
      }
    }
    return true;
  }

  /**
   * Sizes the empty counters for a stretch of input expected to need `needs[n−1]` at order n,
   * within the budget: what is too small grows now (once, not by doublings while counting), and what
   * is more than COUNTER_PRESIZE_SHRINK_FACTOR times too large shrinks (clearing and spilling cost
   * time in proportion to the size). A hint only: counting still grows and spills as needed.
   */
  presize(needs: readonly CounterNeed[]): void {
    const counters = this.counters;
    assert(needs.length === counters.length, `presize: ${needs.length} estimates for ${counters.length} orders`);
    assert(this.size === 0, 'presize: the counters must be empty');
    const resized = (current: number, wanted: number): number =>
      wanted > current || current > COUNTER_PRESIZE_SHRINK_FACTOR * wanted ? wanted : current;
    const shapes = counters.map((c, n): CounterShape => {
      const need = needs[n];
      const logRows = resized(c.logCapacity, Math.max(COUNTER_LOG_ROWS_MIN, Math.ceil(need.entries)));
      if (c.dense) return shapeOf(c);
      return {
        order: c.order,
        slots: resized(c.slots, slotsFor(Math.max(0, c.order === 1 ? need.entries : need.tableEntries))),
        logRows,
        filterBits: c.order === 1 ? 0 : resized(c.filterBits, filterBitsFor(c.appendOnly ? 0 : logRows)),
      };
    });
    // Structures are replaced one at a time, those that shrink first: while one is replaced, the
    // others are at most their final size and its old array is the transient.
    const transientBytes = (): number => {
      let bytes = 0;
      counters.forEach((c, n) => {
        const rowBytes = NgramCounter.slotBytes(c.order);
        if (shapes[n].slots !== c.slots) bytes = Math.max(bytes, c.slots * rowBytes);
        if (c.logged && shapes[n].logRows !== c.logCapacity) bytes = Math.max(bytes, c.logCapacity * rowBytes + shapes[n].filterBits / 8);
      });
      return bytes;
    };
    // Over the budget: halve the largest structure until the set fits (the smallest always fits).
    while (chargedBytes(shapes, transientBytes()) > this.bytesMax) {
      let best: { shape: CounterShape; key: 'slots' | 'logRows'; bytes: number } | undefined;
      for (const shape of shapes) {
        const rowBytes = NgramCounter.slotBytes(shape.order);
        if (shape.denseIds === undefined && shape.slots > COUNTER_SLOTS_MIN && (!best || shape.slots * rowBytes > best.bytes)) best = { shape, key: 'slots', bytes: shape.slots * rowBytes };
        if (shape.order > 1 && shape.logRows > COUNTER_LOG_ROWS_MIN && (!best || shape.logRows * rowBytes > best.bytes)) best = { shape, key: 'logRows', bytes: shape.logRows * rowBytes };
      }
      assert(best !== undefined, 'the smallest counters fit the budget');
      best.shape[best.key] = Math.max(best.key === 'slots' ? COUNTER_SLOTS_MIN : COUNTER_LOG_ROWS_MIN, Math.floor(best.shape[best.key] / 2));
      if (best.key === 'logRows') best.shape.filterBits = Math.min(best.shape.filterBits, filterBitsFor(best.shape.logRows));
    }
    this.dropScratch();
    for (const shrinking of [true, false]) {
      for (let n = 0; n < counters.length; n++) {
        const counter = counters[n];
        const shape = shapes[n];
        if (!counter.dense && shape.slots !== counter.slots && shape.slots < counter.slots === shrinking) counter.resize(shape.slots, ngramHash);
        if (!counter.logged) continue;
        if (shape.logRows !== counter.logCapacity && shape.logRows < counter.logCapacity === shrinking) counter.resizeLog(shape.logRows);
        if (shape.filterBits !== counter.filterBits && shape.filterBits < counter.filterBits === shrinking) counter.resizeFilter(shape.filterBits, ngramHash);
      }
    }
  }

  /**
   * Counts every n-gram that ends at a predicted position of the wrapped sentence
   * `ids[start .. start+length)` (ids[start] = `<s>`): positions 1..length−1, orders
   * 1..min(order, position+1). `reserve(length)` must have returned true.
   */
  addSentence(ids: Uint32Array, start: number, length: number): void {
    const counters = this.counters;
    const orderMax = counters.length;
    for (let position = 1; position < length; position++) {
      const i = start + position;
      let h = HASH_SEED;
      const reach = Math.min(orderMax, position + 1);
      for (let n = 1; n <= reach; n++) {
        const first = i - n + 1;
        h = combine32(h, ids[first]);
        if (!counters[n - 1].add(ids, first, h)) assert(false, 'reserve() left room for the sentence');
      }
    }
  }

  /**
   * Counts the n-grams of the wrapped sentences `first .. last−1` of a block: sentence s is
   * `ids[starts[s] .. starts[s+1])`. Like addSentence for each, but order by order over the whole
   * batch rather than position by position, so that one order's filter and table have the caches
   * to themselves (the hash of each position is carried from one order to the next). The caller
   * reserves room for all of it: `reserve(p + 1)`, p = the predicted positions, Σ (length − 1).
   */
  addSentences(ids: Uint32Array, starts: Uint32Array, first: number, last: number): void {
    const counters = this.counters;
    const positions = starts[last] - starts[first] - (last - first);
    if (this.hashes.length < positions) this.hashes = new Int32Array(Math.max(positions, 2 * this.hashes.length));
    const hashes = this.hashes;
    for (let n = 1; n <= counters.length; n++) {
      // An append-only counter reads no hash: the highest order's are then not computed (a lower
      // order's are, for the next order's, which extend them).
      if (n === counters.length && counters[n - 1].appendOnly) {
        counters[n - 1].addBatch(ids, starts, first, last, hashes);
        break;
      }
      // The hashes of the whole batch first, then the counting: with the hashes at hand, the
      // processor can start the next n-gram's memory accesses while a mispredicted branch of the
      // previous one is being resolved (hashing as it went made counting about 3× slower).
      let k = 0;
      for (let s = first; s < last; s++) {
        const start = starts[s];
        const length = starts[s + 1] - start;
        // Positions 1..length−1; order n ends at those ≥ n−1. The others keep their slot in `hashes`.
        if (n > 1) k += Math.min(n - 2, length - 1);
        for (let position = Math.max(1, n - 1); position < length; position++) {
          hashes[k] = combine32(n === 1 ? HASH_SEED : hashes[k], ids[start + position - n + 1]);
          k++;
        }
      }
      counters[n - 1].addBatch(ids, starts, first, last, hashes);
    }
  }

  /**
   * Adds `increment` occurrences of the n-gram `ids[start .. start+order)`, growing its counter within the
   * budget. Returns false, changing nothing, when the budget is reached: the owner must spill.
   */
  addNgram(ids: Uint32Array, start: number, order: number, increment = 1): boolean {
    const counter = this.counters[order - 1];
    const hash = ngramHash(ids, start, order);
    if (counter.add(ids, start, hash, increment)) return true;
    if (!this.reserve(2)) return false;
    const added = counter.add(ids, start, hash, increment);
    assert(added, 'a counter with room accepts an n-gram');
    return true;
  }

  /**
   * Scratch for sorting any one counter's entries at a spill (`spillOrder`): one row per entry.
   * Allocated on first use after a `clear`, within the charge for it: in a WebAssembly memory
   * (`scratchSorter`) unless the engine is 'js' or no such memory can be had.
   */
  sortScratch(): Uint32Array {
    let words = 0;
    for (const c of this.counters) words = Math.max(words, c.size * c.stride);
    if (this.scratch === undefined || this.scratch.length < words) {
      this.dropScratch();
      const sorter = this.sortEngine === 'js' ? undefined : WasmSorter.create(words);
      if (sorter instanceof WasmSorter) this.sorter = sorter;
      this.scratch = this.sorter?.words ?? new Uint32Array(words);
    }
    return this.scratch;
  }

  /** The WebAssembly sort whose memory holds the scratch `sortScratch` returned, if it does. */
  get scratchSorter(): WasmSorter | undefined {
    return this.sorter;
  }

  private dropScratch(): void {
    this.scratch = undefined;
    this.sorter = undefined;
  }

  /** Empties every counter, keeping its memory; drops the spill scratch. An adaptive set then
   *  chooses each counter's mode from what its last spill found. */
  clear(): void {
    this.dropScratch();
    for (const c of this.counters) {
      c.clear();
      if (this.adaptive && c.logged && !Number.isNaN(c.distinctShare)) this.setMode(c, c.distinctShare >= COUNTER_APPEND_DISTINCT_MIN);
    }
  }

  /**
   * Puts an empty counter in a mode, with a filter to match: an append-only counter's shrinks to
   * the least (it reads none, and the memory goes to the log), a filtering one's grows to its bits
   * per log row when the budget allows (else it grows with the log, as in `reserve`).
   */
  private setMode(counter: NgramCounter, append: boolean): void {
    if (counter.appendOnly === append) return;
    counter.setAppendOnly(append);
    const bits = filterBitsFor(append ? 0 : counter.logCapacity);
    if (bits === counter.filterBits) return;
    const shapes = this.counters.map(shapeOf);
    shapes[counter.order - 1].filterBits = bits;
    if (!append && chargedBytes(shapes, counter.filterBits / 8) > this.bytesMax) return;
    counter.resizeFilter(bits, ngramHash);
  }
}
