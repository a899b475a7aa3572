import { describe, expect, it } from 'vitest';
import { counterBytesPerPosition, GROUPS_PER_WORKER_MIN, groupBytesTarget, groupChunks } from '../../src/count/chunk-groups.ts';
import { COUNT_GROUP_BYTES_MAX, COUNT_GROUP_MEMORY_HEADROOM } from '../../src/limits.ts';
import type { Chunk } from '../../src/corpus/types.ts';

/** Chunks of the given sizes, one per file, in plan order. */
function chunksOf(sizes: number[]): Chunk[] {
  return sizes.map((size, index) => ({ index, fileIndex: index, byteStart: 0, byteEnd: size }));
}

describe('groupChunks', () => {
  it('keeps consecutive chunks together up to the target, in plan order, each chunk once', () => {
    const chunks = chunksOf([40, 30, 20, 50, 10, 10, 90, 5]);
    const groups = groupChunks(chunks, 100);
    expect(groups.map((g) => g.map((c) => c.index))).toEqual([[0, 1, 2], [3, 4, 5], [6, 7]]);
    for (const group of groups) expect(group.reduce((s, c) => s + c.byteEnd - c.byteStart, 0)).toBeLessThanOrEqual(100);
  });

  it('gives a chunk above the target a group of its own, and empty chunks a place', () => {
    const groups = groupChunks(chunksOf([150, 0, 100, 0, 1]), 100);
    expect(groups.map((g) => g.map((c) => c.index))).toEqual([[0], [1, 2, 3], [4]]);
    expect(groupChunks([], 100)).toEqual([]);
  });

  it('covers 200 small files with few groups: the case it exists for', () => {
    const chunks = chunksOf(new Array(200).fill(1_000_000));
    const target = groupBytesTarget(200_000_000, 2, 3, 1 << 30, 0.14);
    const groups = groupChunks(chunks, target);
    expect(groups.flat().map((c) => c.index)).toEqual(chunks.map((c) => c.index));
    expect(groups.length).toBeGreaterThanOrEqual(GROUPS_PER_WORKER_MIN * 2);
    expect(groups.length).toBeLessThanOrEqual(GROUPS_PER_WORKER_MIN * 2 + 1);
  });
});

describe('groupBytesTarget', () => {
  it('is each worker\'s share of the input, at most COUNT_GROUP_BYTES_MAX and what fits the counter budget', () => {
    // 200 MB, 2 workers, 1 GiB each, 0.136 positions per byte (the 200 MB benchmark corpus).
    expect(groupBytesTarget(200_000_000, 2, 3, 2 ** 30, 0.136)).toBe(100_000_000);
    const fitsAtOrder5 = Math.floor(2 ** 30 / (0.136 * counterBytesPerPosition(5)));
    expect(groupBytesTarget(200_000_000, 2, 5, 2 ** 30, 0.136)).toBe(fitsAtOrder5);
    expect(fitsAtOrder5).toBeLessThan(100_000_000);
    expect(groupBytesTarget(10 * 2 ** 30, 2, 3, 2 ** 40, 0.136)).toBe(COUNT_GROUP_BYTES_MAX);
    expect(groupBytesTarget(10 * 2 ** 30, 2, 3, 2 ** 40, 0)).toBe(COUNT_GROUP_BYTES_MAX);
    expect(groupBytesTarget(80, 2, 3, 2 ** 30, 0.1)).toBe(40);
    expect(groupBytesTarget(0, 2, 3, 2 ** 30, 0.1)).toBe(1);
  });

  it('counts a log row with its filter bits per order ≥ 2 and the sort scratch of the highest, with headroom', () => {
    // Order 3: rows of 3 and 4 words with 4 filter bits each, and a 4-word row + 2 bytes of scratch.
    expect(counterBytesPerPosition(3)).toBeCloseTo(COUNT_GROUP_MEMORY_HEADROOM * (12.5 + 16.5 + 18), 10);
    expect(counterBytesPerPosition(1)).toBeCloseTo(COUNT_GROUP_MEMORY_HEADROOM * 10, 10);
  });
});
