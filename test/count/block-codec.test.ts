/**
 * The block coding's record loop in WebAssembly (src/count/codec-wasm.ts, block-codec.as.ts): the
 * committed module is what its source compiles to, and a block coded there is byte for byte the
 * block the JavaScript loop codes, for orders 1 to 7, ids of every width, counts from 1 to 2^53 − 1
 * held as float64 or uint32, blocks of one record to the largest; and it decodes to its rows.
 */
import { afterEach, describe, expect, test } from 'vitest';
import { blockBytesMax, decodeBlockValue, encodeBlock } from '../../src/count/block-codec.ts';
import { setCodecEngine } from '../../src/count/codec-wasm.ts';
import { RUN_BLOCK_RECORDS_MAX, RUN_COUNT_MAX } from '../../src/limits.ts';
import { expectCommittedWasm } from '../support/committed-wasm.ts';
import { seededRandom } from '../support/seeded.ts';

afterEach(() => setCodecEngine('auto'));

test('the committed block-codec.wasm is what asc (the pinned AssemblyScript) compiles from block-codec.as.ts', () => {
  expectCommittedWasm('src/count/block-codec.as.ts', 'src/count/asconfig.json', 'src/count/block-codec.wasm');
});

/** `n` strictly increasing rows of `order` ids below idMax (most sharing a prefix with the row
 *  before), and counts: most small, some up to RUN_COUNT_MAX. */
function rows(random: () => number, n: number, order: number, idMax: number): { keys: Uint32Array; counts: Float64Array } {
  const list: number[][] = [];
  const seen = new Set<string>();
  while (list.length < n) {
    const row = Array.from({ length: order }, () => Math.floor(random() ** 3 * idMax));
    const key = row.join(',');
    if (seen.has(key)) continue;
    seen.add(key);
    list.push(row);
  }
  list.sort((a, b) => { for (let j = 0; j < order; j++) if (a[j] !== b[j]) return a[j] - b[j]; return 0; });
  const counts = Float64Array.from(list, () => {
    const r = random();
    return r < 0.7 ? 1 : r < 0.9 ? 1 + Math.floor(random() * 200) : r < 0.97 ? 2 ** 31 + Math.floor(random() * 2 ** 33) : RUN_COUNT_MAX - Math.floor(random() * 1000);
  });
  return { keys: Uint32Array.from(list.flat()), counts };
}

function coded(keys: Uint32Array, counts: Float64Array | Uint32Array, first: number, n: number, order: number, engine: 'auto' | 'js'): Buffer {
  setCodecEngine(engine);
  const buf = Buffer.alloc(blockBytesMax(order, n) + 16, 0xee);
  const end = encodeBlock(buf, 3, keys, counts, first, n, order);
  return buf.subarray(3, end);
}

describe('encodeBlock in WebAssembly', () => {
  test('codes the bytes the JavaScript loop codes, and they decode to the rows', () => {
    const random = seededRandom(21);
    for (let order = 1; order <= 7; order++) {
      for (const idMax of [2, 130, 20_000, 2 ** 21 + 5, 2 ** 32 - 1]) {
        if (idMax ** order < 2000) continue;
        const { keys, counts } = rows(random, 1500, order, idMax);
        for (const [first, n] of [[0, 1], [0, 1500], [17, 900], [1499, 1]]) {
          const js = coded(keys, counts, first, n, order, 'js');
          const wasm = coded(keys, counts, first, n, order, 'auto');
          expect(wasm.equals(js), `order ${order}, ids below ${idMax}, rows ${first}..${first + n}`).toBe(true);
          const block = decodeBlockValue(wasm, order, n);
          expect(Array.from(block.keys)).toEqual(Array.from(keys.subarray(first * order, (first + n) * order)));
          expect(Array.from(block.counts)).toEqual(Array.from(counts.subarray(first, first + n)));
        }
        // Counts held as uint32 (a spill's), the largest block.
        const small = Uint32Array.from(counts, (c) => Math.min(c, 2 ** 32 - 1));
        expect(coded(keys, small, 0, 1500, order, 'auto').equals(coded(keys, small, 0, 1500, order, 'js'))).toBe(true);
      }
    }
    const { keys, counts } = rows(random, RUN_BLOCK_RECORDS_MAX, 3, 300_000);
    expect(coded(keys, counts, 0, RUN_BLOCK_RECORDS_MAX, 3, 'auto').equals(coded(keys, counts, 0, RUN_BLOCK_RECORDS_MAX, 3, 'js'))).toBe(true);
  });
});
