/**
 * The unigram continuation vectors the raw merge keeps (src/merge/suffix-vector.ts): stored values
 * checked on reading, ids past the limit dropping the vector, and the continuation stage's source
 * adding up every partition's vector for the words of one partition.
 */
import { mkdtempSync } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { describe, expect, test } from 'vitest';
import { partitionOfKey } from '../../src/count/hash.ts';
import { SUFFIX_VECTOR_IDS_MAX } from '../../src/limits.ts';
import { PartitionStore, partitionStoreDir } from '../../src/merge/store.ts';
import { decodeSuffixVector, hasSuffixVector, SUFFIX_VECTOR_KEY, SuffixVector, unigramContinuations, unigramContinuationSource } from '../../src/merge/suffix-vector.ts';
import { seededRandom } from '../support/seeded.ts';

describe('SuffixVector', () => {
  test('counts the last word of each bigram; the stored value decodes to the same counts', () => {
    const vector = new SuffixVector();
    // Ids past the first allocation make it grow.
    vector.addBigrams(Uint32Array.from([1, 5, 1, 70_000, 2, 5, 9, 3]), 4);
    const counts = decodeSuffixVector(vector.encode(), 's');
    expect(counts.length).toBe(70_001);
    expect([counts[3], counts[5], counts[70_000]]).toEqual([1, 2, 1]);
    expect(counts.reduce((a, b) => a + b, 0)).toBe(4);
  });

  test('an id past SUFFIX_VECTOR_IDS_MAX drops the vector (the emit path takes order 1 then)', () => {
    const vector = new SuffixVector();
    vector.addBigrams(Uint32Array.from([1, 2, 1, SUFFIX_VECTOR_IDS_MAX]), 2);
    expect(vector.overflow).toBe(true);
    expect(() => vector.encode()).toThrow(/within SUFFIX_VECTOR_IDS_MAX/);
  });

  test('a damaged value is a corrupt error naming the store', () => {
    const vector = new SuffixVector();
    vector.addBigrams(Uint32Array.from([1, 2, 3, 4]), 2);
    const value = vector.encode();
    const flipped = value.slice();
    flipped[flipped.length - 1] ^= 1;
    expect(() => decodeSuffixVector(flipped, 'p0007')).toThrow(/p0007.*checksum mismatch/);
    expect(() => decodeSuffixVector(value.subarray(0, value.length - 4), 'p')).toThrow(/length/);
    expect(() => decodeSuffixVector(value.subarray(0, 6), 'p')).toThrow(/6 bytes/);
    const version = value.slice();
    version[0] = 9;
    expect(() => decodeSuffixVector(version, 'p')).toThrow(/version 9/);
  });
});

describe('unigramContinuations', () => {
  test('the words of each partition with the sum of every partition\'s counts, in id order', async () => {
    const jobDir = mkdtempSync(path.join(os.tmpdir(), 'quern-suffixes-'));
    const partitions = 3;
    const random = seededRandom(23);
    const expected = new Map<number, number>();
    for (let p = 0; p < partitions; p++) {
      const vector = new SuffixVector();
      const rows: number[] = [];
      // Vectors of different lengths (each ends at its largest id), a shorter one after a longer.
      for (let r = 0; r < 500; r++) rows.push(r, Math.floor(random() * [300, 150, 400][p]));
      vector.addBigrams(Uint32Array.from(rows), 500);
      for (let r = 0; r < 500; r++) expected.set(rows[2 * r + 1], (expected.get(rows[2 * r + 1]) ?? 0) + 1);
      const store = PartitionStore.open(path.join(jobDir, partitionStoreDir(p)), 'write');
      store.commit([], { done: true }, 'raw', [[SUFFIX_VECTOR_KEY, vector.encode()]]);
      await store.close();
      expect(await hasSuffixVector(jobDir, p)).toBe(true);
    }
    const split = await unigramContinuations(jobDir, partitions, 400);
    for (let q = 0; q < partitions; q++) {
      const source = unigramContinuationSource(`p${q}`, split[q]);
      const got: Array<[number, number]> = [];
      for (let batch = await source.nextBatch(); batch !== null; batch = await source.nextBatch()) {
        for (let r = 0; r < batch.recordCount; r++) got.push([batch.keys[r], batch.counts[r]]);
      }
      const want = [...expected].filter(([id]) => partitionOfKey(id, partitions) === q).sort((a, b) => a[0] - b[0]);
      expect(got).toEqual(want);
      expect(got.length).toBeGreaterThan(50);
    }
  });

  test('a partition without a vector is a corrupt error', async () => {
    const jobDir = mkdtempSync(path.join(os.tmpdir(), 'quern-suffixes-'));
    for (let p = 0; p < 2; p++) {
      const store = PartitionStore.open(path.join(jobDir, partitionStoreDir(p)), 'write');
      store.commit([], { done: true }, 'raw', p === 0 ? [[SUFFIX_VECTOR_KEY, new SuffixVector().encode()]] : []);
      await store.close();
    }
    expect(await hasSuffixVector(jobDir, 1)).toBe(false);
    await expect(unigramContinuations(jobDir, 2, 10)).rejects.toThrow(/p0001 holds no unigram continuation vector/);
    // A vector with ids past the vocabulary's.
    const long = new SuffixVector();
    long.addBigrams(Uint32Array.from([1, 30]), 1);
    const other = PartitionStore.open(path.join(jobDir, partitionStoreDir(1)), 'write');
    other.commit([], { done: true }, 'raw', [[SUFFIX_VECTOR_KEY, long.encode()]]);
    await other.close();
    await expect(unigramContinuations(jobDir, 2, 10)).rejects.toThrow(/holds 31 ids, the vocabulary 10/);
  });
});
