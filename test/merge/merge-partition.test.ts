/**
 * Resuming a partition's merge in the middle of an order: the merge is stopped after each of many
 * small transactions in turn, resumed, and must end with the same store and tallies as one
 * uninterrupted merge.
 */
import { existsSync, mkdtempSync, readdirSync } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { describe, expect, test } from 'vitest';
import { writeRunFile } from '../../src/count/run-file.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { MERGE_SCRATCH_DIR, mergePartition, type PartitionMergeTask } from '../../src/merge/merge-partition.ts';
import { PartitionStore, StoreSource } from '../../src/merge/store.ts';
import { mergeRuns } from '../../src/count/run-merge.ts';
import { STORE_BLOCK_RECORDS } from '../../src/limits.ts';
import { decodeSuffixVector, SUFFIX_VECTOR_KEY } from '../../src/merge/suffix-vector.ts';
import { seededRandom } from '../support/seeded.ts';

/** Writes `runs` sorted runs of order 2 with overlapping random n-grams; returns the task. */
async function writeRuns(dir: string, runs: number, rows: number): Promise<PartitionMergeTask> {
  const random = seededRandom(17);
  const files: string[][] = [[], []];
  for (let r = 0; r < runs; r++) {
    const set = new Map<string, [number, number]>();
    while (set.size < rows) {
      const a = Math.floor(random() ** 2 * 300);
      const b = Math.floor(random() * 400);
      set.set(`${a},${b}`, [a, b]);
    }
    const sorted = [...set.values()].sort((x, y) => x[0] - y[0] || x[1] - y[1]);
    const keys = Uint32Array.from(sorted.flat());
    const counts = Float64Array.from(sorted, () => 1 + Math.floor(random() * 5));
    const file = `o2-r${r}.run`;
    await writeRunFile(nodeFs, path.join(dir, file), { order: 2, partition: 0, chunk: r, spill: 0 }, keys, counts, sorted.length);
    files[1].push(file);
  }
  return { partition: 0, files };
}

async function contents(dir: string, name: string): Promise<string> {
  const store = PartitionStore.open(path.join(dir, name), 'read');
  const rows: string[] = [];
  for await (const batch of mergeRuns([new StoreSource(store, 2)], 2)) {
    for (let j = 0; j < batch.recordCount; j++) rows.push(`${batch.keys[2 * j]} ${batch.keys[2 * j + 1]} ${batch.counts[j]}`);
  }
  await store.close();
  return rows.join('\n');
}

describe('mergePartition', () => {
  test('stopped after every transaction in turn, then resumed, it gives the uninterrupted store', async () => {
    const dir = mkdtempSync(path.join(os.tmpdir(), 'quern-merge-'));
    const task = await writeRuns(dir, 4, 6000);
    const reference = mkdtempSync(path.join(os.tmpdir(), 'quern-merge-ref-'));
    for (const file of task.files[1]) await nodeFs.rename(path.join(dir, file), path.join(reference, file));
    const expectedTallies = await mergePartition(reference, 'store', task, 'raw', { txnBlocks: 1 });
    const expected = await contents(reference, 'store');
    expect(expected.split('\n').length).toBeGreaterThan(4 * STORE_BLOCK_RECORDS);

    // Stop after commit k (k = 1, 2, …), resume each time, until a run finishes.
    let stops = 0;
    for (let k = 1; ; k++) {
      let commits = 0;
      try {
        const tallies = await mergePartition(reference, 'resumed', task, 'raw', {
          txnBlocks: 1,
          afterCommit: () => { if (++commits === k) throw new Error('stop'); },
        });
        expect(tallies).toEqual(expectedTallies);
        break;
      } catch (error) {
        expect((error as Error).message).toBe('stop');
        stops++;
      }
    }
    expect(stops).toBeGreaterThan(4);
    expect(await contents(reference, 'resumed')).toBe(expected);

    // The unigram continuation vector (suffix-vector.ts) of the merge that finished after being
    // resumed mid-order is whole: N1+(• x) = distinct bigrams ending with x, from the rows stored.
    const distinctBefore = new Uint32Array(400);
    for (const row of expected.split('\n')) distinctBefore[Number(row.split(' ')[1])]++;
    for (const name of ['store', 'resumed']) {
      const store = PartitionStore.open(path.join(reference, name), 'read');
      const value = store.readMeta(SUFFIX_VECTOR_KEY);
      await store.close();
      const vector = decodeSuffixVector(value!, name);
      expect(Array.from(vector)).toEqual(Array.from(distinctBefore.subarray(0, vector.length)));
      expect(distinctBefore.subarray(vector.length).every((c) => c === 0)).toBe(true);
    }
  });
});

describe('mergePartition with more runs than it opens at once', () => {
  test('merges them in groups through intermediate runs: the same store, the scratch removed, and resumable', async () => {
    const dir = mkdtempSync(path.join(os.tmpdir(), 'quern-fan-in-'));
    const task = await writeRuns(dir, 11, 3000);
    const expectedTallies = await mergePartition(dir, 'all-at-once', task, 'raw', { txnBlocks: 2 });
    const expected = await contents(dir, 'all-at-once');
    // A fan-in of 3 for 11 runs: groups of 3 merged into intermediates until 3 remain (one
    // intermediate merged again), each n-gram's counts added wherever its copies meet.
    const made: string[] = [];
    const watching = {
      ...nodeFs,
      async rename(from: string, to: string) {
        made.push(path.relative(dir, to));
        await nodeFs.rename(from, to);
      },
    };
    const tallies = await mergePartition(dir, 'grouped', task, 'raw', { txnBlocks: 2, fanIn: 3, fs: watching });
    expect(tallies).toEqual(expectedTallies);
    expect(await contents(dir, 'grouped')).toBe(expected);
    expect(made.length).toBe(4); // 11 → 9 → 7 → 5 → 3 runs; the fourth merge takes the first intermediate
    expect(made.every((file) => file.startsWith(path.join(MERGE_SCRATCH_DIR, 'raw', 'p0000', 'o2')))).toBe(true);
    expect(readdirSync(path.join(dir, MERGE_SCRATCH_DIR, 'raw'))).toEqual([]);

    // Stopped after each commit in turn and resumed (the intermediates made again), then the same.
    for (let k = 1; ; k++) {
      let commits = 0;
      try {
        const resumed = await mergePartition(dir, 'grouped-resumed', task, 'raw', {
          txnBlocks: 2, fanIn: 3, afterCommit: () => { if (++commits === k) throw new Error('stop'); },
        });
        expect(resumed).toEqual(expectedTallies);
        break;
      } catch (error) {
        expect((error as Error).message).toBe('stop');
        expect(k).toBeLessThan(100);
      }
    }
    expect(await contents(dir, 'grouped-resumed')).toBe(expected);
    expect(existsSync(path.join(dir, MERGE_SCRATCH_DIR, 'raw', 'p0000'))).toBe(false);
  });
});

describe('StoreSource with reused batches', () => {
  test('gives the same rows as fresh batches, every batch decoded into the same arrays', async () => {
    const dir = mkdtempSync(path.join(os.tmpdir(), 'quern-reuse-'));
    const task = await writeRuns(dir, 3, 5000);
    await mergePartition(dir, 'store', task, 'raw');
    const store = PartitionStore.open(path.join(dir, 'store'), 'read');
    const read = async (reuse: boolean): Promise<{ rows: string[]; buffers: Set<ArrayBufferLike> }> => {
      const source = new StoreSource(store, 2, undefined, 'raw', reuse);
      const rows: string[] = [];
      const buffers = new Set<ArrayBufferLike>();
      for (let batch = await source.nextBatch(); batch !== null; batch = await source.nextBatch()) {
        expect(batch.keys.length).toBe(2 * batch.recordCount);
        expect(batch.counts.length).toBe(batch.recordCount);
        buffers.add(batch.keys.buffer);
        for (let j = 0; j < batch.recordCount; j++) rows.push(`${batch.keys[2 * j]} ${batch.keys[2 * j + 1]} ${batch.counts[j]}`);
      }
      await source.close();
      return { rows, buffers };
    };
    const fresh = await read(false);
    const reused = await read(true);
    await store.close();
    expect(fresh.buffers.size).toBeGreaterThan(3); // several blocks, one new array each
    expect(reused.buffers.size).toBe(1);
    expect(reused.rows).toEqual(fresh.rows);
  });
});
