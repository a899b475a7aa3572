/**
 * The records of a block (block-codec.ts, `encodeBlock`) coded in WebAssembly: AssemblyScript,
 * compiled by `npm run build:wasm` into block-codec.wasm beside it (committed;
 * test/count/block-codec.test.ts checks that it is what this source compiles to). The JavaScript side
 * (codec-wasm.ts) copies a block's ids and counts in and the coded bytes out; the header and the
 * checksum stay in block-codec.ts. The bytes are encodeBlock's: the first record's count, then per
 * record the shared prefix length, the delta of the first differing id, the other ids and the
 * count, in LEB128 varints.
 */

@inline function putVar(at: usize, value: u64): usize {
  let p = at;
  let v = value;
  while (v > 0x7f) {
    store<u8>(p++, <u8>((v & 0x7f) | 0x80));
    v >>= 7;
  }
  store<u8>(p++, <u8>v);
  return p;
}

/** What `encodeRecords` returns, ORed with the record's index, for a row not above the one before. */
const NOT_ABOVE: usize = 0x80000000;

/**
 * Codes the `n` rows of `order` u32 ids at `keys` (strictly increasing: a row that is not above the
 * one before stops it, and it returns NOT_ABOVE | that row's index) and their f64 counts at
 * `counts` (integers, 1 to 2^53 − 1) from the first row's count on, at `out`; returns the bytes
 * written.
 */
export function encodeRecords(keys: usize, counts: usize, n: u32, order: u32, out: usize): usize {
  const rowBytes = <usize>order << 2;
  let p = putVar(out, <u64>load<f64>(counts));
  for (let r: u32 = 1; r < n; r++) {
    const base = keys + <usize>r * rowBytes;
    const prev = base - rowBytes;
    let shared: usize = 0;
    while (shared < rowBytes - 4 && load<u32>(base + shared) == load<u32>(prev + shared)) shared += 4;
    const id = load<u32>(base + shared);
    const before = load<u32>(prev + shared);
    if (id <= before) return NOT_ABOVE | <usize>r;
    store<u8>(p++, <u8>(shared >> 2));
    p = putVar(p, <u64>(id - before));
    for (let j = shared + 4; j < rowBytes; j += 4) p = putVar(p, <u64>load<u32>(base + j));
    p = putVar(p, <u64>load<f64>(counts + (<usize>r << 3)));
  }
  return p - out;
}
