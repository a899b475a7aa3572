import { promises as fsp } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { QuernError } from '../../src/errors.ts';
import { nodeFs } from '../../src/job/fsio.ts';
import { MERGE_BATCH_RECORDS, RUN_BLOCK_RECORDS_MAX } from '../../src/limits.ts';
import { RunReader, writeRunFile, type RunBatch } from '../../src/count/run-file.ts';
import { mergeRuns, type BatchSource } from '../../src/count/run-merge.ts';
import { WasmLoserTree } from '../../src/count/merge-tree-wasm.ts';
import type { WasmEngine } from '../../src/wasm-module.ts';
import { expectCommittedWasm } from '../support/committed-wasm.ts';
import { seededRandom } from '../support/seeded.ts';

const prng = seededRandom;

/** A run as a map from "id,id,…" to count, plus its sorted rows for writing. */
interface Run {
  map: Map<string, number>;
  keys: Uint32Array;
  counts: Float64Array;
  recordCount: number;
}

function compareTuples(a: number[], b: number[]): number {
  for (let j = 0; j < a.length; j++) if (a[j] !== b[j]) return a[j] - b[j];
  return 0;
}

function runFromMap(map: Map<string, number>, order: number): Run {
  const rows = [...map.entries()].map(([key, count]) => ({ ids: key.split(',').map(Number), count }));
  rows.sort((a, b) => compareTuples(a.ids, b.ids));
  const keys = new Uint32Array(rows.length * order);
  const counts = new Float64Array(rows.length);
  rows.forEach((row, i) => {
    keys.set(row.ids, i * order);
    counts[i] = row.count;
  });
  return { map, keys, counts, recordCount: rows.length };
}

/** Random distinct n-grams over a small vocabulary, so runs overlap heavily. */
function randomRun(random: () => number, order: number, draws: number, vocab: number, idBase = 0): Run {
  const map = new Map<string, number>();
  for (let i = 0; i < draws; i++) {
    const ids = Array.from({ length: order }, () => idBase + Math.floor(random() ** 2 * vocab));
    const key = ids.join(',');
    map.set(key, (map.get(key) ?? 0) + 1 + Math.floor(random() * 3));
  }
  return runFromMap(map, order);
}

/** The naive merge: sum the maps. */
function naiveMerge(runs: Run[], order: number): Run {
  const map = new Map<string, number>();
  for (const run of runs) for (const [key, count] of run.map) map.set(key, (map.get(key) ?? 0) + count);
  return runFromMap(map, order);
}

let dir: string;
let fileIndex = 0;
beforeAll(async () => {
  dir = await fsp.mkdtemp(path.join(os.tmpdir(), 'quern-run-merge-'));
});
afterAll(async () => {
  await fsp.rm(dir, { recursive: true, force: true });
});

async function openRuns(runs: Run[], order: number): Promise<RunReader[]> {
  const readers: RunReader[] = [];
  for (const run of runs) {
    const filePath = path.join(dir, `run-${fileIndex++}.run`);
    await writeRunFile(nodeFs, filePath, { order, partition: 0, chunk: fileIndex, spill: 0 }, run.keys, run.counts, run.recordCount);
    readers.push(await RunReader.open(filePath));
  }
  return readers;
}

/** Collects the merge output, checking the batch contract along the way. */
async function collect(batches: AsyncIterable<RunBatch>, order: number): Promise<{ keys: number[]; counts: number[]; batchSizes: number[] }> {
  const keys: number[] = [];
  const counts: number[] = [];
  const batchSizes: number[] = [];
  for await (const batch of batches) {
    expect(batch.recordCount).toBeGreaterThan(0);
    expect(batch.recordCount).toBeLessThanOrEqual(MERGE_BATCH_RECORDS);
    expect(batch.keys.length).toBe(batch.recordCount * order);
    expect(batch.counts.length).toBe(batch.recordCount);
    batchSizes.push(batch.recordCount);
    for (const id of batch.keys) keys.push(id);
    for (const c of batch.counts) counts.push(c);
  }
  return { keys, counts, batchSizes };
}

async function expectMergeMatchesNaive(runs: Run[], order: number, engine: WasmEngine): Promise<number[]> {
  const expected = naiveMerge(runs, order);
  const readers = await openRuns(runs, order);
  const out = await collect(mergeRuns(readers, order, engine), order);
  expect(out.counts.length).toBe(expected.recordCount);
  // Compare as whole arrays once (element-wise expect calls would be slow).
  expect(Buffer.from(Uint32Array.from(out.keys).buffer).equals(Buffer.from(expected.keys.buffer))).toBe(true);
  expect(Buffer.from(Float64Array.from(out.counts).buffer).equals(Buffer.from(expected.counts.buffer))).toBe(true);
  return out.batchSizes;
}

describe('the WebAssembly loser tree', () => {
  it('is what asc (the pinned AssemblyScript) compiles from run-merge.as.ts, and merges two sources or more', () => {
    expectCommittedWasm('src/count/run-merge.as.ts', 'src/count/asconfig.json', 'src/count/run-merge.wasm');
    expect(WasmLoserTree.create(['a.run', 'b.run'], 3)).toBeInstanceOf(WasmLoserTree);
    expect(WasmLoserTree.create(['a.run'], 3)).toBeUndefined();
  });
});

// Every test for both merges of two sources or more: the WebAssembly loser tree and the JavaScript one.
for (const engine of ['auto', 'js'] as const) describe(`mergeRuns (engine ${engine})`, () => {
  const merge = (readers: BatchSource[], order: number): AsyncGenerator<RunBatch> => mergeRuns(readers, order, engine);
  const shapes: { runCount: number; order: number; draws: number; vocab: number }[] = [
    { runCount: 1, order: 1, draws: 300, vocab: 500 },
    { runCount: 2, order: 2, draws: 2000, vocab: 60 },
    { runCount: 3, order: 3, draws: 3000, vocab: 20 },
    { runCount: 5, order: 4, draws: 1500, vocab: 8 },
    { runCount: 8, order: 3, draws: 2500, vocab: 40 },
    { runCount: 13, order: 2, draws: 700, vocab: 30 },
    { runCount: 4, order: 7, draws: 1200, vocab: 3 },
  ];
  for (const [i, shape] of shapes.entries()) {
    it(`matches a naive merge: ${shape.runCount} runs of order ${shape.order}`, async () => {
      const random = prng(100 + i);
      const runs = Array.from({ length: shape.runCount }, () => randomRun(random, shape.order, shape.draws, shape.vocab));
      await expectMergeMatchesNaive(runs, shape.order, engine);
    });
  }

  it('sums equal n-grams across block and batch boundaries', async () => {
    // Three copies of a run larger than a block and a batch: every n-gram appears in every run.
    const random = prng(7);
    const base = randomRun(random, 2, 40_000, 400);
    expect(base.recordCount).toBeGreaterThan(Math.max(RUN_BLOCK_RECORDS_MAX, MERGE_BATCH_RECORDS) + 100);
    const shifted = runFromMap(new Map([...base.map].filter((_, j) => j % 3 !== 0)), 2);
    const batchSizes = await expectMergeMatchesNaive([base, shifted, base], 2, engine);
    expect(batchSizes.slice(0, -1).every((size) => size === MERGE_BATCH_RECORDS)).toBe(true);
  });

  it('two sources: equal rows across block and batch boundaries, one used up first, empty, disjoint', async () => {
    const random = prng(11);
    const base = randomRun(random, 3, 40_000, 60);
    expect(base.recordCount).toBeGreaterThan(Math.max(RUN_BLOCK_RECORDS_MAX, MERGE_BATCH_RECORDS) + 100);
    const shifted = runFromMap(new Map([...base.map].filter((_, j) => j % 4 !== 1)), 3);
    await expectMergeMatchesNaive([base, shifted], 3, engine);
    await expectMergeMatchesNaive([shifted, base], 3, engine);
    await expectMergeMatchesNaive([base, base], 3, engine);
    const short = runFromMap(new Map([...base.map].slice(0, 50)), 3);
    await expectMergeMatchesNaive([short, base], 3, engine);
    await expectMergeMatchesNaive([base, short], 3, engine);
    const empty = runFromMap(new Map(), 3);
    await expectMergeMatchesNaive([empty, base], 3, engine);
    await expectMergeMatchesNaive([base, empty], 3, engine);
    const low = randomRun(random, 3, 500, 10);
    const high = randomRun(random, 3, 500, 10, 0xffff_fff0);
    await expectMergeMatchesNaive([high, low], 3, engine);
    await expectMergeMatchesNaive([low, high], 3, engine);
  });

  it('handles no runs, empty runs and disjoint runs', async () => {
    expect((await collect(merge([], 3), 3)).counts).toEqual([]);
    const random = prng(8);
    const empty = runFromMap(new Map(), 3);
    await expectMergeMatchesNaive([empty, empty], 3, engine);
    const low = randomRun(random, 3, 500, 10);
    const high = randomRun(random, 3, 500, 10, 0xffff_fff0);
    await expectMergeMatchesNaive([high, empty, low], 3, engine);
  });

  it('asserts on runs of another order', async () => {
    const random = prng(9);
    const readers = await openRuns([randomRun(random, 2, 10, 5)], 2);
    await expect(collect(merge(readers, 3), 3)).rejects.toThrow(/has order 2, merge expects 3/);
  });

  it('asserts when an input is out of order', async () => {
    // A stand-in reader that yields an unsorted batch (RunReader itself cannot produce one).
    const fake = (rows: number[][]): BatchSource => {
      let done = false;
      return {
        order: 2,
        name: 'fake.run',
        nextBatch: async () => {
          if (done) return null;
          done = true;
          return { keys: Uint32Array.from(rows.flat()), counts: Float64Array.from(rows, () => 1), recordCount: rows.length };
        },
        close: async () => {},
      };
    };
    const call = collect(merge([fake([[1, 1], [3, 0], [2, 5]]), fake([[1, 2]])], 2), 2);
    await expect(call).rejects.toThrow(/merge input out of order: a row of fake.run/);
    // In the second of two sources, and among three (the loser tree).
    await expect(collect(merge([fake([[1, 2]]), fake([[1, 1], [3, 0], [2, 5]])], 2), 2)).rejects.toThrow(/merge input out of order: a row of fake.run/);
    await expect(collect(merge([fake([[1, 2]]), fake([[0, 9]]), fake([[1, 1], [3, 0], [2, 5]])], 2), 2)).rejects.toThrow(/merge input out of order: a row of fake.run/);
  });

  it('passes a single source through, larger than a batch, and asserts when its rows do not strictly increase', async () => {
    const random = prng(10);
    const big = randomRun(random, 2, 40_000, 400);
    expect(big.recordCount).toBeGreaterThan(MERGE_BATCH_RECORDS + 100);
    await expectMergeMatchesNaive([big], 2, engine);
    // Equal rows within one source are out of order (a run's rows strictly increase), within a batch
    // and across two.
    const batches = (list: number[][][]): BatchSource => {
      let next = 0;
      return {
        order: 2,
        name: 'single.run',
        nextBatch: async () => {
          const rows = list[next++];
          return rows === undefined ? null : { keys: Uint32Array.from(rows.flat()), counts: Float64Array.from(rows, () => 1), recordCount: rows.length };
        },
        close: async () => {},
      };
    };
    await expect(collect(merge([batches([[[1, 1], [1, 1]]])], 2), 2)).rejects.toThrow(/merge input out of order: a row of single.run/);
    await expect(collect(merge([batches([[[1, 1], [2, 0]], [[2, 0]]])], 2), 2)).rejects.toThrow(/merge input out of order: a row of single.run/);
    await expect(collect(merge([batches([[[1, 1], [2, 0]], [[1, 5]]])], 2), 2)).rejects.toThrow(/merge input out of order: a row of single.run/);
    expect((await collect(merge([batches([[[1, 1], [2, 0]], [], [[2, 1]]])], 2), 2)).counts).toEqual([1, 1, 1]);
  });

  it('asserts when a merged count exceeds 2^53 − 1', async () => {
    const run: Run = { map: new Map(), keys: Uint32Array.from([4]), counts: Float64Array.from([2 ** 52]), recordCount: 1 };
    const readers = await openRuns([run, run], 1);
    await expect(collect(merge(readers, 1), 1)).rejects.toThrow(/merged count 9007199254740992 exceeds/);
  });

  it('passes on a corrupt run and closes every reader', async () => {
    const random = prng(10);
    const runs = [randomRun(random, 3, 20_000, 30), randomRun(random, 3, 20_000, 30)];
    const readers = await openRuns(runs, 3);
    const damagedPath = readers[1].filePath;
    const bytes = await fsp.readFile(damagedPath);
    bytes[bytes.length - 200] ^= 0x20; // inside the last block
    await fsp.writeFile(damagedPath, bytes);
    const error = await collect(merge(readers, 3), 3).then(() => undefined, (e: unknown) => e);
    expect(error).toBeInstanceOf(QuernError);
    expect((error as QuernError).code).toBe('corrupt');
    expect((error as Error).message).toContain(damagedPath);
    await expect(readers[0].nextBatch()).rejects.toThrow(/closed/);
  });

  it('closes the readers when the consumer stops early', async () => {
    const random = prng(11);
    const readers = await openRuns([randomRun(random, 2, 30_000, 300), randomRun(random, 2, 30_000, 300)], 2);
    for await (const batch of merge(readers, 2)) {
      expect(batch.recordCount).toBe(MERGE_BATCH_RECORDS);
      break;
    }
    for (const reader of readers) await expect(reader.nextBatch()).rejects.toThrow(/closed/);
  });
});

describe('a single source made in order (madeInOrder)', () => {
  /** A source handing out the given batches of order-2 rows. */
  function memorySource(batches: number[][][], madeInOrder: boolean): BatchSource {
    let next = 0;
    return {
      name: 'memory', order: 2, madeInOrder,
      async nextBatch(): Promise<RunBatch | null> {
        if (next === batches.length) return null;
        const rows = batches[next++];
        return { keys: Uint32Array.from(rows.flat()), counts: Float64Array.from(rows, () => 1), recordCount: rows.length };
      },
      async close(): Promise<void> {},
    };
  }

  it('hands its batches on as they are; rows out of order where two batches meet are still an assertion failure', async () => {
    const batches = [[[1, 2], [1, 5], [3, 1]], [[3, 2], [4, 0]]];
    const seen: RunBatch[] = [];
    for await (const batch of mergeRuns([memorySource(batches, true)], 2)) seen.push(batch);
    expect(seen.map((b) => Array.from(b.keys))).toEqual([[1, 2, 1, 5, 3, 1], [3, 2, 4, 0]]);
    const bad = [[[1, 2], [3, 1]], [[3, 1], [4, 0]]];
    await expect(collect(mergeRuns([memorySource(bad, true)], 2), 2)).rejects.toThrow(/out of order/);
    // Without the mark, every row is checked (here, within a batch).
    await expect(collect(mergeRuns([memorySource([[[2, 2], [1, 5]]], false)], 2), 2)).rejects.toThrow(/out of order/);
    // A marked batch larger than the merge's batches is refused.
    const large = [Array.from({ length: MERGE_BATCH_RECORDS + 1 }, (_, i) => [0, i])];
    await expect(collect(mergeRuns([memorySource(large, true)], 2), 2)).rejects.toThrow(/a batch of/);
  });
});
