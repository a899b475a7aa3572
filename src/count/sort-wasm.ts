/**
 * The spill sort's scratch in a WebAssembly memory, and the radix passes of its packed keys run
 * there by spill-sort.wasm (compiled from spill-sort.as.ts by `npm run build:wasm`): 2.6–2.9× the
 * speed of the same passes in JavaScript on the benchmark corpus's partitions (BENCHMARKS.md).
 *
 * The memory: one 64 KiB page of parameters (the passes at 0, a histogram at 4 KiB), then the
 * scratch (`words`), which the spill packs its keys into from JavaScript as into any Uint32Array.
 * It lives as long as the scratch it replaces did: made by CounterSet.sortScratch, dropped by
 * `clear`. Where no such memory can be had (its size over 4 GiB, the module missing, the process
 * out of address space), the scratch is an ordinary array and the passes run in JavaScript: the
 * same sort, the same result.
 */
import { assert } from '../errors.ts';
import { PARTITIONS_MAX } from '../limits.ts';
import { instanceWithMemory, wasmModuleAt } from '../wasm-module.ts';
import type { RadixPass } from './radix.ts';

/** The parameter page: the passes from byte 0 (12 bytes each), the histogram from HISTOGRAM_AT. */
const PARAMS_BYTES = 65536;
const PAGE_BYTES = 65536;
const HISTOGRAM_AT = 4096;
const PASS_WORDS = 3;
/** Passes the parameter page holds: (HISTOGRAM_AT / 12); a key of 8 words has at most 24. */
const PASSES_MAX = Math.floor(HISTOGRAM_AT / (4 * PASS_WORDS));
/** Widest digit the histogram holds: 2^13 counters after HISTOGRAM_AT. */
const DIGIT_BITS_MAX = 13;
assert(HISTOGRAM_AT + 4 * 2 ** DIGIT_BITS_MAX <= PARAMS_BYTES, 'the histogram fits the parameter page');
/** Where `packKeys3` keeps each partition's next key (u32 a partition), after the histogram. */
const NEXT_KEY_AT = HISTOGRAM_AT + 4 * 2 ** DIGIT_BITS_MAX;
assert(NEXT_KEY_AT + 4 * PARTITIONS_MAX <= PARAMS_BYTES, 'a next key per partition fits the parameter page');

type SortKeys = (source: number, target: number, n: number, keyWords: number, passes: number, passCount: number, histogram: number) => number;
type TakeSuffixes = (at: number, rows: number, order: number) => number;
type UnpackKeys3 = (keys: number, n: number, keyWords: number, order: number, idBits: number, ids: number, counts: number) => number;
type PackKeys3 = (rowsAt: number, rows: number, order: number, idBits: number, keyWords: number, parts: number, next: number, base: number) => void;
type CountEqual = (keys: number, n: number, keyWords: number, counts: number) => number;

const sortModule = wasmModuleAt(new URL('./spill-sort.wasm', import.meta.url));

export class WasmSorter {
  /** The scratch: `words` 32-bit words after the parameter page (a new view after `reserve`). */
  words: Uint32Array;
  private params: Uint32Array;
  private readonly memory: WebAssembly.Memory;
  private readonly run: SortKeys;
  private readonly take: TakeSuffixes;
  private readonly countRows: CountEqual;
  private readonly pack3: PackKeys3;
  private readonly unpack3: UnpackKeys3;

  private constructor(memory: WebAssembly.Memory, words: number, exports: WebAssembly.Exports) {
    this.memory = memory;
    this.params = new Uint32Array(memory.buffer, 0, PARAMS_BYTES / 4);
    this.words = new Uint32Array(memory.buffer, PARAMS_BYTES, words);
    this.run = exports.sortKeys as SortKeys;
    this.take = exports.takeSuffixes as TakeSuffixes;
    this.countRows = exports.countEqual as CountEqual;
    this.pack3 = exports.packKeys3 as PackKeys3;
    this.unpack3 = exports.unpackKeys3 as UnpackKeys3;
  }

  /** A scratch of `words` words in a WebAssembly memory, or why there is none. A `growable` one
   *  may be given more words later (`reserve`). */
  static create(words: number, growable = false): WasmSorter | Error {
    assert(Number.isInteger(words) && words >= 0, `a scratch of ${words} words`);
    const made = instanceWithMemory(sortModule(), PARAMS_BYTES + 4 * words, growable);
    if (made instanceof Error) return new Error(`no WebAssembly sort scratch: ${made.message}`);
    return new WasmSorter(made.memory, words, made.instance.exports);
  }

  /**
   * At least `words` words of scratch, the ones there kept: a growable sorter's memory grows in
   * place and `words` (and every other view of it) is made again. False when it cannot grow (made
   * without `growable`, over WASM_MEMORY_BYTES_MAX, or no more address space).
   */
  reserve(words: number): boolean {
    if (words <= this.words.length) return true;
    const pages = Math.ceil((PARAMS_BYTES + 4 * words - this.memory.buffer.byteLength) / PAGE_BYTES);
    try {
      if (pages > 0) this.memory.grow(pages);
    } catch {
      return false;
    }
    this.params = new Uint32Array(this.memory.buffer, 0, PARAMS_BYTES / 4);
    this.words = new Uint32Array(this.memory.buffer, PARAMS_BYTES, words);
    return true;
  }

  /**
   * Sorts the `n` keys of `keyWords` words at word `source` of `words` by `passes` (LSD, each a
   * stable counting pass; a pass whose digit is the same for every key moves nothing), using the
   * `n` · `keyWords` words at `target` as the other buffer. Returns true when the sorted keys end at
   * `target`, false when at `source`.
   */
  sortKeys(source: number, target: number, n: number, keyWords: number, passes: readonly RadixPass[]): boolean {
    const span = n * keyWords;
    assert(passes.length <= PASSES_MAX, `${passes.length} radix passes, at most ${PASSES_MAX}`);
    assert(source + span <= this.words.length && target + span <= this.words.length && (source + span <= target || target + span <= source),
      `keys at words ${source} and ${target} (${span} words each) within a scratch of ${this.words.length}, apart`);
    const params = this.params;
    passes.forEach((pass, q) => {
      assert(pass.word < keyWords && pass.bits >= 1 && pass.bits <= DIGIT_BITS_MAX && pass.shift < 32, `radix pass ${JSON.stringify(pass)} of a ${keyWords}-word key`);
      params[PASS_WORDS * q] = pass.word;
      params[PASS_WORDS * q + 1] = pass.shift;
      params[PASS_WORDS * q + 2] = pass.bits;
    });
    return this.run(PARAMS_BYTES + 4 * source, PARAMS_BYTES + 4 * target, n, keyWords, 0, passes.length, HISTOGRAM_AT) === 1;
  }

  /**
   * Copies `rows` rows of order+1 ids (`keys`, row-major) to word `at` and keeps the last `order`
   * ids of each there, rows end to end (the local continuation counts' suffixes). The rows are
   * copied in whole first, so `rows` words past the suffixes' end must be free as well. Returns
   * the OR of the ids kept.
   */
  takeSuffixes(keys: Uint32Array, rows: number, order: number, at: number): number {
    const span = rows * (order + 1);
    assert(order >= 1 && at + span <= this.words.length && span <= keys.length, `${rows} rows of ${order + 1} ids at word ${at} within a scratch of ${this.words.length}`);
    this.words.set(keys.subarray(0, span), at);
    return this.take(PARAMS_BYTES + 4 * at, rows, order) >>> 0;
  }

  /**
   * Keeps each distinct row of the `n` sorted rows of `keyWords` words at word `at` once, in place,
   * and writes how often it occurred (u32) from word `countsAt`. Returns the rows kept.
   */
  countEqual(at: number, n: number, keyWords: number, countsAt: number): number {
    assert(at + n * keyWords <= this.words.length && countsAt + n <= this.words.length && (countsAt >= at + n * keyWords || countsAt + n <= at),
      `${n} rows of ${keyWords} words at ${at} and their counts at ${countsAt} within a scratch of ${this.words.length}, apart`);
    return this.countRows(PARAMS_BYTES + 4 * at, n, keyWords, PARAMS_BYTES + 4 * countsAt);
  }

  /**
   * packedOrder's step 2 (spill-sort.ts) for keys of at most 3 words and ids below 32 bits: rows
   * 0..m−1 of `front` (a count, then `order` ids) packed into keys of `keyWords` words, each written
   * at its partition's next key (`next[p]`, a word of this scratch; moved on as keys are written),
   * in the same order as the JavaScript loop. The rows and their partitions (`partitionOfRow`) are
   * copied in `stageRows` at a time to word `stageAt`, which needs stageRows · (order + 1.5) free
   * words there.
   */
  packKeys3(front: Uint32Array, m: number, order: number, idBits: number, keyWords: number, partitionOfRow: Uint16Array, next: Uint32Array, stageAt: number, stageRows: number): void {
    const stride = order + 1;
    const partsAt = stageAt + stageRows * stride;
    assert(keyWords >= 1 && keyWords <= 3 && idBits >= 1 && idBits < 32 && order * idBits <= 32 * keyWords, `keys of ${keyWords} words for ${order} ids of ${idBits} bits`);
    assert(stageRows >= 1 && partsAt + Math.ceil(stageRows / 2) <= this.words.length && next.length <= PARTITIONS_MAX, `a stage of ${stageRows} rows at word ${stageAt} within a scratch of ${this.words.length}`);
    this.params.set(next, NEXT_KEY_AT / 4);
    const parts = new Uint16Array(this.words.buffer, this.words.byteOffset + 4 * partsAt, stageRows);
    for (let first = 0; first < m; first += stageRows) {
      const end = Math.min(m, first + stageRows);
      this.words.set(front.subarray(first * stride, end * stride), stageAt);
      parts.set(partitionOfRow.subarray(first, end));
      this.pack3(PARAMS_BYTES + 4 * stageAt, end - first, order, idBits, keyWords, PARAMS_BYTES + 4 * partsAt, NEXT_KEY_AT, PARAMS_BYTES);
    }
    next.set(this.params.subarray(NEXT_KEY_AT / 4, NEXT_KEY_AT / 4 + next.length));
  }

  /**
   * packedOrder's step 4 (spill-sort.ts) for keys of at most 3 words and ids below 32 bits: the `n`
   * sorted keys at word `at` → the ids of each distinct key row-major into `out` from `keysAt`, and
   * how often it occurs from `countsAt`, as spill-sort.ts's `unpackKeys3` gives them; made at word
   * `stageAt` (n · (order + 1) free words) and copied out. Returns the distinct keys.
   */
  unpackKeys3(at: number, n: number, keyWords: number, order: number, idBits: number, stageAt: number, out: Uint32Array, keysAt: number, countsAt: number): number {
    const stageCounts = stageAt + n * order;
    assert(keyWords >= 1 && keyWords <= 3 && idBits >= 1 && idBits < 32, `keys of ${keyWords} words, ids of ${idBits} bits`);
    assert(at + n * keyWords <= this.words.length && stageCounts + n <= this.words.length && (stageAt >= at + n * keyWords || stageCounts + n <= at),
      `${n} keys at word ${at} and their rows at ${stageAt} within a scratch of ${this.words.length}, apart`);
    const distinct = this.unpack3(PARAMS_BYTES + 4 * at, n, keyWords, order, idBits, PARAMS_BYTES + 4 * stageAt, PARAMS_BYTES + 4 * stageCounts);
    out.set(this.words.subarray(stageAt, stageAt + distinct * order), keysAt);
    out.set(this.words.subarray(stageCounts, stageCounts + distinct), countsAt);
    return distinct;
  }
}
