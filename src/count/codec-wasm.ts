/**
 * `encodeBlock`'s record loop in WebAssembly (block-codec.wasm, compiled from block-codec.as.ts by
 * `npm run build:wasm`): a block's ids and counts are copied into a memory of this thread's, coded
 * there, and the bytes copied out — the same bytes (test/count/block-codec.test.ts). One memory per
 * thread, made at the first block and kept: room for the largest block (RUN_BLOCK_RECORDS_MAX
 * records of ORDER_MAX ids, ~0.6 MiB). Where it cannot be had, block-codec.ts codes in JavaScript.
 */
import { ORDER_MAX, RUN_BLOCK_RECORDS_MAX, RUN_RECORD_BYTES_MAX } from '../limits.ts';
import { instanceWithMemory, wasmModuleAt, type WasmEngine } from '../wasm-module.ts';
import { assert } from '../errors.ts';

/** Row `r` of the keys is not above row r − 1 (an assertion: the coders check it as they code). */
export function rowsNotIncreasing(r: number): never {
  assert(false, `rows must strictly increase: record ${r} is not above record ${r - 1}`);
}

type EncodeRecords = (keys: number, counts: number, n: number, order: number, out: number) => number;

const KEYS_AT = 0;
const COUNTS_AT = KEYS_AT + 4 * ORDER_MAX * RUN_BLOCK_RECORDS_MAX;
const OUT_AT = COUNTS_AT + 8 * RUN_BLOCK_RECORDS_MAX;
const MEMORY_BYTES = OUT_AT + RUN_RECORD_BYTES_MAX * RUN_BLOCK_RECORDS_MAX;

class WasmEncoder {
  private readonly u32: Uint32Array;
  private readonly f64: Float64Array;
  private readonly u8: Uint8Array;

  constructor(memory: WebAssembly.Memory, private readonly run: EncodeRecords) {
    this.u32 = new Uint32Array(memory.buffer);
    this.f64 = new Float64Array(memory.buffer);
    this.u8 = new Uint8Array(memory.buffer);
  }

  /** Codes rows first..first+n−1 (n ≥ 1) into `buf` at `p`; returns the offset after them. */
  encode(buf: Uint8Array, p: number, keys: Uint32Array, counts: Float64Array | Uint32Array, first: number, n: number, order: number): number {
    this.u32.set(keys.subarray(first * order, (first + n) * order), KEYS_AT / 4);
    this.f64.set(counts.subarray(first, first + n), COUNTS_AT / 8);
    const bytes = this.run(KEYS_AT, COUNTS_AT, n, order, OUT_AT);
    // NOT_ABOVE | r (block-codec.as.ts), an i32 here: row r of the block is not above the one before.
    if (bytes < 0) rowsNotIncreasing(first + (bytes & 0x7fffffff));
    buf.set(this.u8.subarray(OUT_AT, OUT_AT + bytes), p);
    return p + bytes;
  }
}

const codecModule = wasmModuleAt(new URL('./block-codec.wasm', import.meta.url));
let encoder: WasmEncoder | null | undefined;

/** This thread's WebAssembly coder, or null when it cannot be had. */
function wasmEncoder(): WasmEncoder | null {
  if (encoder === undefined) {
    const made = instanceWithMemory(codecModule(), MEMORY_BYTES);
    encoder = made instanceof Error ? null : new WasmEncoder(made.memory, made.instance.exports.encodeRecords as EncodeRecords);
  }
  return encoder;
}

let engineChosen: WasmEngine = 'auto';

/** Chooses the code for the blocks coded from now on in this thread (tests compare the two). */
export function setCodecEngine(engine: WasmEngine): void {
  engineChosen = engine;
}

/**
 * Codes rows first..first+n−1 of `keys`/`counts` (n ≥ 1, strictly increasing rows, integer counts)
 * into `buf` at `p` in WebAssembly and returns the offset after them, or returns −1 when that is
 * not possible here (the engine is 'js', no memory, a block larger than RUN_BLOCK_RECORDS_MAX, or
 * counts that are not a typed array): the caller codes them itself.
 */
export function encodeRecordsWasm(buf: Uint8Array, p: number, keys: Uint32Array, counts: ArrayLike<number>, first: number, n: number, order: number): number {
  if (engineChosen === 'js' || n < 1 || n > RUN_BLOCK_RECORDS_MAX || order > ORDER_MAX) return -1;
  if (!(counts instanceof Float64Array || counts instanceof Uint32Array)) return -1;
  const coder = wasmEncoder();
  return coder === null ? -1 : coder.encode(buf, p, keys, counts, first, n, order);
}
