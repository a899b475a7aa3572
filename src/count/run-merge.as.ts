/**
 * The loser tree of the k-way merge (run-merge.ts, `LoserTreeMerger.fill` and `replay`) in
 * WebAssembly: AssemblyScript, compiled by `npm run build:wasm` into run-merge.wasm beside it
 * (committed; test/count/run-merge.test.ts checks that it is what this source compiles to). The
 * JavaScript side (run-merge.ts, `WasmLoserTree`) lays out the memory and copies each source's
 * rows in, a window of them at a time:
 *
 *   a parameter block at 0 (u32): order, sources k, output capacity, output size, the source an
 *     error names, and the addresses below;
 *   heads (k rows of `order` u32), head counts (k f64), exhausted flags (k u32), the tree (k i32);
 *   per source: the address of its window's ids and counts, the rows in the window, the row at
 *     its head (k u32 each);
 *   the output's ids and counts; the windows.
 *
 * The comparisons, the ties broken by source index, the sums and the checks are `fill`'s, in the
 * same order, so the output is the same record for record.
 */

// Parameter block, byte offsets (run-merge.ts writes it).
const P_ORDER = 0;
const P_K = 4;
const P_OUT_CAPACITY = 8;
const P_OUT_SIZE = 12;
const P_DETAIL = 16;
const P_HEADS = 20;
const P_HEAD_COUNTS = 24;
const P_EXHAUSTED = 28;
const P_TREE = 32;
const P_SOURCE_KEYS = 36;
const P_SOURCE_COUNTS = 40;
const P_SOURCE_ROWS = 44;
const P_SOURCE_AT = 48;
const P_OUT_KEYS = 52;
const P_OUT_COUNTS = 56;

/** fill's results besides a source's index (run-merge.ts has the same values). */
const FILL_DONE: i32 = -1;
const FILL_OUTPUT_FULL: i32 = -2;
/** A source that is not used up holds a row of ids 0xffffffff (P_DETAIL: the source). */
const FILL_ROW_ABOVE_IDS: i32 = -3;
/** A merged count above 2^53 − 1. */
const FILL_COUNT_ABOVE_MAX: i32 = -4;
/** A source's row below the last merged row (P_DETAIL: the source). */
const FILL_OUT_OF_ORDER: i32 = -5;

const COUNT_MAX: f64 = 9007199254740991;

let order: u32 = 0;
let k: u32 = 0;
let heads: usize = 0;
let headCounts: usize = 0;
let exhausted: usize = 0;
let tree: usize = 0;
let sourceKeys: usize = 0;
let sourceCounts: usize = 0;
let sourceRows: usize = 0;
let sourceAt: usize = 0;
let outKeys: usize = 0;
let outCounts: usize = 0;
let outCapacity: u32 = 0;

/** Reads the parameter block (once, after run-merge.ts wrote it). */
export function init(): void {
  order = load<u32>(P_ORDER);
  k = load<u32>(P_K);
  outCapacity = load<u32>(P_OUT_CAPACITY);
  heads = load<u32>(P_HEADS);
  headCounts = load<u32>(P_HEAD_COUNTS);
  exhausted = load<u32>(P_EXHAUSTED);
  tree = load<u32>(P_TREE);
  sourceKeys = load<u32>(P_SOURCE_KEYS);
  sourceCounts = load<u32>(P_SOURCE_COUNTS);
  sourceRows = load<u32>(P_SOURCE_ROWS);
  sourceAt = load<u32>(P_SOURCE_AT);
  outKeys = load<u32>(P_OUT_KEYS);
  outCounts = load<u32>(P_OUT_COUNTS);
}

@inline function u32At(base: usize, i: u32): u32 {
  return load<u32>(base + (<usize>i << 2));
}

/** Copies a row of `bytes` (a multiple of 4; small: a call to memory.copy would cost more). */
@inline function copyRow(to: usize, from: usize, bytes: usize): void {
  for (let b: usize = 0; b < bytes; b += 4) store<u32>(to + b, load<u32>(from + b));
}

/** Replays the path from source s's leaf to the root after its head changed. */
export function replay(s: u32): void {
  const rowBytes = <usize>order << 2;
  let winner = s;
  for (let p = (s + k) >> 1; p >= 1; p >>= 1) {
    const slot = tree + (<usize>p << 2);
    const contender = load<u32>(slot);
    let i = heads + <usize>contender * rowBytes;
    let j = heads + <usize>winner * rowBytes;
    const end = i + rowBytes;
    while (i < end && load<u32>(i) == load<u32>(j)) {
      i += 4;
      j += 4;
    }
    if (i == end ? contender < winner : load<u32>(i) < load<u32>(j)) {
      store<u32>(slot, winner);
      winner = contender;
    }
  }
  store<u32>(tree, winner);
}

/**
 * Moves rows to the output until it is full (FILL_OUTPUT_FULL), every source is used up
 * (FILL_DONE), a source's window is used up (its index: the caller installs its next rows and
 * calls replay), or a check fails (FILL_ROW_ABOVE_IDS, FILL_COUNT_ABOVE_MAX, FILL_OUT_OF_ORDER).
 */
export function fill(): i32 {
  const rowBytes = <usize>order << 2;
  let outSize = load<u32>(P_OUT_SIZE);
  for (;;) {
    const w = load<u32>(tree);
    if (load<u32>(exhausted + (<usize>w << 2)) != 0) {
      // The winner sorts above every row only when every source is used up.
      for (let s: u32 = 0; s < k; s++) {
        if (load<u32>(exhausted + (<usize>s << 2)) == 0) {
          store<u32>(P_OUT_SIZE, outSize);
          store<u32>(P_DETAIL, s);
          return FILL_ROW_ABOVE_IDS;
        }
      }
      store<u32>(P_OUT_SIZE, outSize);
      return FILL_DONE;
    }
    const h = heads + <usize>w * rowBytes;
    let c: i32 = 1;
    if (outSize > 0) {
      const last = outKeys + <usize>(outSize - 1) * rowBytes;
      let j: usize = 0;
      while (j < rowBytes && load<u32>(h + j) == load<u32>(last + j)) j += 4;
      c = j == rowBytes ? 0 : load<u32>(h + j) < load<u32>(last + j) ? -1 : 1;
    }
    const headCount = load<f64>(headCounts + (<usize>w << 3));
    if (c == 0) {
      const slot = outCounts + (<usize>(outSize - 1) << 3);
      const sum = load<f64>(slot) + headCount;
      if (sum > COUNT_MAX) {
        store<u32>(P_OUT_SIZE, outSize);
        return FILL_COUNT_ABOVE_MAX;
      }
      store<f64>(slot, sum);
    } else {
      if (c < 0) {
        store<u32>(P_OUT_SIZE, outSize);
        store<u32>(P_DETAIL, w);
        return FILL_OUT_OF_ORDER;
      }
      if (outSize == outCapacity) {
        store<u32>(P_OUT_SIZE, outSize);
        return FILL_OUTPUT_FULL;
      }
      copyRow(outKeys + <usize>outSize * rowBytes, h, rowBytes);
      store<f64>(outCounts + (<usize>outSize << 3), headCount);
      outSize += 1;
    }
    const row = u32At(sourceAt, w) + 1;
    if (row == u32At(sourceRows, w)) {
      store<u32>(P_OUT_SIZE, outSize);
      return <i32>w;
    }
    store<u32>(sourceAt + (<usize>w << 2), row);
    copyRow(h, <usize>u32At(sourceKeys, w) + <usize>row * rowBytes, rowBytes);
    store<f64>(headCounts + (<usize>w << 3), load<f64>(<usize>u32At(sourceCounts, w) + (<usize>row << 3)));
    replay(w);
  }
  return FILL_DONE; // not reached
}
