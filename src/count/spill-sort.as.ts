/**
 * The radix passes of the spill sort's packed keys (spill-sort.ts, `packedOrder`) in WebAssembly:
 * AssemblyScript, compiled by `npm run build:wasm` into spill-sort.wasm beside it (committed;
 * test/count/sort-wasm.test.ts checks that it is what this source compiles to). The JavaScript side
 * is src/count/sort-wasm.ts, which owns the memory: a parameter block (the passes, a histogram),
 * then the sort scratch the spill packs its keys into.
 *
 * The passes are packedOrder's, in the same order, each a stable counting pass, so the result is the
 * same permutation bit for bit; a pass whose digit is the same for every key moves nothing. What the
 * module gains over the JavaScript loop is moving a key in one or two wide loads and stores, with
 * no bounds checks (2.6–2.9× on the benchmark corpus's partitions; BENCHMARKS.md).
 */

/** Bytes of one pass's description at `passes`: key word, shift, digit bits (u32 each). */
const PASS_BYTES: usize = 12;

/**
 * Sorts the `n` keys of `keyWords` 32-bit words at `source` (the most significant word first) by
 * the `passCount` passes described at `passes`, moving them between `source` and `target`; `histogram`
 * has room for 2^bits u32 of the widest pass. Returns 1 when the sorted keys end in `target`, 0 when
 * in `source`.
 */
export function sortKeys(source: usize, target: usize, n: u32, keyWords: u32, passes: usize, passCount: u32, histogram: usize): u32 {
  let from = source;
  let to = target;
  let flipped: u32 = 0;
  const stride = <usize>keyWords << 2;
  const end = <usize>n * stride;
  for (let q: u32 = 0; q < passCount; q++) {
    const pass = passes + <usize>q * PASS_BYTES;
    const keyAt = <usize>load<u32>(pass) << 2;
    const shift = load<u32>(pass, 4);
    const mask: u32 = (<u32>1 << load<u32>(pass, 8)) - 1;
    memory.fill(histogram, 0, (<usize>mask + 1) << 2);
    for (let at = from + keyAt, last = from + end; at < last; at += stride) {
      const slot = histogram + (<usize>((load<u32>(at) >>> shift) & mask) << 2);
      store<u32>(slot, load<u32>(slot) + 1);
    }
    // The histogram into each digit's first target key; nothing to move when one digit has them all.
    let offset: u32 = 0;
    let moves = true;
    for (let d: u32 = 0; d <= mask; d++) {
      const slot = histogram + (<usize>d << 2);
      const count = load<u32>(slot);
      if (count == n) {
        moves = false;
        break;
      }
      store<u32>(slot, offset);
      offset += count;
    }
    if (!moves) continue;
    if (keyWords == 2) {
      for (let at = from, last = from + end; at < last; at += 8) {
        const slot = histogram + (<usize>((load<u32>(at + keyAt) >>> shift) & mask) << 2);
        const row = load<u32>(slot);
        store<u32>(slot, row + 1);
        store<u64>(to + (<usize>row << 3), load<u64>(at));
      }
    } else if (keyWords == 3) {
      for (let at = from, last = from + end; at < last; at += 12) {
        const slot = histogram + (<usize>((load<u32>(at + keyAt) >>> shift) & mask) << 2);
        const row = load<u32>(slot);
        store<u32>(slot, row + 1);
        const into = to + <usize>row * 12;
        store<u64>(into, load<u64>(at));
        store<u32>(into, load<u32>(at, 8), 8);
      }
    } else if (keyWords == 4) {
      for (let at = from, last = from + end; at < last; at += 16) {
        const slot = histogram + (<usize>((load<u32>(at + keyAt) >>> shift) & mask) << 2);
        const row = load<u32>(slot);
        store<u32>(slot, row + 1);
        const into = to + (<usize>row << 4);
        store<u64>(into, load<u64>(at));
        store<u64>(into, load<u64>(at, 8), 8);
      }
    } else {
      // Wider keys (rows of the local continuation sort, up to an order's ids): eight bytes at a
      // time, then the odd word.
      const pairs = stride & ~(<usize>7);
      for (let at = from, last = from + end; at < last; at += stride) {
        const slot = histogram + (<usize>((load<u32>(at + keyAt) >>> shift) & mask) << 2);
        const row = load<u32>(slot);
        store<u32>(slot, row + 1);
        const into = to + <usize>row * stride;
        let b: usize = 0;
        for (; b < pairs; b += 8) store<u64>(into + b, load<u64>(at + b));
        if (b < stride) store<u32>(into + b, load<u32>(at + b));
      }
    }
    const swap = from;
    from = to;
    to = swap;
    flipped ^= 1;
  }
  return flipped;
}

/**
 * The local continuation counts' suffixes (src/merge/local-continuation.ts): `rows` rows of
 * order+1 ids at `at`, each replaced, in place and in order, by its last `order` ids (row j moves to
 * at + j·order words, never past where it was read). Returns the OR of the ids kept, which sets the
 * radix passes.
 */
export function takeSuffixes(at: usize, rows: u32, order: u32): u32 {
  let bits: u32 = 0;
  const width = <usize>order << 2;
  let from = at + 4;
  let to = at;
  for (let r: u32 = 0; r < rows; r++) {
    for (let b: usize = 0; b < width; b += 4) {
      const id = load<u32>(from + b);
      bits |= id;
      store<u32>(to + b, id);
    }
    from += width + 4;
    to += width;
  }
  return bits;
}

/**
 * Counts equal neighbours among `n` sorted rows of `keyWords` words at `keys`: compacts them in
 * place, each distinct row once, and writes its multiplicity (u32) to `counts`. Returns the rows
 * kept.
 */
export function countEqual(keys: usize, n: u32, keyWords: u32, counts: usize): u32 {
  if (n == 0) return 0;
  const stride = <usize>keyWords << 2;
  let last = keys;
  let size: u32 = 1;
  let count: u32 = 1;
  for (let r: u32 = 1; r < n; r++) {
    const from = keys + <usize>r * stride;
    let b: usize = 0;
    while (b < stride && load<u32>(from + b) == load<u32>(last + b)) b += 4;
    if (b == stride) {
      count++;
      continue;
    }
    store<u32>(counts + (<usize>(size - 1) << 2), count);
    last += stride;
    if (last != from) memory.copy(last, from, stride);
    size++;
    count = 1;
  }
  store<u32>(counts + (<usize>(size - 1) << 2), count);
  return size;
}

/**
 * Step 2 of packedOrder (spill-sort.ts) for keys of at most 3 words and ids below 32 bits: `rows`
 * rows of a count and `order` ids at `rowsAt` (u32 each), each packed into a key of `keyWords`
 * words — its ids one bit string, `idBits` each, the first most significant, right-aligned — and
 * written at its partition's next key: the partition of row j is the u16 at parts + 2j, and the
 * next key's word offset from `base` of partition p the u32 at next + 4p, which moves on.
 */
export function packKeys3(rowsAt: usize, rows: u32, order: u32, idBits: u32, keyWords: u32, parts: usize, next: usize, base: usize): void {
  const up: u32 = 32 - idBits;
  const stride = (<usize>order + 1) << 2;
  let row = rowsAt + 4;
  for (let j: u32 = 0; j < rows; j++, row += stride) {
    let hi: u32 = 0;
    let mid: u32 = 0;
    let lo: u32 = 0;
    for (let i: u32 = 0; i < order; i++) {
      hi = (hi << idBits) | (mid >>> up);
      mid = (mid << idBits) | (lo >>> up);
      lo = (lo << idBits) | load<u32>(row + (<usize>i << 2));
    }
    const slot = next + (<usize>load<u16>(parts + (<usize>j << 1)) << 2);
    const to = load<u32>(slot);
    store<u32>(slot, to + keyWords);
    const at = base + (<usize>to << 2);
    if (keyWords == 3) {
      store<u32>(at, hi);
      store<u32>(at, mid, 4);
      store<u32>(at, lo, 8);
    } else if (keyWords == 2) {
      store<u32>(at, mid);
      store<u32>(at, lo, 4);
    } else {
      store<u32>(at, lo);
    }
  }
}

/**
 * Step 4 of packedOrder for keys of at most 3 words and ids below 32 bits: the `n` sorted keys of
 * `keyWords` words at `keys` → the ids of each distinct key row-major from `ids` (`order` u32 each)
 * and how often it occurs from `counts` (u32). Returns the distinct keys.
 */
export function unpackKeys3(keys: usize, n: u32, keyWords: u32, order: u32, idBits: u32, ids: usize, counts: usize): u32 {
  const mask: u32 = idBits == 32 ? 0xffff_ffff : (<u32>1 << idBits) - 1;
  const down: u32 = 32 - idBits;
  const stride = <usize>keyWords << 2;
  const width = <usize>order << 2;
  let distinct: u32 = 0;
  let lastHi: u32 = 0;
  let lastMid: u32 = 0;
  let lastLo: u32 = 0;
  let at = keys;
  for (let r: u32 = 0; r < n; r++, at += stride) {
    const lo = load<u32>(at + stride - 4);
    const mid = keyWords >= 2 ? load<u32>(at + stride - 8) : 0;
    const hi = keyWords == 3 ? load<u32>(at) : 0;
    if (distinct > 0 && lo == lastLo && mid == lastMid && hi == lastHi) {
      const slot = counts + (<usize>(distinct - 1) << 2);
      store<u32>(slot, load<u32>(slot) + 1);
      continue;
    }
    lastHi = hi;
    lastMid = mid;
    lastLo = lo;
    let h = hi;
    let m = mid;
    let l = lo;
    const first = ids + <usize>distinct * width;
    for (let i = first + width - 4; i >= first; i -= 4) {
      store<u32>(i, l & mask);
      l = (l >>> idBits) | (m << down);
      m = (m >>> idBits) | (h << down);
      h >>>= idBits;
    }
    store<u32>(counts + (<usize>distinct << 2), 1);
    distinct++;
  }
  return distinct;
}
