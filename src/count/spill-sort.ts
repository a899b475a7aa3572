/**
 * Orders a counter's entries for a spill: by partition, then lexicographically by word ids.
 * LSD radix sort of a permutation of the occupied slots, RADIX_BITS per pass, using only as many
 * passes as the largest id needs. No comparator calls; memory is two uint32 per entry.
 */
import { assert } from '../errors.ts';
import { partitionOf } from './hash.ts';
import type { NgramCounter } from './counter.ts';

const RADIX_BITS = 11;
const RADIX_BUCKETS = 1 << RADIX_BITS;

export interface SpillOrder {
  /** Slot indices of the counter in output order. */
  slots: Uint32Array;
  /** partitionStarts[p] .. partitionStarts[p+1] is partition p's range within `slots`. */
  partitionStarts: Uint32Array;
}

function countingPass(
  source: Uint32Array,
  target: Uint32Array,
  digits: Uint16Array,
  bucketCount: number,
  histogram: Uint32Array,
): void {
  histogram.fill(0, 0, bucketCount + 1);
  const m = source.length;
  for (let j = 0; j < m; j++) histogram[digits[j] + 1]++;
  for (let b = 0; b < bucketCount; b++) histogram[b + 1] += histogram[b];
  for (let j = 0; j < m; j++) target[histogram[digits[j]]++] = source[j];
}

/** Computes the spill order of `counter` for `partitions` partitions. `idMax` bounds every id. */
export function spillOrder(counter: NgramCounter, partitions: number, idMax: number): SpillOrder {
  const order = counter.order;
  const keys = counter.keys;
  const counts = counter.counts;
  const m = counter.size;
  let perm = new Uint32Array(m);
  let spare = new Uint32Array(m);
  let filled = 0;
  for (let slot = 0; slot < counts.length; slot++) if (counts[slot] !== 0) perm[filled++] = slot;
  assert(filled === m, `counter size ${m} disagrees with occupied slots ${filled}`);

  const digits = new Uint16Array(m);
  const histogram = new Uint32Array(Math.max(RADIX_BUCKETS, partitions) + 1);
  const idBits = Math.max(1, 32 - Math.clz32(idMax));
  for (let position = order - 1; position >= 0; position--) {
    for (let shift = 0; shift < idBits; shift += RADIX_BITS) {
      for (let j = 0; j < m; j++) digits[j] = (keys[perm[j] * order + position] >>> shift) & (RADIX_BUCKETS - 1);
      countingPass(perm, spare, digits, RADIX_BUCKETS, histogram);
      [perm, spare] = [spare, perm];
    }
  }
  for (let j = 0; j < m; j++) digits[j] = partitionOf(keys, perm[j] * order, order, partitions);
  countingPass(perm, spare, digits, partitions, histogram);
  const partitionStarts = new Uint32Array(partitions + 1);
  for (let p = 0; p < partitions; p++) partitionStarts[p + 1] = histogram[p];
  return { slots: spare, partitionStarts };
}
