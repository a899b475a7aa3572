/**
 * The continuation counts a partition's raw merge makes from the rows it merges
 * (fused-continuation.ts), against N1+(• x) counted here with a Map from the distinct n-grams of
 * the next order (Kneser-Ney's continuation count, Chen & Goodman 1998): whole, after a merge
 * stopped and resumed (only the orders merged in full are kept, the continuation merge makes the
 * others), and dropped when the budget is too small.
 */
import { mkdtempSync } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { describe, expect, test } from 'vitest';
import { writeRunFile } from '../../src/count/run-file.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { mergePartition, type MergeProgress, type PartitionMergeTask } from '../../src/merge/merge-partition.ts';
import { FUSED_CONTINUATION_KEY, readFusedContinuation } from '../../src/merge/fused-continuation.ts';
import { PartitionStore } from '../../src/merge/store.ts';
import { TallyBuilder } from '../../src/merge/tally.ts';
import { seededRandom } from '../support/seeded.ts';

type Rows = Map<string, number>;

/** `count` distinct random n-grams of `order` (few first words, Zipf-ish later ones), with counts. */
function randomRows(seed: number, order: number, count: number): Rows {
  const random = seededRandom(seed);
  const rows: Rows = new Map();
  while (rows.size < count) {
    const ids = Array.from({ length: order }, (_, k) => Math.floor(random() ** (k === 0 ? 1 : 2) * (k === 0 ? 40 : 3000)));
    rows.set(ids.join(' '), 1 + Math.floor(random() * 4));
  }
  return rows;
}

const sortedKeys = (rows: Rows): number[][] => [...rows.keys()].map((k) => k.split(' ').map(Number))
  .sort((a, b) => { for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return a[i] - b[i]; return 0; });

/** Writes `rows` as runs of `order`, split alternately between `runs` files; returns their names. */
async function writeRuns(dir: string, order: number, rows: Rows, runs: number): Promise<string[]> {
  const sorted = sortedKeys(rows);
  const files: string[] = [];
  for (let r = 0; r < runs; r++) {
    const mine = sorted.filter((_, i) => i % runs === r);
    const file = `o${order}-r${r}.run`;
    await writeRunFile(nodeFs, path.join(dir, file), { order, partition: 0, chunk: r, spill: 0 }, Uint32Array.from(mine.flat()),
      Float64Array.from(mine, (ids) => rows.get(ids.join(' '))!), mine.length);
    files.push(file);
  }
  return files;
}

/** N1+(• x) for every x of order m, from the distinct n-grams of order m+1. */
function continuationOf(higher: Rows): Rows {
  const counts: Rows = new Map();
  for (const key of higher.keys()) {
    const suffix = key.slice(key.indexOf(' ') + 1);
    counts.set(suffix, (counts.get(suffix) ?? 0) + 1);
  }
  return counts;
}

function storedRows(store: PartitionStore, order: number): Rows {
  const rows: Rows = new Map();
  for (const block of store.blocks(order, undefined, 'continuation')) {
    for (let j = 0; j < block.recordCount; j++) rows.set(Array.from(block.keys.subarray(j * order, (j + 1) * order)).join(' '), block.counts[j]);
  }
  return rows;
}

function tallyOf(rows: Rows, order: number) {
  const tally = new TallyBuilder(order);
  for (const ids of sortedKeys(rows)) tally.addRows(Uint32Array.from(ids), [rows.get(ids.join(' '))!], 0, 1);
  return tally.finish();
}

/** A partition with raw runs of orders 2, 3 and 4 (order 1 empty), and a continuation run of order 1. */
async function partitionRuns(dir: string, rowsOf4: number) {
  const rows = { 2: randomRows(2, 2, 3000), 3: randomRows(3, 3, 9000), 4: randomRows(4, 4, rowsOf4) };
  const raw: PartitionMergeTask = { partition: 0, files: [[], await writeRuns(dir, 2, rows[2], 2), await writeRuns(dir, 3, rows[3], 3), await writeRuns(dir, 4, rows[4], 2)] };
  // Order 1's continuation counts come from elsewhere (the unigram vectors or emitted runs): a run
  // here, written below the fused orders' keys.
  const unigrams: Rows = new Map(Array.from({ length: 500 }, (_, i) => [String(2 * i), 1 + (i % 7)]));
  const continuation: PartitionMergeTask = { partition: 0, files: [await writeRuns(dir, 1, unigrams, 1), [], []], localOrders: [2, 3] };
  return { rows, raw, continuation, unigrams };
}

async function expectContinuation(dir: string, name: string, rows: Record<number, Rows>, unigrams: Rows, tallies: unknown[]): Promise<void> {
  const store = PartitionStore.open(path.join(dir, name), 'read');
  try {
    expect(storedRows(store, 1)).toEqual(unigrams);
    expect(storedRows(store, 2)).toEqual(continuationOf(rows[3]));
    expect(storedRows(store, 3)).toEqual(continuationOf(rows[4]));
    expect(store.readProgress<MergeProgress>('continuation')?.tallies).toEqual(tallies);
  } finally {
    await store.close();
  }
  expect(tallies).toEqual([tallyOf(unigrams, 1), tallyOf(continuationOf(rows[3]), 2), tallyOf(continuationOf(rows[4]), 3)]);
}

async function fusedIn(dir: string, name: string): Promise<number[]> {
  const store = PartitionStore.open(path.join(dir, name), 'read');
  try {
    return [...readFusedContinuation(store).keys()];
  } finally {
    await store.close();
  }
}

describe('continuation counts made by the raw merge', () => {
  test('orders 2 and 3 from the raw merge of orders 3 and 4; order 1 merged below them', async () => {
    const dir = mkdtempSync(path.join(os.tmpdir(), 'quern-fused-'));
    const { rows, raw, continuation, unigrams } = await partitionRuns(dir, 20_000);
    await mergePartition(dir, 'store', { ...raw, fuseBytesMax: 64 << 20 }, 'raw', { txnBlocks: 3 });
    expect(await fusedIn(dir, 'store')).toEqual([2, 3]);
    const tallies = await mergePartition(dir, 'store', continuation, 'continuation');
    await expectContinuation(dir, 'store', rows, unigrams, tallies);

    // Without a budget for them, the continuation merge makes them from the store: the same.
    await mergePartition(dir, 'plain', raw, 'raw', { txnBlocks: 3 });
    expect(await fusedIn(dir, 'plain')).toEqual([]);
    expect(await mergePartition(dir, 'plain', continuation, 'continuation')).toEqual(tallies);
    await expectContinuation(dir, 'plain', rows, unigrams, tallies);
  });

  test('stopped after every commit in turn and resumed: the orders merged in full are kept, the continuation merge makes the rest', async () => {
    const dir = mkdtempSync(path.join(os.tmpdir(), 'quern-fused-resume-'));
    const { rows, raw, continuation, unigrams } = await partitionRuns(dir, 6000);
    const seen = new Set<string>();
    for (let k = 1; ; k++) {
      const name = `stopped-${k}`;
      let commits = 0;
      try {
        await mergePartition(dir, name, { ...raw, fuseBytesMax: 64 << 20 }, 'raw', { txnBlocks: 2, afterCommit: () => { if (++commits === k) throw new Error('stop'); } });
      } catch (error) {
        expect((error as Error).message).toBe('stop');
        await mergePartition(dir, name, { ...raw, fuseBytesMax: 64 << 20 }, 'raw', { txnBlocks: 2 });
        const fused = await fusedIn(dir, name);
        seen.add(fused.join(','));
        await expectContinuation(dir, name, rows, unigrams, await mergePartition(dir, name, continuation, 'continuation'));
        continue;
      }
      expect(await fusedIn(dir, name)).toEqual([2, 3]);
      break;
    }
    // Stops in order 3 or before keep both orders (the resumed merge merges 3 and 4 in full);
    // stops in order 4 keep order 3 alone.
    expect([...seen].sort()).toEqual(['2,3', '3']);
  });

  test('a budget the gathered suffixes outgrow drops the order: the continuation merge makes it', async () => {
    const dir = mkdtempSync(path.join(os.tmpdir(), 'quern-fused-budget-'));
    // 400,000 rows of order 4: their suffixes outgrow a first gather of 4 MiB, and 5 MiB do not
    // allow the next; the 9,000 of order 3 fit.
    const { rows, raw, continuation, unigrams } = await partitionRuns(dir, 400_000);
    await mergePartition(dir, 'store', { ...raw, fuseBytesMax: 5 << 20 }, 'raw');
    expect(await fusedIn(dir, 'store')).toEqual([2]);
    await expectContinuation(dir, 'store', rows, unigrams, await mergePartition(dir, 'store', continuation, 'continuation'));
    // Below the first gather's 4 MiB, none.
    await mergePartition(dir, 'small', { ...raw, fuseBytesMax: 1 << 20 }, 'raw');
    const store = PartitionStore.open(path.join(dir, 'small'), 'read');
    expect(store.readMeta(FUSED_CONTINUATION_KEY)).toBeUndefined();
    await store.close();
  });
});
