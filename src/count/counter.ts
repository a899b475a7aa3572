/**
 * N-gram counter for one order, in typed arrays: no object or string per n-gram.
 *
 * Most n-grams of orders 2 and up occur once in a chunk, and a hash table of millions of them is
 * far larger than the caches: inserting each new one would cost a miss (and, in a virtual machine,
 * a page walk) at a random place. So a counter of order ≥ 2 keeps three structures:
 *  - the log: the first occurrence of each n-gram, appended in order (rows of `stride` words:
 *    the count, then the `order` ids);
 *  - the seen-filter: one bit per hash value (a Bloom filter with one hash function); an n-gram
 *    whose bit is clear has certainly not been seen, so it goes to the log and sets its bit;
 *  - the table: an open-addressing hash table (linear probing, rows like the log's, count 0 = empty
 *    slot) for the n-grams whose bit was already set — repeats, and the few new ones whose bit
 *    another n-gram set. It stays small enough for the caches.
 * An n-gram can thus have one row in the log and one in the table; the spill sort (spill-sort.ts)
 * brings equal rows together and adds their counts, so every run holds each n-gram once. The
 * filter only decides where a row goes; counts are exact whatever its false-positive rate.
 *
 * A counter of order 1 (a vocabulary's worth of unigrams, which fits the caches) is the table alone;
 * when the ids are known to be below a bound (`denseIds`, the count pass) it is simpler still: an
 * array of counts indexed by id, with no hashing or probing at all.
 *
 * A counter of order ≥ 2 may instead be append-only (`appendOnly`): every occurrence goes to the log,
 * with no filter read and no table, and the spill sort adds up the equal rows. Where nearly every
 * n-gram of a chunk is new — order 3 and up in text: 75 % of the trigrams of a 32 MiB chunk of the
 * benchmark corpus, 95 % of the 5-grams — the filter's random read per n-gram buys almost nothing,
 * and sorting the few extra rows costs less than it. Its owner sets the mode while the counter is
 * empty, from the share of distinct n-grams its last spill found (CounterSet).
 *
 * Invariant: the log has room for every entry, its own and the table's (`logCapacity ≥ size`), so
 * the spill can gather all rows in the log's array before sorting. The owner (CounterSet) sizes and
 * grows the structures within its budget, and otherwise spills and clears the counter.
 */
import { assert } from '../errors.ts';
import { COUNTER_FILTER_BITS_PER_ENTRY, COUNTER_LOAD_MAX, COUNTER_LOG_ROWS_MIN, COUNTER_SLOTS_MIN } from '../limits.ts';

/** Hash of the n-gram `keys[start .. start+order)` as the counters place it (`ngramHash`). */
export type NgramHasher = (keys: Uint32Array, start: number, order: number) => number;

/** Bits of a seen-filter for a log of `rows` rows: a power of two, at least 2^15. */
export function filterBitsFor(rows: number): number {
  let bits = 1 << 15;
  while (bits < COUNTER_FILTER_BITS_PER_ENTRY * rows && bits < 2 ** 31) bits *= 2;
  return bits;
}

export class NgramCounter {
  readonly order: number;
  /** Words per row, in the table and in the log: the count, then the ids. */
  readonly stride: number;
  /** Whether this counter keeps a log and a seen-filter (orders ≥ 2). */
  readonly logged: boolean;
  /** Whether this is an order-1 counter indexed by id: `table[id]` is the count of id. */
  readonly dense: boolean;
  /** The hash table: slots × stride words (dense: one count per id). */
  table: Uint32Array;
  /** slots − 1: the slot of hash h is h & mask. */
  mask: number;
  /** Entries in the table. */
  tableSize = 0;
  private tableSizeMax: number;
  /** The log: logCapacity × stride words, rows 0 .. logCount − 1 in use. Empty when not logged. */
  log: Uint32Array;
  logCount = 0;
  /** Where addBatch's warming read leaves its result, so that the read is not optimised away. */
  warmSink = 0;
  /** Every n-gram goes to the log, as a row of its own (orders ≥ 2; set only while empty). */
  private append = false;
  /** Entries added (calls, or batch positions) since the counter was last cleared. */
  added = 0;
  /** Distinct n-grams per entry added, as the last spill found them (its owner's to set); NaN
   *  before the first. */
  distinctShare = NaN;
  /** The seen-filter: bit h >>> filterShift. Empty when not logged. */
  private filter: Uint32Array;
  private filterShift: number;

  /**
   * @param slots table slots (a power of two)
   * @param logRows log capacity in rows (orders ≥ 2)
   * @param filterBits seen-filter bits (a power of two ≥ 32; orders ≥ 2)
   * @param denseIds order 1 only: every id is below this bound; counts go in an array indexed by id
   */
  constructor(
    order: number, slots: number = COUNTER_SLOTS_MIN, logRows: number = COUNTER_LOG_ROWS_MIN, filterBits: number = filterBitsFor(logRows),
    denseIds?: number,
  ) {
    assert(Number.isInteger(order) && order >= 1, `order ${order} must be a positive integer`);
    assert(slots >= 2 && (slots & (slots - 1)) === 0, `slots ${slots} must be a power of two`);
    assert(denseIds === undefined || (order === 1 && Number.isInteger(denseIds) && denseIds >= 1), `denseIds ${denseIds}: a positive bound, for order 1 only`);
    this.order = order;
    this.stride = order + 1;
    this.logged = order >= 2;
    this.dense = denseIds !== undefined;
    if (this.dense) {
      this.table = new Uint32Array(denseIds!);
      this.mask = denseIds! - 1;
      this.tableSizeMax = denseIds!;
    } else {
      this.table = new Uint32Array(slots * this.stride);
      this.mask = slots - 1;
      this.tableSizeMax = NgramCounter.sizeMaxOf(slots);
    }
    if (this.logged) {
      assert(Number.isInteger(logRows) && logRows >= 1, `logRows ${logRows} must be a positive integer`);
      assert(filterBits >= 32 && (filterBits & (filterBits - 1)) === 0, `filterBits ${filterBits} must be a power of two ≥ 32`);
      this.log = new Uint32Array(logRows * this.stride);
      this.filter = new Uint32Array(filterBits / 32);
      this.filterShift = 32 - Math.log2(filterBits);
    } else {
      this.log = new Uint32Array(0);
      this.filter = new Uint32Array(0);
      this.filterShift = 0;
    }
  }

  /** Whether every n-gram goes to the log as a row of its own (see the file's comment). */
  get appendOnly(): boolean {
    return this.append;
  }

  /** Sets the mode; the counter must be empty (its rows would otherwise mix the two). */
  setAppendOnly(append: boolean): void {
    assert(this.size === 0, 'the mode of an empty counter only');
    assert(!append || this.logged, 'an order-1 counter has no log to append to');
    this.append = append;
  }

  /** Table slots (dense: the id bound). */
  get slots(): number {
    return this.mask + 1;
  }

  /** Log capacity in rows (0 when not logged). */
  get logCapacity(): number {
    return this.log.length / this.stride;
  }

  /** Seen-filter bits (0 when not logged). */
  get filterBits(): number {
    return this.filter.length * 32;
  }

  /** Entries held: log rows and table entries (an n-gram may have one of each). */
  get size(): number {
    return this.logCount + this.tableSize;
  }

  /** Bytes held by the table, the log and the filter. */
  get bytes(): number {
    return this.table.byteLength + this.log.byteLength + this.filter.byteLength;
  }

  /** Bytes a dense counter for ids below `denseIds` holds. */
  static denseBytes(denseIds: number): number {
    return denseIds * 4;
  }

  /** Bytes one table slot or log row costs, for memory planning. */
  static slotBytes(order: number): number {
    return (order + 1) * 4;
  }

  /** Entries a table of `slots` slots holds at most (the load limit). */
  static sizeMaxOf(slots: number): number {
    return Math.floor(slots * COUNTER_LOAD_MAX);
  }

  /** Table entries that can still be added before the load limit (a dense or append-only counter
   *  never fills its table). */
  get tableFree(): number {
    return this.dense || this.append ? Infinity : this.tableSizeMax - this.tableSize;
  }

  /** Log rows that can still be added without breaking the invariant (logCapacity ≥ size). */
  get logFree(): number {
    return this.logged ? this.logCapacity - this.size : Infinity;
  }

  /** New entries that can certainly be added now, wherever they go. */
  get free(): number {
    return Math.min(this.tableFree, this.logFree);
  }

  /** The count in table slot `slot` (0: empty; dense: the count of id `slot`). */
  countAt(slot: number): number {
    return this.dense ? this.table[slot] : this.table[slot * this.stride];
  }

  /** The ids of the n-gram in table slot `slot` (a copy). */
  idsAt(slot: number): number[] {
    if (this.dense) return [slot];
    const base = slot * this.stride + 1;
    return Array.from(this.table.subarray(base, base + this.order));
  }

  /** Every entry as [ids joined by ',', count], log rows and table slots (tests, diagnostics). */
  *entries(): Generator<[string, number]> {
    for (let row = 0; row < this.logCount; row++) {
      const base = row * this.stride;
      yield [Array.from(this.log.subarray(base + 1, base + this.stride)).join(','), this.log[base]];
    }
    for (let slot = 0; slot < this.slots; slot++) if (this.countAt(slot) !== 0) yield [this.idsAt(slot).join(','), this.countAt(slot)];
  }

  /**
   * Adds `increment` (default one) occurrences of `ids[start .. start+order)` whose hash is
   * `hash`. Returns false, changing nothing, when there is no room for a new entry.
   */
  add(ids: Uint32Array, start: number, hash: number, increment = 1): boolean {
    const added = this.addOne(ids, start, hash, increment);
    if (added) this.added++;
    return added;
  }

  private addOne(ids: Uint32Array, start: number, hash: number, increment: number): boolean {
    if (this.append) {
      if (this.logCount + this.tableSize >= this.logCapacity) return false;
      const base = this.logCount++ * this.stride;
      this.log[base] = increment;
      for (let k = 0; k < this.order; k++) this.log[base + 1 + k] = ids[start + k];
      return true;
    }
    if (this.dense) {
      const id = ids[start];
      if (id >= this.table.length) assert(false, `id ${id} below the dense bound ${this.table.length}`);
      const count = this.table[id];
      assert(count + increment <= 0xffff_ffff, 'counter overflow: spill before 2^32 occurrences');
      if (count === 0) this.tableSize++;
      this.table[id] = count + increment;
      return true;
    }
    if (this.logged) {
      const bit = hash >>> this.filterShift;
      const word = bit >>> 5;
      const mask = 1 << (bit & 31);
      const bits = this.filter[word];
      if ((bits & mask) === 0) {
        if (this.logCount + this.tableSize >= this.logCapacity) return false;
        this.filter[word] = bits | mask;
        const log = this.log;
        const base = this.logCount++ * this.stride;
        log[base] = increment;
        for (let k = 0; k < this.order; k++) log[base + 1 + k] = ids[start + k];
        return true;
      }
      // A table entry takes log room too (the invariant).
      if (this.logCount + this.tableSize >= this.logCapacity && !this.inTable(ids, start, hash)) return false;
    }
    return this.addToTable(ids, start, hash, increment);
  }

  /**
   * Adds one occurrence of every n-gram of this order in the wrapped sentences `first .. last−1`
   * (sentence s is `ids[starts[s] .. starts[s+1])`, as CounterSet.addSentences takes them), in
   * position order; `hashes` holds their hashes in that order, with a slot left unused for each
   * position below order − 1 (CounterSet.addSentences lays them out). Like `add` for each, with
   * the log's and the filter's fields held in locals over the batch. There must be room for them
   * all (CounterSet.reserve): running out is an assertion failure.
   */
  addBatch(ids: Uint32Array, starts: Uint32Array, first: number, last: number, hashes: Int32Array): void {
    const order = this.order;
    if (!this.logged) {
      let k = 0;
      for (let s = first; s < last; s++) {
        const start = starts[s];
        const length = starts[s + 1] - start;
        for (let position = 1; position < length; position++) {
          if (!this.add(ids, start + position, hashes[k++])) assert(false, 'reserve() left room for the batch');
        }
      }
      return;
    }
    const filter = this.filter;
    const filterShift = this.filterShift;
    const log = this.log;
    const stride = this.stride;
    const logCapacity = log.length / stride;
    let logCount = this.logCount;
    const logCountBefore = logCount;
    if (this.append) {
      for (let s = first; s < last; s++) {
        const start = starts[s];
        const length = starts[s + 1] - start;
        if (logCount + this.tableSize + length - order + 1 > logCapacity) assert(false, 'reserve() left room for the batch');
        for (let position = order - 1; position < length; position++) {
          const at = start + position - order + 1;
          const base = logCount++ * stride;
          log[base] = 1;
          for (let j = 0; j < order; j++) log[base + 1 + j] = ids[at + j];
        }
      }
      this.logCount = logCount;
      this.added += logCount - logCountBefore;
      return;
    }
    // First a branch-free read of every filter word the batch tests (and of a few unused slots'),
    // so that their cache misses overlap instead of waiting one by one behind mispredicted branches.
    const positions = starts[last] - starts[first] - (last - first);
    let warm = 0;
    for (let i = 0; i < positions; i++) warm ^= filter[(hashes[i] >>> filterShift) >>> 5];
    this.warmSink = warm;
    let k = 0;
    let toTable = 0;
    for (let s = first; s < last; s++) {
      const start = starts[s];
      const length = starts[s + 1] - start;
      k += Math.min(order - 2, length - 1);
      for (let position = order - 1; position < length; position++) {
        const at = start + position - order + 1;
        const hash = hashes[k++];
        const bit = hash >>> filterShift;
        const word = bit >>> 5;
        const mask = 1 << (bit & 31);
        const bits = filter[word];
        if ((bits & mask) === 0) {
          if (logCount + this.tableSize >= logCapacity) assert(false, 'reserve() left room for the batch');
          filter[word] = bits | mask;
          const base = logCount++ * stride;
          log[base] = 1;
          for (let j = 0; j < order; j++) log[base + 1 + j] = ids[at + j];
          continue;
        }
        // A table entry takes log room too (the invariant).
        if (logCount + this.tableSize >= logCapacity && !this.inTable(ids, at, hash)) assert(false, 'reserve() left room for the batch');
        if (!this.addToTable(ids, at, hash, 1)) assert(false, 'reserve() left room for the batch');
        toTable++;
      }
    }
    this.logCount = logCount;
    this.added += logCount - logCountBefore + toTable;
  }

  private addToTable(ids: Uint32Array, start: number, hash: number, increment: number): boolean {
    const order = this.order;
    const stride = this.stride;
    const table = this.table;
    let base = (hash & this.mask) * stride;
    for (;;) {
      const count = table[base];
      if (count === 0) break;
      let k = 0;
      while (k < order && table[base + 1 + k] === ids[start + k]) k++;
      if (k === order) {
        assert(count + increment <= 0xffff_ffff, 'counter overflow: spill before 2^32 occurrences');
        table[base] = count + increment;
        return true;
      }
      base += stride;
      if (base === table.length) base = 0;
    }
    if (this.tableSize >= this.tableSizeMax) return false;
    table[base] = increment;
    for (let k = 0; k < order; k++) table[base + 1 + k] = ids[start + k];
    this.tableSize += 1;
    return true;
  }

  private inTable(ids: Uint32Array, start: number, hash: number): boolean {
    const order = this.order;
    const stride = this.stride;
    const table = this.table;
    for (let base = (hash & this.mask) * stride; table[base] !== 0;) {
      let k = 0;
      while (k < order && table[base + 1 + k] === ids[start + k]) k++;
      if (k === order) return true;
      base += stride;
      if (base === table.length) base = 0;
    }
    return false;
  }

  /** Doubles the table, re-inserting every entry with `hashOf`. */
  grow(hashOf: NgramHasher): void {
    this.resize(2 * this.slots, hashOf);
  }

  /**
   * Moves the table's entries into a new table of `slots` slots (a power of two with room for
   * them all), re-inserting each with `hashOf`.
   */
  resize(slots: number, hashOf: NgramHasher): void {
    assert(!this.dense, 'a dense counter has no hash table to resize');
    assert(slots >= 2 && (slots & (slots - 1)) === 0, `slots ${slots} must be a power of two`);
    assert(NgramCounter.sizeMaxOf(slots) >= this.tableSize, `${slots} slots cannot hold ${this.tableSize} entries`);
    const old = this.table;
    const stride = this.stride;
    const order = this.order;
    this.table = new Uint32Array(slots * stride);
    this.mask = slots - 1;
    this.tableSizeMax = NgramCounter.sizeMaxOf(slots);
    if (this.tableSize === 0) return;
    const table = this.table;
    const mask = this.mask;
    for (let from = 0; from < old.length; from += stride) {
      if (old[from] === 0) continue;
      let to = (hashOf(old, from + 1, order) & mask) * stride;
      while (table[to] !== 0) {
        to += stride;
        if (to === table.length) to = 0;
      }
      for (let w = 0; w < stride; w++) table[to + w] = old[from + w];
    }
  }

  /** Gives the log room for `rows` rows (at least its entries), keeping its rows. */
  resizeLog(rows: number): void {
    assert(this.logged, 'an order-1 counter has no log');
    assert(Number.isInteger(rows) && rows >= this.size && rows >= 1, `a log of ${rows} rows cannot hold ${this.size} entries`);
    const log = new Uint32Array(rows * this.stride);
    log.set(this.log.subarray(0, this.logCount * this.stride));
    this.log = log;
  }

  /** Replaces the seen-filter by one of `bits` bits holding the log's n-grams (hashed with `hashOf`). */
  resizeFilter(bits: number, hashOf: NgramHasher): void {
    assert(this.logged, 'an order-1 counter has no seen-filter');
    assert(bits >= 32 && (bits & (bits - 1)) === 0, `filter bits ${bits} must be a power of two ≥ 32`);
    this.filter = new Uint32Array(bits / 32);
    this.filterShift = 32 - Math.log2(bits);
    const filter = this.filter;
    for (let row = 0; row < this.logCount; row++) {
      const bit = hashOf(this.log, row * this.stride + 1, this.order) >>> this.filterShift;
      filter[bit >>> 5] |= 1 << (bit & 31);
    }
    // The table's n-grams too, so that their next occurrences still find them there.
    for (let base = 0; base < this.table.length; base += this.stride) {
      if (this.table[base] === 0) continue;
      const bit = hashOf(this.table, base + 1, this.order) >>> this.filterShift;
      filter[bit >>> 5] |= 1 << (bit & 31);
    }
  }

  /** Empties the counter, keeping its memory. */
  clear(): void {
    if (this.tableSize > 0) this.table.fill(0);
    this.tableSize = 0;
    this.logCount = 0;
    this.added = 0;
    this.filter.fill(0);
  }
}
