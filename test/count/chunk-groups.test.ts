import { describe, expect, it } from 'vitest';
import { GROUPS_PER_WORKER_MIN, groupBytesTarget, groupChunks } from '../../src/count/chunk-groups.ts';
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
    const target = groupBytesTarget(200_000_000, 2, 32 << 20);
    const groups = groupChunks(chunks, target);
    expect(groups.flat().map((c) => c.index)).toEqual(chunks.map((c) => c.index));
    expect(groups.length).toBeGreaterThanOrEqual(GROUPS_PER_WORKER_MIN * 2);
    expect(groups.length).toBeLessThanOrEqual(GROUPS_PER_WORKER_MIN * 2 + 1);
  });
});

describe('groupBytesTarget', () => {
  it('is the chunk size for a large input, less when the workers would get few groups', () => {
    expect(groupBytesTarget(10 * 2 ** 30, 2, 32 << 20)).toBe(32 << 20);
    expect(groupBytesTarget(80, 2, 32 << 20)).toBe(10);
    expect(groupBytesTarget(0, 2, 32 << 20)).toBe(1);
  });
});
