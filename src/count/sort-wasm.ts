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
import { instanceWithMemory, wasmModuleAt } from '../wasm-module.ts';
import type { RadixPass } from './radix.ts';

/** The parameter page: the passes from byte 0 (12 bytes each), the histogram from HISTOGRAM_AT. */
const PARAMS_BYTES = 65536;
const HISTOGRAM_AT = 4096;
const PASS_WORDS = 3;
/** Passes the parameter page holds: (HISTOGRAM_AT / 12); a key of 8 words has at most 24. */
const PASSES_MAX = Math.floor(HISTOGRAM_AT / (4 * PASS_WORDS));
/** Widest digit the histogram holds: 2^13 counters after HISTOGRAM_AT. */
const DIGIT_BITS_MAX = 13;
assert(HISTOGRAM_AT + 4 * 2 ** DIGIT_BITS_MAX <= PARAMS_BYTES, 'the histogram fits the parameter page');

type SortKeys = (source: number, target: number, n: number, keyWords: number, passes: number, passCount: number, histogram: number) => number;

const sortModule = wasmModuleAt(new URL('./spill-sort.wasm', import.meta.url));

export class WasmSorter {
  /** The scratch: `words` 32-bit words after the parameter page. */
  readonly words: Uint32Array;
  private readonly params: Uint32Array;
  private readonly run: SortKeys;

  private constructor(memory: WebAssembly.Memory, words: number, run: SortKeys) {
    this.params = new Uint32Array(memory.buffer, 0, PARAMS_BYTES / 4);
    this.words = new Uint32Array(memory.buffer, PARAMS_BYTES, words);
    this.run = run;
  }

  /** A scratch of `words` words in a WebAssembly memory, or why there is none. */
  static create(words: number): WasmSorter | Error {
    assert(Number.isInteger(words) && words >= 0, `a scratch of ${words} words`);
    const made = instanceWithMemory(sortModule(), PARAMS_BYTES + 4 * words);
    if (made instanceof Error) return new Error(`no WebAssembly sort scratch: ${made.message}`);
    return new WasmSorter(made.memory, words, made.instance.exports.sortKeys as SortKeys);
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
}
