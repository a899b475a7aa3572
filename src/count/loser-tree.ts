/**
 * What both k-way merges of run-merge.ts share — the JavaScript `LoserTreeMerger` and the
 * WebAssembly `WasmLoserTree` (merge-tree-wasm.ts): the interface mergeRuns drives, what `fill`
 * returns, the head of a used-up source, and how the tree is built.
 */
import { assert } from '../errors.ts';
import { VOCAB_TYPES_MAX } from '../limits.ts';
import type { RunBatch } from './run-file.ts';

/** The head of a used-up source in every word: above every word id (VOCAB_TYPES_MAX). */
export const EXHAUSTED_ID = 0xffff_ffff;
assert(VOCAB_TYPES_MAX < EXHAUSTED_ID, 'a used-up source sorts above every row');

/** `fill` stopped because every run is used up. */
export const FILL_DONE = -1;
/** `fill` stopped because the output batch is full and the next row is a new n-gram. */
export const FILL_OUTPUT_FULL = -2;

/** True when source a's head sorts before source b's, the heads being rows of `order` ids from
 *  word `at` of `heads` (ties by source index, for determinism). */
export function headBefore(heads: Uint32Array, at: number, order: number, a: number, b: number): boolean {
  let i = at + a * order;
  let j = at + b * order;
  const end = i + order;
  while (i < end && heads[i] === heads[j]) {
    i++;
    j++;
  }
  return i === end ? a < b : heads[i] < heads[j];
}

/**
 * The loser tree over k ≥ 1 sources whose heads `less` orders (ties by source index): leaves
 * k..2k−1, the children of node p are 2p and 2p+1; `setLoser(p, s)` keeps the loser at node p
 * (1..k−1). Returns the winner, for node 0.
 */
export function buildLoserTree(k: number, less: (a: number, b: number) => boolean, setLoser: (node: number, source: number) => void): number {
  const winners = new Int32Array(2 * k);
  for (let s = 0; s < k; s++) winners[k + s] = s;
  for (let p = k - 1; p >= 1; p--) {
    const a = winners[2 * p];
    const b = winners[2 * p + 1];
    const aWins = less(a, b);
    winners[p] = aWins ? a : b;
    setLoser(p, aWins ? b : a);
  }
  return k === 1 ? 0 : winners[1];
}

/** What mergeRuns asks of a merge state over k sources (LoserTreeMerger, WasmLoserTree). */
export interface Merger {
  readonly outSize: number;
  /** Installs source s's next block (null: the source is used up) and loads its first row. */
  setBatch(s: number, batch: RunBatch | null): void;
  /** After `fill` returned s: loads the next rows of source s's block when it has more (true);
   *  false when the block is used up (the caller installs the next with setBatch). Then replay. */
  nextWindow(s: number): boolean;
  build(): void;
  replay(s: number): void;
  fill(): number;
  takeOutput(): RunBatch;
}
