/**
 * `PackedModel.step` in WebAssembly: AssemblyScript, compiled by `npm run build:wasm` into
 * lookup-step.wasm beside it (committed; test/pack/wasm-step.test.ts checks that it is what this
 * source compiles to). The JavaScript side is src/pack/lookup-wasm.ts, which lays out the memory:
 *
 *   the model file's sections at their byte offsets in the file (as openModel verified them);
 *   a parameter block at `params`: the order, the word id width, the value encoding, the unseen-
 *     context weight, and per order the addresses of its arrays (reader.ts, HotLevel);
 *   the codebooks extended to every code (quantised files);
 *   the decoder states' blocks (DecoderState): i32 order at 0, the history ids (oldest first) at
 *     32, rows[k] at 64 + 4k, starts[k] at 128 + 4k, ends[k] at 192 + 4k.
 *
 * The arithmetic is reader.ts's, in the same order, so the numbers are the same bit for bit; every
 * read stays inside its section for the same reasons (children ranges clamped to the next order's
 * rows, codebooks extended to every code), and a packed id's 8-byte read may run at most 7 bytes
 * past its section, into the padding, the next section or the parameter block, never out of memory.
 */

// Parameter block, byte offsets (lookup-wasm.ts writes it).
const P_ORDER = 0;
const P_WORD_BITS = 4;
const P_ENCODING = 8;
const P_UNSEEN = 16; // f64
const P_WORD_MASK = 24; // u64
const P_LEVELS = 64;
const LEVEL_BYTES = 48;
// Per order n, at P_LEVELS + n * LEVEL_BYTES:
const L_WORDS = 0;
const L_PROB = 4;
const L_PROB_BOOK = 8;
const L_BACK_OFF = 12;
const L_BACK_OFF_BOOK = 16;
const L_BASES = 20;
const L_OFFSETS = 24;
const L_CHILD_BITS = 28;
const L_CHILD_LIMIT = 32;
const L_CHILD_MASK = 40; // u64

// A state block.
const S_ORDER = 0;
const S_IDS = 32;
const S_ROWS = 64;
const S_STARTS = 128;
const S_ENDS = 192;

// Value encodings (format.ts, ValueEncoding).
const FLOAT32 = 1;
const FLOAT64 = 2;
const QUANTISED8 = 3;

/** reader.ts, SCAN_ROWS. */
const SCAN_ROWS: i32 = 8;
/** format.ts, CHILD_BLOCK_SHIFT. */
const CHILD_BLOCK_SHIFT: u32 = 6;

let params: usize = 0;
let order: i32 = 0;
let wordBits: u64 = 0;
let wordMask: u64 = 0;
let encoding: i32 = 0;
let unseen: f64 = 0;

/** Reads the parameter block at `at`. */
export function init(at: usize): void {
  params = at;
  order = load<i32>(at + P_ORDER);
  wordBits = <u64>load<i32>(at + P_WORD_BITS);
  wordMask = load<u64>(at + P_WORD_MASK);
  encoding = load<i32>(at + P_ENCODING);
  unseen = load<f64>(at + P_UNSEEN);
}

@inline function level(n: i32): usize {
  return params + P_LEVELS + <usize>n * LEVEL_BYTES;
}

/** Packed value `index` of `bits` bits (`mask`) at `at`: one 8-byte read (bits ≤ 32 + 7 shift). */
@inline function packed(at: usize, index: i32, bits: u64, mask: u64): u64 {
  const bit: u64 = <u64>(<u32>index) * bits;
  return (load<u64>(at + <usize>(bit >> 3)) >> (bit & 7)) & mask;
}

@inline function wordAt(words: usize, index: i32): i32 {
  return <i32>packed(words, index, wordBits, wordMask);
}

/** reader.ts, valueOf. */
@inline function valueOf(values: usize, book: usize, row: i32): f64 {
  if (encoding == FLOAT32) return <f64>load<f32>(values + (<usize>row << 2));
  if (encoding == FLOAT64) return load<f64>(values + (<usize>row << 3));
  if (encoding == QUANTISED8) return load<f64>(book + (<usize>load<u8>(values + <usize>row) << 3));
  return load<f64>(book + (<usize>load<u16>(values + (<usize>row << 1)) << 3));
}

/** reader.ts, childrenStart: the first child of `row` of the order at `lv`, clamped. */
@inline function childrenStart(lv: usize, row: i32): i32 {
  const offset = packed(<usize>load<u32>(lv + L_OFFSETS), row, <u64>load<i32>(lv + L_CHILD_BITS), load<u64>(lv + L_CHILD_MASK));
  const start: u64 = <u64>load<u32>(<usize>load<u32>(lv + L_BASES) + (<usize>(<u32>row >> CHILD_BLOCK_SHIFT) << 2)) + offset;
  const limit: u64 = <u64>load<i32>(lv + L_CHILD_LIMIT);
  return <i32>(start < limit ? start : limit);
}

/** reader.ts, searchWord: the row in [low, high) whose word is `word`, or −1. */
function search(words: usize, low: i32, high: i32, word: i32): i32 {
  const scanEnd = min(high, low + SCAN_ROWS);
  for (let row = low; row < scanEnd; row++) {
    const found = wordAt(words, row);
    if (found >= word) return found == word ? row : -1;
  }
  if (scanEnd == high) return -1;
  low += SCAN_ROWS;
  let bound = low;
  let step = 1;
  while (bound < high) {
    const found = wordAt(words, bound);
    if (found == word) return bound;
    if (found > word) {
      high = bound;
      break;
    }
    low = bound + 1;
    bound += step;
    step += step;
  }
  while (low < high) {
    const middle = low + ((high - low) >>> 1);
    const found = wordAt(words, middle);
    if (found < word) low = middle + 1;
    else if (found > word) high = middle;
    else return middle;
  }
  return -1;
}

/**
 * reader.ts, `step`, for the state block at `state` whose history holds `length` ids: returns
 * log10 p(word | history) and leaves the ids and rows of the new history in the block and the order
 * that answered at S_ORDER. (The new length, min(length + 1, order − 1), is the caller's to keep.)
 */
export function step(state: usize, length: i32, word: i32): f64 {
  const keep = length < order - 1 ? length + 1 : length;
  const rows = state + S_ROWS;
  const starts = state + S_STARTS;
  const ends = state + S_ENDS;
  let backOff: f64 = 0;
  let log10Prob: f64 = 0;
  let answer = 1;
  let k = length;
  for (; k >= 1; k--) {
    const row = load<i32>(rows + (<usize>k << 2));
    if (row >= 0) {
      const start = load<i32>(starts + (<usize>k << 2));
      const end = load<i32>(ends + (<usize>k << 2));
      if (start < end) {
        const lv = level(k);
        const rowBackOff = valueOf(<usize>load<u32>(lv + L_BACK_OFF), <usize>load<u32>(lv + L_BACK_OFF_BOOK), row);
        const next = level(k + 1);
        const found = search(<usize>load<u32>(next + L_WORDS), start, end, word);
        if (found >= 0) {
          log10Prob = backOff + valueOf(<usize>load<u32>(next + L_PROB), <usize>load<u32>(next + L_PROB_BOOK), found);
          answer = k + 1;
          if (k < keep) {
            store<i32>(rows + (<usize>(k + 1) << 2), found);
            store<i32>(starts + (<usize>(k + 1) << 2), childrenStart(next, found));
            store<i32>(ends + (<usize>(k + 1) << 2), childrenStart(next, found + 1));
          }
          break;
        }
        backOff += rowBackOff;
      } else backOff += unseen;
    } else backOff += unseen;
    if (k < keep) store<i32>(rows + (<usize>(k + 1) << 2), -1);
  }
  if (answer == 1) {
    const first = level(1);
    log10Prob = backOff + valueOf(<usize>load<u32>(first + L_PROB), <usize>load<u32>(first + L_PROB_BOOK), word);
  }
  // The rows of the shorter suffixes of the new history.
  for (let j = min(k - 1, keep - 1); j >= 1; j--) {
    const row = load<i32>(rows + (<usize>j << 2));
    let found = -1;
    if (row >= 0) {
      const start = load<i32>(starts + (<usize>j << 2));
      const end = load<i32>(ends + (<usize>j << 2));
      if (start < end) {
        const next = level(j + 1);
        found = search(<usize>load<u32>(next + L_WORDS), start, end, word);
        if (found >= 0) {
          store<i32>(starts + (<usize>(j + 1) << 2), childrenStart(next, found));
          store<i32>(ends + (<usize>(j + 1) << 2), childrenStart(next, found + 1));
        }
      }
    }
    store<i32>(rows + (<usize>(j + 1) << 2), found);
  }
  if (keep > 0) {
    const ids = state + S_IDS;
    if (keep == length) for (let i = 1; i < length; i++) store<i32>(ids + (<usize>(i - 1) << 2), load<i32>(ids + (<usize>i << 2)));
    store<i32>(ids + (<usize>(keep - 1) << 2), word);
    const first = level(1);
    store<i32>(rows + 4, word);
    store<i32>(starts + 4, childrenStart(first, word));
    store<i32>(ends + 4, childrenStart(first, word + 1));
  }
  store<i32>(state + S_ORDER, answer);
  return log10Prob;
}
