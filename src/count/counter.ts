/**
 * Open-addressing n-gram counter for one order, in typed arrays: no object or string per n-gram.
 * Keys are `order` word ids per slot (row-major in `keys`), counts in `counts` (0 = empty slot).
 * Linear probing; the owner (CounterSet) doubles the table while its budget allows, and otherwise
 * spills it and clears it for reuse.
 */
import { assert } from '../errors.ts';
import { COUNTER_LOAD_MAX, COUNTER_SLOTS_MIN } from '../limits.ts';

export class NgramCounter {
  readonly order: number;
  keys: Uint32Array;
  counts: Uint32Array;
  size = 0;
  private mask: number;
  private sizeMax: number;

  constructor(order: number, slots: number = COUNTER_SLOTS_MIN) {
    assert(Number.isInteger(order) && order >= 1, `order ${order} must be a positive integer`);
    assert(slots >= 2 && (slots & (slots - 1)) === 0, `slots ${slots} must be a power of two`);
    this.order = order;
    this.keys = new Uint32Array(slots * order);
    this.counts = new Uint32Array(slots);
    this.mask = slots - 1;
    this.sizeMax = Math.floor(slots * COUNTER_LOAD_MAX);
  }

  get slots(): number {
    return this.counts.length;
  }

  /** Bytes held by the table's arrays. */
  get bytes(): number {
    return this.keys.byteLength + this.counts.byteLength;
  }

  /** Bytes one slot costs, for memory planning. */
  static slotBytes(order: number): number {
    return (order + 1) * 4;
  }

  /** Distinct n-grams that can still be added before the load limit. */
  get free(): number {
    return this.sizeMax - this.size;
  }

  /**
   * Adds `increment` (default one) occurrences of `ids[start .. start+order)` whose slot hash is
   * `hash`. Returns false, changing nothing, when the n-gram is new and the table is full.
   */
  add(ids: Uint32Array, start: number, hash: number, increment = 1): boolean {
    const order = this.order;
    const keys = this.keys;
    const counts = this.counts;
    const mask = this.mask;
    let slot = hash & mask;
    for (;;) {
      const count = counts[slot];
      if (count === 0) break;
      const base = slot * order;
      let k = 0;
      while (k < order && keys[base + k] === ids[start + k]) k++;
      if (k === order) {
        assert(count + increment <= 0xffff_ffff, 'counter overflow: spill before 2^32 occurrences');
        counts[slot] = count + increment;
        return true;
      }
      slot = (slot + 1) & mask;
    }
    if (this.size >= this.sizeMax) return false;
    const base = slot * order;
    for (let k = 0; k < order; k++) keys[base + k] = ids[start + k];
    counts[slot] = increment;
    this.size += 1;
    return true;
  }

  /** Doubles the table, re-inserting every entry with `hashOf`. */
  grow(hashOf: (keys: Uint32Array, start: number, order: number) => number): void {
    const oldKeys = this.keys;
    const oldCounts = this.counts;
    const slots = oldCounts.length * 2;
    const order = this.order;
    this.keys = new Uint32Array(slots * order);
    this.counts = new Uint32Array(slots);
    this.mask = slots - 1;
    this.sizeMax = Math.floor(slots * COUNTER_LOAD_MAX);
    const keys = this.keys;
    const counts = this.counts;
    for (let old = 0; old < oldCounts.length; old++) {
      const count = oldCounts[old];
      if (count === 0) continue;
      let slot = hashOf(oldKeys, old * order, order) & this.mask;
      while (counts[slot] !== 0) slot = (slot + 1) & this.mask;
      keys.set(oldKeys.subarray(old * order, old * order + order), slot * order);
      counts[slot] = count;
    }
  }

  /** Empties the table, keeping its memory. */
  clear(): void {
    this.counts.fill(0);
    this.size = 0;
  }
}
