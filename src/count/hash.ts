/**
 * Integer hashing of word-id sequences. Two uses with different needs:
 * - the counters' slot hash, built leftwards one id at a time as the orders grow;
 * - the partition of an n-gram, a hash of the last word of its context (the word itself for
 *   unigrams). Every n-gram sharing a context lands in the same partition, and so do all its
 *   suffixes of order ≥ 2 (w1…wm, w2…wm, …, w(m−1) wm share w(m−1)): Kneser-Ney continuation counts
 *   and the lower-order probabilities an estimator needs for an n-gram are in its own partition,
 *   so estimation runs partition by partition with only the unigrams shared. It is part of the
 *   job's on-disk layout: changing it changes which run file an n-gram goes to.
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
 * Partition of the n-gram `ids[start .. start+order)`: a hash of the last id of its context
 * (`ids[start+order−2]`), or of the word itself for order 1, reduced to `0 .. partitions−1`.
 */
export function partitionOf(ids: ArrayLike<number>, start: number, order: number, partitions: number): number {
  return partitionOfKey(ids[start + partitionKeyIndex(order)], partitions);
}

/** Where in an n-gram of `order` ids the id its partition depends on lies (partitionOf). */
export function partitionKeyIndex(order: number): number {
  return order === 1 ? 0 : order - 2;
}

/** The partition of an n-gram whose key id (partitionKeyIndex) is `key`. */
export function partitionOfKey(key: number, partitions: number): number {
  return combine32(HASH_SEED ^ 0x5bd1e995, key) % partitions;
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
