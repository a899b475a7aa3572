/**
 * The WebAssembly lookups of a model (`openModel`'s `engine`): `PackedModel.step` compiled from
 * lookup-step.as.ts, the same arithmetic as reader.ts's in the same order, so the same numbers bit
 * for bit, in 0.64–0.75 of the time on the 24 MB benchmark model (`npm run bench:query`, 2026-12-05).
 *
 * One WebAssembly memory holds everything it reads, laid out here:
 *
 *   [0, sectionsEnd)        the model file's sections at their byte offsets in the file, read there
 *                           by openModel (the JavaScript lookups read the same bytes: one copy);
 *   then                    8 bytes of slack (a packed id is read with one 8-byte load), the
 *                           parameter block (PARAM_BYTES), the codebooks extended to every code
 *                           (quantised files), and LOOKUP_WASM_STATES_MAX state blocks of
 *                           STATE_BLOCK_BYTES for `newState`, handed out in chunks of
 *                           STATE_CHUNK_BLOCKS to the instances (one per thread) as they need them.
 *
 * The memory is shared (its buffer a SharedArrayBuffer), so that worker threads given the model
 * (`shareable`, `modelFromShared`) run the same lookups on it, each thread with an instance of its
 * own; and it never grows (a grown memory would detach every view of it).
 */
import { assert } from '../errors.ts';
import { wasmModuleAt } from '../wasm-module.ts';
import { LOOKUP_WASM_MEMORY_BYTES_MAX, LOOKUP_WASM_STATES_MAX, ORDER_MAX } from '../limits.ts';
import { codeBits, type ValueEncoding } from './format.ts';

const PAGE_BYTES = 65_536;
/** The parameter block (lookup-step.as.ts: P_…, L_…): 64 bytes, then 48 per order 0..ORDER_MAX. */
const LEVELS_AT = 64;
const LEVEL_BYTES = 48;
const PARAM_BYTES = LEVELS_AT + LEVEL_BYTES * (ORDER_MAX + 1);
/** A decoder state's block: the order that answered at byte 0, the history ids at 32, rows at 64,
 *  starts at 128, ends at 192; the *_AT below are the same places in 32-bit words. */
export const STATE_BLOCK_BYTES = 256;
export const STATE_BLOCK_INTS = STATE_BLOCK_BYTES / 4;
export const STATE_IDS_AT = 8;
export const STATE_ROWS_AT = 16;
export const STATE_STARTS_AT = 32;
export const STATE_ENDS_AT = 48;
/** Where the block's answering order is (in i32s). */
export const STATE_ORDER_AT = 0;
/** State blocks an instance takes at a time (its first is its scratch block). */
const STATE_CHUNK_BLOCKS = 64;
/** The parameter block's counter of chunks taken (bytes from its start; lookup-step.as.ts leaves
 *  bytes 32..63 alone). */
const CHUNKS_TAKEN_AT = 56;

/** What the lookups read of one order (reader.ts, HotLevel). */
export interface WasmLevel {
  words: Uint32Array;
  prob: ArrayBufferView;
  probBook: Float64Array | null;
  backOff: ArrayBufferView;
  backOffBook: Float64Array | null;
  bases: Uint32Array;
  offsets: Uint32Array;
  childBits: number;
  childLimit: number;
}

/** Where the parts of a model's memory start (bytes). */
export interface WasmLayout {
  params: number;
  codebooks: number;
  states: number;
  bytes: number;
}

/** The layout for a file whose sections end at `sectionsEnd`, of `order` and `encoding`. */
export function wasmLayout(sectionsEnd: number, order: number, encoding: ValueEncoding): WasmLayout {
  const params = align(sectionsEnd + 8, 64);
  const codebooks = params + PARAM_BYTES;
  const bits = codeBits(encoding);
  const states = align(codebooks + (bits > 0 ? 2 * order * 8 * 2 ** bits : 0), 64);
  const bytes = align(states + LOOKUP_WASM_STATES_MAX * STATE_BLOCK_BYTES, PAGE_BYTES);
  return { params, codebooks, states, bytes };
}

function align(value: number, to: number): number {
  return Math.ceil(value / to) * to;
}

/** The compiled module (lookup-step.wasm beside this file), or why it cannot be had. */
const stepModule = wasmModuleAt(new URL('./lookup-step.wasm', import.meta.url));

/**
 * A memory for a model laid out as `layout`, or why there is none: the model is too large for 32-bit
 * addresses, the module is missing, or the memory cannot be had (the reader then uses buffers and
 * the JavaScript lookups).
 */
export function wasmMemory(layout: WasmLayout): WebAssembly.Memory | Error {
  if (layout.bytes > LOOKUP_WASM_MEMORY_BYTES_MAX) return new Error(`the model needs ${layout.bytes} bytes of WebAssembly memory, over its ${LOOKUP_WASM_MEMORY_BYTES_MAX}`);
  const module = stepModule();
  if (module instanceof Error) return new Error(`the WebAssembly lookups cannot be loaded: ${module.message}`);
  const pages = layout.bytes / PAGE_BYTES;
  try {
    return new WebAssembly.Memory({ initial: pages, maximum: pages, shared: true });
  } catch (error) {
    return new Error(`no WebAssembly memory of ${layout.bytes} bytes: ${(error as Error).message}`);
  }
}

/** The model's parameters that `step` reads besides its orders. */
export interface WasmModelParameters {
  order: number;
  wordBits: number;
  encoding: ValueEncoding;
  log10UnseenContextWeight: number;
}

/**
 * `step` over one model's memory, and the state blocks there, for one thread. `hot[n]` (n =
 * 1..order; 0 unused) are the arrays the JavaScript lookups read, all views of `memory` (or
 * empty). The first instance writes the parameter block and the codebooks; an `attached` one (a
 * worker thread's, `modelFromShared`) finds them written.
 */
export class LookupWasm {
  /** log10 p of `word` after the history of `length` ids whose rows are in the block at `state`
   *  (lookup-step.as.ts, `step`). */
  readonly step: (state: number, length: number, word: number) => number;
  readonly buffer: ArrayBufferLike;
  /** A block for states that have none of their own (copied in and out per step); −1 when every
   *  chunk was taken by other threads (`step` then stays with the JavaScript lookups). */
  readonly scratch: number;
  readonly scratchBlock: Int32Array;
  private readonly free: number[] = [];
  private readonly registry = new FinalizationRegistry<number>((at) => this.free.push(at));
  private readonly chunksTaken: Int32Array;
  private readonly states: number;

  constructor(memory: WebAssembly.Memory, layout: WasmLayout, model: WasmModelParameters, hot: readonly WasmLevel[], attached: boolean) {
    const module = stepModule();
    assert(!(module instanceof Error), 'the module was compiled when the memory was made');
    const buffer = memory.buffer;
    this.buffer = buffer;
    this.states = layout.states;
    this.chunksTaken = new Int32Array(buffer, layout.params + CHUNKS_TAKEN_AT, 1);
    const instance = new WebAssembly.Instance(module as WebAssembly.Module, { env: { memory } });
    const exports = instance.exports as { init: (at: number) => void; step: (state: number, length: number, word: number) => number };
    if (!attached) LookupWasm.writeParameters(buffer, layout, model, hot);
    exports.init(layout.params);
    this.step = exports.step;
    this.scratch = this.takeChunk() ? (this.free.pop() as number) : -1;
    this.scratchBlock = new Int32Array(buffer, Math.max(0, this.scratch), STATE_BLOCK_INTS);
  }

  /** True when this instance can run `step` (it has a scratch block). */
  get usable(): boolean {
    return this.scratch >= 0;
  }

  /** Moves the next chunk of state blocks, if any is left, to this instance's free blocks. */
  private takeChunk(): boolean {
    const chunks = LOOKUP_WASM_STATES_MAX / STATE_CHUNK_BLOCKS;
    if (Atomics.load(this.chunksTaken, 0) >= chunks) return false; // (so the counter stays small)
    const chunk = Atomics.add(this.chunksTaken, 0, 1);
    if (chunk >= chunks) return false;
    const first = this.states + chunk * STATE_CHUNK_BLOCKS * STATE_BLOCK_BYTES;
    for (let block = STATE_CHUNK_BLOCKS - 1; block >= 0; block--) this.free.push(first + block * STATE_BLOCK_BYTES);
    return true;
  }

  /** The parameter block and the codebooks (lookup-step.as.ts). */
  private static writeParameters(buffer: ArrayBufferLike, layout: WasmLayout, model: WasmModelParameters, hot: readonly WasmLevel[]): void {
    const view = new DataView(buffer, layout.params, PARAM_BYTES);
    view.setInt32(0, model.order, true);
    view.setInt32(4, model.wordBits, true);
    view.setInt32(8, model.encoding, true);
    view.setFloat64(16, model.log10UnseenContextWeight, true);
    view.setBigUint64(24, (1n << BigInt(model.wordBits)) - 1n, true);
    let codebooks = layout.codebooks;
    const address = (array: ArrayBufferView): number => {
      if (array.byteLength === 0) return 0;
      assert(array.buffer === buffer, 'every array the lookups read is in the memory');
      return array.byteOffset;
    };
    const codebook = (book: Float64Array | null): number => {
      if (book === null) return 0;
      new Float64Array(buffer, codebooks, book.length).set(book);
      const at = codebooks;
      codebooks += book.byteLength;
      return at;
    };
    for (let n = 1; n <= model.order; n++) {
      const level = hot[n];
      const at = LEVELS_AT + n * LEVEL_BYTES;
      const fields = [
        address(level.words), address(level.prob), codebook(level.probBook), address(level.backOff), codebook(level.backOffBook),
        address(level.bases), address(level.offsets), level.childBits, level.childLimit,
      ];
      fields.forEach((value, i) => view.setUint32(at + 4 * i, value, true));
      view.setBigUint64(at + 40, (1n << BigInt(level.childBits)) - 1n, true);
    }
    assert(codebooks <= layout.states, 'the codebooks fit their part of the memory');
  }

  /** A free state block's address, or −1 when all are taken. */
  take(): number {
    if (this.free.length === 0 && !this.takeChunk()) return -1;
    return this.free.pop() as number;
  }

  /** The block at `at` (from `take`) for `owner`, its state, as 32-bit integers: the block is
   *  freed once `owner` is garbage-collected. */
  block(at: number, owner: object): Int32Array {
    this.registry.register(owner, at);
    return new Int32Array(this.buffer, at, STATE_BLOCK_INTS);
  }
}
