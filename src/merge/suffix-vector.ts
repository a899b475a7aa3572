/**
 * Unigram continuation counts kept while merging bigrams: N1+(• x) for every word x is the number
 * of distinct bigrams (w x), and a partition's raw merge sees each of its distinct bigrams exactly
 * once, in its output stream. So the merge of order 2 adds one per row to a vector indexed by the
 * bigram's last word and stores the vector in the partition's store, in the transaction that
 * records order 2 as merged. The continuation stage then adds the partitions' vectors up for the
 * words of each partition (`unigramContinuationSource`), instead of reading every bigram back from
 * the stores and emitting, spilling and merging runs of suffixes (continuation.ts), which is kept
 * for stores merged without a vector and vocabularies past SUFFIX_VECTOR_IDS_MAX.
 *
 * Stored value (little-endian u32s): a version, the vector's length L, the CRC-32 of the L counts'
 * bytes, then the L counts. A resumed merge of order 2 merges the runs again from their start and
 * skips what was committed, so its stream, and the vector, are whole all the same.
 */
import * as path from 'node:path';
import { crc32 } from 'node:zlib';
import { assert, QuernError } from '../errors.ts';
import { MERGE_BATCH_RECORDS, SUFFIX_VECTOR_IDS_MAX } from '../limits.ts';
import { partitionOfKey } from '../count/hash.ts';
import type { BatchSource } from '../count/run-merge.ts';
import type { RunBatch } from '../count/run-file.ts';
import { metaKey, PartitionStore, partitionStoreDir } from './store.ts';

export const SUFFIX_VECTOR_KEY = metaKey('suffixes:1');
const SUFFIX_VECTOR_VERSION = 1;
const HEADER_WORDS = 3;

/** Records per batch handed to the merge. */
const VECTOR_BATCH_RECORDS = MERGE_BATCH_RECORDS;

/** Counts N1+(• x) of the last words of a stream of distinct bigrams. */
export class SuffixVector {
  private counts: Uint32Array = new Uint32Array(1 << 16);
  private length = 0;
  /** Set when an id past SUFFIX_VECTOR_IDS_MAX came: the vector is then not kept. */
  overflow = false;

  /** Adds the last word of each of `recordCount` bigrams (rows of `keys`). */
  addBigrams(keys: Uint32Array, recordCount: number): void {
    if (this.overflow) return;
    let counts = this.counts;
    for (let r = 0; r < recordCount; r++) {
      const id = keys[2 * r + 1];
      if (id >= counts.length) {
        if (id >= SUFFIX_VECTOR_IDS_MAX) {
          this.overflow = true;
          return;
        }
        counts = this.grow(id + 1);
      }
      counts[id]++;
      if (id >= this.length) this.length = id + 1;
    }
  }

  private grow(length: number): Uint32Array {
    let size = this.counts.length;
    while (size < length) size *= 2;
    const counts = new Uint32Array(Math.min(size, SUFFIX_VECTOR_IDS_MAX));
    counts.set(this.counts);
    this.counts = counts;
    return counts;
  }

  /** The stored value (see the file's comment). */
  encode(): Uint8Array {
    assert(!this.overflow, 'a vector within SUFFIX_VECTOR_IDS_MAX');
    const words = new Uint32Array(HEADER_WORDS + this.length);
    words.set(this.counts.subarray(0, this.length), HEADER_WORDS);
    const payload = new Uint8Array(words.buffer, 4 * HEADER_WORDS);
    words[0] = SUFFIX_VECTOR_VERSION;
    words[1] = this.length;
    words[2] = crc32(payload);
    return new Uint8Array(words.buffer);
  }
}

/** The counts of a stored vector, checked; `storeDir` names the store in errors. */
export function decodeSuffixVector(value: Uint8Array, storeDir: string): Uint32Array {
  const damaged = (reason: string): QuernError => new QuernError('corrupt', `count store ${storeDir}: the unigram continuation vector is damaged (${reason}); re-run the count with --restart`);
  if (value.byteLength < 4 * HEADER_WORDS || value.byteLength % 4 !== 0) throw damaged(`${value.byteLength} bytes`);
  const copy = new Uint32Array(value.byteLength / 4);
  new Uint8Array(copy.buffer).set(value);
  if (copy[0] !== SUFFIX_VECTOR_VERSION) throw damaged(`version ${copy[0]}`);
  if (copy[1] !== copy.length - HEADER_WORDS) throw damaged(`length ${copy[1]} in ${copy.length - HEADER_WORDS} words`);
  const counts = copy.subarray(HEADER_WORDS);
  if (crc32(new Uint8Array(copy.buffer, 4 * HEADER_WORDS)) !== copy[2]) throw damaged('checksum mismatch');
  return counts;
}

/** The unigram continuation counts of one partition's words (those some bigram ends with), in id
 *  order: what a continuation merge task gets for order 1. */
export interface UnigramContinuation {
  ids: Uint32Array;
  counts: Float64Array;
}

/**
 * Adds up every partition's vector (read from the stores, which no worker writes meanwhile) and
 * splits the sums by the words' partitions: element q holds partition q's words. The main thread
 * does this once, before the continuation merge, so that no worker opens another partition's store
 * while that one is written (LMDB environments are shared by the threads of a process).
 * Word ids are below `idMax` (the vocabulary's size + 1).
 */
export async function unigramContinuations(jobDir: string, partitions: number, idMax: number): Promise<UnigramContinuation[]> {
  const total = new Float64Array(idMax);
  for (let p = 0; p < partitions; p++) {
    const store = PartitionStore.open(path.join(jobDir, partitionStoreDir(p)), 'read');
    try {
      const value = store.readMeta(SUFFIX_VECTOR_KEY);
      if (value === undefined) throw new QuernError('corrupt', `count store ${store.dir} holds no unigram continuation vector, but job.json says every partition does; re-run the count with --restart`);
      const counts = decodeSuffixVector(value, store.dir);
      if (counts.length > idMax) throw new QuernError('corrupt', `count store ${store.dir}: the unigram continuation vector holds ${counts.length} ids, the vocabulary ${idMax}; re-run the count with --restart`);
      for (let id = 0; id < counts.length; id++) total[id] += counts[id];
    } finally {
      await store.close();
    }
  }
  const sizes = new Uint32Array(partitions);
  const partitionOf = new Uint32Array(idMax);
  for (let id = 0; id < idMax; id++) {
    if (total[id] === 0) continue;
    partitionOf[id] = partitionOfKey(id, partitions);
    sizes[partitionOf[id]]++;
  }
  const split = Array.from(sizes, (size) => ({ ids: new Uint32Array(size), counts: new Float64Array(size) }));
  const filled = new Uint32Array(partitions);
  for (let id = 0; id < idMax; id++) {
    if (total[id] === 0) continue;
    const q = partitionOf[id];
    split[q].ids[filled[q]] = id;
    split[q].counts[filled[q]++] = total[id];
  }
  return split;
}

/** A merge source of one partition's unigram continuation counts (`unigramContinuations`). */
export function unigramContinuationSource(name: string, words: UnigramContinuation): BatchSource {
  let next = 0;
  const size = words.ids.length;
  return {
    name: `${name} (unigram continuation vectors)`,
    order: 1,
    madeInOrder: true,
    async nextBatch(): Promise<RunBatch | null> {
      if (next === size) return null;
      const end = Math.min(size, next + VECTOR_BATCH_RECORDS);
      const batch = { keys: words.ids.slice(next, end), counts: words.counts.slice(next, end), recordCount: end - next };
      next = end;
      return batch;
    },
    async close(): Promise<void> {
      next = size;
    },
  };
}

/** True when partition `partition`'s store holds a vector (its raw merge kept one). */
export async function hasSuffixVector(jobDir: string, partition: number): Promise<boolean> {
  const store = PartitionStore.open(path.join(jobDir, partitionStoreDir(partition)), 'read');
  try {
    return store.readMeta(SUFFIX_VECTOR_KEY) !== undefined;
  } finally {
    await store.close();
  }
}
