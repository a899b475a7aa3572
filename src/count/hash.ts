/**
 * Integer hashing of word-id sequences. Two uses with different needs:
 * - the counters' slot hash, built leftwards one id at a time as the orders grow;
 * - the partition of an n-gram, a hash of its context (all ids but the last; the word itself for
 *   unigrams), so that every n-gram sharing a context lands in the same partition. It is part of
 *   the job's on-disk layout: changing it changes which run file an n-gram goes to.
 */

/** Finaliser of a 32-bit hash (murmur3's fmix32): every input bit affects every output bit. */
export function mix32(h: number): number {
  h ^= h >>> 16;
  h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13;
  h = Math.imul(h, 0xc2b2ae35);
  h ^= h >>> 16;
  return h >>> 0;
}

/** Extends a running hash by one id (order-sensitive). Start from `HASH_SEED`. */
export function combine32(h: number, id: number): number {
  return mix32((Math.imul(h ^ id, 0x9e3779b1) + 0x7f4a7c15) | 0);
}

export const HASH_SEED = 0x3c6ef372;

/**
 * Partition of the n-gram `ids[start .. start+order)`: a hash of its context (the first
 * order−1 ids), or of the word itself for order 1, reduced to `0 .. partitions−1`.
 */
export function partitionOf(ids: ArrayLike<number>, start: number, order: number, partitions: number): number {
  const contextLength = order === 1 ? 1 : order - 1;
  let h = HASH_SEED ^ 0x5bd1e995;
  for (let k = 0; k < contextLength; k++) h = combine32(h, ids[start + k]);
  return h % partitions;
}

/**
 * Slot hash of the n-gram `ids[start .. start+order)`, built from its last id leftwards, so that the
 * hashes of all orders ending at one position come from one pass (see the count worker).
 */
export function ngramHash(ids: ArrayLike<number>, start: number, order: number): number {
  let h = HASH_SEED;
  for (let k = start + order - 1; k >= start; k--) h = combine32(h, ids[k]);
  return h;
}
