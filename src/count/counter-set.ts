/**
 * The counters of one worker, one per order, sharing one memory budget. Before a sentence is
 * counted, `reserve` makes sure every counter has room for all its n-grams, growing tables while
 * the budget allows; when it does not, the owner spills every counter to run files and clears
 * them (keeping their memory), so the worker never holds more than its budget.
 */
import { assert } from '../errors.ts';
import { COUNTER_LOAD_MAX, SPILL_SORT_BYTES_PER_ENTRY } from '../limits.ts';
import { NgramCounter } from './counter.ts';
import { combine32, HASH_SEED, ngramHash } from './hash.ts';

/** Bytes charged for a counter table of `slots` slots: the arrays plus the spill's sort scratch. */
export function chargedBytes(order: number, slots: number): number {
  return slots * (NgramCounter.slotBytes(order) + SPILL_SORT_BYTES_PER_ENTRY * COUNTER_LOAD_MAX);
}

export class CounterSet {
  readonly counters: NgramCounter[];

  /**
   * @param order highest order counted (counters for 1..order)
   * @param bytesMax the budget for all counters together, including growth and spill scratch
   */
  constructor(order: number, readonly bytesMax: number) {
    this.counters = [];
    for (let n = 1; n <= order; n++) this.counters.push(new NgramCounter(n));
    assert(this.chargedTotal() <= bytesMax, `budget ${bytesMax} B below the counters' minimum ${this.chargedTotal()} B`);
  }

  chargedTotal(): number {
    let total = 0;
    for (const c of this.counters) total += chargedBytes(c.order, c.slots);
    return total;
  }

  /** Distinct n-grams held now, all orders. */
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
    for (const counter of this.counters) {
      while (counter.free < needed) {
        // Growing holds the old and the new table at once: 3× the current charge at the peak.
        const growthBytes = 2 * chargedBytes(counter.order, counter.slots);
        if (this.chargedTotal() + growthBytes > this.bytesMax) return false;
        counter.grow(ngramHash);
      }
    }
    return true;
  }

  /**
   * Counts every n-gram that ends at a predicted position of `ids[0 .. length)` (a wrapped sentence,
   * ids[0] = `<s>`): positions 1..length−1, orders 1..min(order, position+1). `reserve(length)`
   * must have returned true.
   */
  addSentence(ids: Uint32Array, length: number): void {
    const counters = this.counters;
    const orderMax = counters.length;
    for (let i = 1; i < length; i++) {
      let h = HASH_SEED;
      const reach = Math.min(orderMax, i + 1);
      for (let n = 1; n <= reach; n++) {
        const start = i - n + 1;
        h = combine32(h, ids[start]);
        const added = counters[n - 1].add(ids, start, h);
        assert(added, 'reserve() left room for the sentence');
      }
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

  /** Empties every counter, keeping its memory. */
  clear(): void {
    for (const c of this.counters) c.clear();
  }
}
