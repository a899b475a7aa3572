import { describe, expect, it } from 'vitest';
import { bitsFor } from '../../src/pack/format.ts';
import { createHash } from 'node:crypto';
import { HashedOrder, HashedOrderBuilder, firstZ, hashedOrderBytes, rowOrder, homeOf, mix, unmix, zOf, type HashedOrderInput } from '../../src/pack/hash-layout.ts';
import { Prng } from '../../scripts/lib/prng.ts';

/** Distinct random (context, word) keys with two value fields, as an order's n-grams would be. */
function randomInput(seed: number, rows: number, contextSpace: number, wordMax: number, valueBits = [32, 8]): HashedOrderInput {
  const prng = new Prng(seed);
  const seen = new Set<number>();
  const contexts = new Uint32Array(rows);
  const words = new Uint32Array(rows);
  for (let i = 0; i < rows; ) {
    const context = prng.int(contextSpace);
    const word = 1 + prng.int(wordMax);
    const key = context * (wordMax + 1) + word;
    if (seen.has(key)) continue;
    seen.add(key);
    contexts[i] = context;
    words[i] = word;
    i++;
  }
  const values = valueBits.map((bits) => {
    const field = new Uint32Array(rows);
    for (let i = 0; i < rows; i++) field[i] = bits === 32 ? prng.nextUint32() : prng.int(2 ** bits);
    return field;
  });
  return { rows, contextSpace, wordMax, contexts, words, valueBits, values, load: 0.85, bucketSlots: 4 };
}

describe('the context mix', () => {
  it('is a bijection of [0, 2^a) for every a up to 16, and unmix inverts it', () => {
    for (let a = 1; a <= 16; a++) {
      const size = 2 ** a;
      const hit = new Uint8Array(size);
      let wrong = 0;
      for (let x = 0; x < size; x++) {
        const y = mix(x, a);
        if (!(y < size) || hit[y] !== 0 || unmix(y, a) !== x) wrong++;
        else hit[y] = 1;
      }
      expect(wrong, `a = ${a}`).toBe(0);
    }
  });

  it('is inverted by unmix for wide mixes (a = 17..32), on random values', () => {
    const prng = new Prng(5);
    for (let a = 17; a <= 32; a++) {
      for (let i = 0; i < 2000; i++) {
        const x = a === 32 ? prng.nextUint32() : prng.int(2 ** a);
        const y = mix(x, a);
        expect(y).toBeLessThan(2 ** a);
        expect(unmix(y, a)).toBe(x);
      }
    }
  });

  it('homeOf is ⌊z · B / 2^a⌋ exactly, as 64-bit integer arithmetic gives it', () => {
    const prng = new Prng(9);
    let wrong = 0;
    for (let t = 0; t < 20_000; t++) {
      const a = 1 + prng.int(32);
      const z = a === 32 ? prng.nextUint32() : prng.int(2 ** a);
      const buckets = 1 + prng.int(2 ** 31 - 1);
      if (homeOf(z, buckets, a) !== Number((BigInt(z) * BigInt(buckets)) >> BigInt(a))) wrong++;
    }
    expect(wrong).toBe(0);
  });
  it('firstZ is ⌈home · 2^a / B⌉ exactly, where home · 2^a passes 2^53', () => {
    const prng = new Prng(12);
    let wrong = 0;
    for (let t = 0; t < 20_000; t++) {
      const a = 24 + prng.int(9);
      const buckets = 2 ** 20 + prng.int(2 ** 31 - 2 ** 20);
      if (buckets > 2 ** a) continue;
      const home = prng.int(buckets);
      const exact = (BigInt(home) * (1n << BigInt(a)) + BigInt(buckets) - 1n) / BigInt(buckets);
      if (firstZ(home, buckets, a) !== Number(exact)) wrong++;
    }
    // Homes with home · 2^32 ≡ 1 (mod B): the quotient lies 1/B above an integer, below half an ulp
    // of a double near 2^32, where a floating-point ceiling alone falls one short.
    const inverse = (x: bigint, m: bigint): bigint => {
      let [r0, r1, s0, s1] = [m, x % m, 0n, 1n];
      while (r1 !== 0n) {
        const q = r0 / r1;
        [r0, r1] = [r1, r0 - q * r1];
        [s0, s1] = [s1, s0 - q * s1];
      }
      return ((s0 % m) + m) % m;
    };
    let close = 0;
    for (let t = 0; t < 200; t++) {
      const buckets = 2 ** 29 + 2 * prng.int(2 ** 28) + 1;
      const home = Number(inverse(1n << 32n, BigInt(buckets)));
      const exact = (BigInt(home) * (1n << 32n) + BigInt(buckets) - 1n) / BigInt(buckets);
      if (Math.ceil((home * 2 ** 32) / buckets) !== Number(exact)) close++;
      if (firstZ(home, buckets, 32) !== Number(exact)) wrong++;
    }
    expect(close).toBeGreaterThan(0); // the cases the correction is for do occur
    expect(wrong).toBe(0);
  });
});

describe('a hashed order', () => {
  it('finds every entry at its slot, with its values, and gives its key back', () => {
    const input = randomInput(1, 20_000, 5_000, 3_000);
    const { table, slotOf } = HashedOrder.build(input);
    for (let i = 0; i < input.rows; i++) {
      const slot = table.find(input.contexts[i], input.words[i]);
      expect(slot).toBe(slotOf[i]);
      expect(table.value(slot, 0)).toBe(input.values[0][i]);
      expect(table.value(slot, 1)).toBe(input.values[1][i]);
      expect(table.keyAt(slot)).toEqual({ context: input.contexts[i], word: input.words[i] });
    }
  });

  it('finds no key it does not hold, and its other slots are empty', () => {
    const input = randomInput(2, 20_000, 5_000, 3_000);
    const { table, slotOf } = HashedOrder.build(input);
    const held = new Set<number>();
    for (let i = 0; i < input.rows; i++) held.add(input.contexts[i] * 4000 + input.words[i]);
    const prng = new Prng(3);
    let absent = 0;
    for (let t = 0; t < 50_000; t++) {
      const context = prng.int(5_000);
      const word = 1 + prng.int(3_000);
      if (held.has(context * 4000 + word)) continue;
      expect(table.find(context, word)).toBe(-1);
      absent++;
    }
    expect(absent).toBeGreaterThan(45_000);
    const used = new Set(slotOf);
    let empty = 0;
    for (let slot = 0; slot < table.layout.slots; slot++) {
      if (used.has(slot)) continue;
      expect(table.keyAt(slot)).toBeNull();
      empty++;
    }
    expect(empty).toBe(table.layout.slots - input.rows);
    // The last slot is always empty: a search never runs past the table.
    expect(used.has(table.layout.slots - 1)).toBe(false);
  });

  it('lays the entries out in order of home, each at or after its home bucket, in the fewest bits', () => {
    const input = randomInput(4, 30_000, 40_000, 70_000, [16]);
    const { table, slotOf } = HashedOrder.build(input);
    const layout = table.layout;
    expect(layout.buckets).toBe(Math.ceil(30_000 / (0.85 * 4)));
    expect(layout.wordBits).toBe(bitsFor(70_000));
    expect(layout.recordBits).toBe(layout.wordBits + layout.remainderBits + layout.displacementBits + 16);
    expect(table.words.length * 4).toBe(hashedOrderBytes(layout));
    // The largest displacement needs exactly displacementBits.
    let largest = 0;
    const order = [...slotOf].sort((a, b) => a - b);
    let previousHome = -1;
    for (const slot of order) {
      const key = table.keyAt(slot)!;
      const back = table.find(key.context, key.word);
      expect(back).toBe(slot);
      // Home = bucket − displacement, recomputed from the key.
      const home = homeOf(zOf(key.context, key.word, layout.mixBits), layout.buckets, layout.mixBits);
      expect(Math.floor(slot / layout.bucketSlots)).toBeGreaterThanOrEqual(home);
      expect(home).toBeGreaterThanOrEqual(previousHome);
      previousHome = home;
      largest = Math.max(largest, Math.floor(slot / layout.bucketSlots) - home);
    }
    expect(layout.displacementBits).toBe(bitsFor(largest));
  });

  it('is deterministic: the same entries give the same bytes', () => {
    const a = HashedOrder.build(randomInput(6, 5_000, 1_000, 900)).table;
    const b = HashedOrder.build(randomInput(6, 5_000, 1_000, 900)).table;
    expect(Buffer.from(a.words.buffer).equals(Buffer.from(b.words.buffer))).toBe(true);
  });

  it('is fixed: seeded entries give these bytes and slots (sha256; a change of layout changes them)', () => {
    // Values recorded from the first implementation (entries placed one by one in order of home),
    // which the two-pass builder reproduces.
    const cases: Array<[number, number, number, number, string]> = [
      [1, 20_000, 5_000, 3_000, 'd3da10adeaedd88f'],
      [4, 30_000, 40_000, 70_000, '55c8fad10178badf'],
      [7, 500, 1, 600, 'd41967a6267ff6d1'],
    ];
    for (const [seed, rows, contextSpace, wordMax, digest] of cases) {
      const { table, slotOf } = HashedOrder.build(randomInput(seed, rows, contextSpace, wordMax));
      expect(createHash('sha256').update(Buffer.from(table.words.buffer)).update(Buffer.from(slotOf.buffer)).digest('hex').slice(0, 16)).toBe(digest);
    }
  });

  it('the builder takes its passes in order: counting, then placing every counted entry', () => {
    const spec = { rows: 2, contextSpace: 10, wordMax: 10, valueBits: [8], load: 0.5, bucketSlots: 4 };
    const early = new HashedOrderBuilder(spec);
    early.count(1, 1);
    expect(() => early.place(1, 1, [0])).toThrow(/after endCounting/);
    expect(() => early.endCounting()).toThrow(/2 entries counted/);
    const builder = new HashedOrderBuilder(spec);
    builder.count(1, 1);
    builder.count(2, 3);
    builder.endCounting();
    expect(() => builder.count(4, 4)).toThrow(/counted before any is placed/);
    builder.place(1, 1, [7]);
    expect(() => builder.finish()).toThrow(/every counted entry placed/);
    expect(() => builder.place(2, 3, [256])).toThrow(/fits 8 bits/);
  });

  it('check() passes a table as built and names the first fault of a damaged one', () => {
    const input = randomInput(10, 20_000, 5_000, 3_000);
    const build = (): HashedOrder => HashedOrder.build(input).table;
    expect(build().check(5_000, 3_000)).toBeNull();
    expect(build().check(100, 3_000)).toMatch(/context \d+ above 99/);
    expect(build().check(5_000, 100)).toMatch(/word \d+ above 100/);
    const keyBits = (t: HashedOrder): number => t.layout.wordBits + t.layout.remainderBits + t.layout.displacementBits;
    const keyOf = (t: HashedOrder, slot: number): number => readField(t.words, slot * t.layout.recordBits, keyBits(t));
    const setKey = (t: HashedOrder, slot: number, key: number): void => writeField(t.words, slot * t.layout.recordBits, keyBits(t), key);
    const homeAt = (t: HashedOrder, slot: number): number => Math.floor(slot / 4) - (keyOf(t, slot) >>> (t.layout.wordBits + t.layout.remainderBits));
    // Two neighbours with the same home, the second displaced past its bucket's first slot.
    const t0 = build();
    let pair = -1;
    for (let slot = 0; slot + 1 < t0.layout.slots && pair < 0; slot++) {
      if (keyOf(t0, slot) !== 0 && keyOf(t0, slot + 1) !== 0 && homeAt(t0, slot) === homeAt(t0, slot + 1) && homeAt(t0, slot) * 4 <= slot) pair = slot;
    }
    expect(pair).toBeGreaterThanOrEqual(0);
    // An emptied slot in front of a record of the same home: that record could not be found.
    const t1 = build();
    setKey(t1, pair, 0);
    expect(t1.check(5_000, 3_000)).toMatch(new RegExp(`slot ${pair + 1}: the empty slot ${pair} lies between`));
    // A slot whose word is 0 but whose other key bits are not.
    const t2 = build();
    setKey(t2, pair, keyOf(t2, pair) & ~((1 << t2.layout.wordBits) - 1));
    expect(t2.check(5_000, 3_000)).toMatch(new RegExp(`slot ${pair}: an empty slot with`));
    // The same key twice.
    const t3 = build();
    const wordAndRemainder = (1 << (t3.layout.wordBits + t3.layout.remainderBits)) - 1;
    setKey(t3, pair + 1, (keyOf(t3, pair + 1) & ~wordAndRemainder) | (keyOf(t3, pair) & wordAndRemainder));
    expect(t3.check(5_000, 3_000)).toMatch(new RegExp(`slot ${pair + 1}: its key is held twice`));
    // A record's displacement set to 0, so its home moves up to its own bucket, past the next
    // record's home: caught there, or at the record itself when its remainder no longer fits.
    const t4 = build();
    let moved = -1;
    for (let slot = 0; slot + 1 < t4.layout.slots && moved < 0; slot++) {
      if (keyOf(t4, slot) !== 0 && keyOf(t4, slot + 1) !== 0 && homeAt(t4, slot) < Math.floor(slot / 4) && homeAt(t4, slot + 1) < Math.floor(slot / 4)) moved = slot;
    }
    expect(moved).toBeGreaterThanOrEqual(0);
    setKey(t4, moved, keyOf(t4, moved) & wordAndRemainder);
    expect(t4.check(5_000, 3_000)).toMatch(new RegExp(`^slot ${moved}: (its remainder names no z|context)|^slot ${moved + 1}: home bucket \\d+ before the previous record's`));
    // The last slot must stay empty.
    const t5 = build();
    setKey(t5, t5.layout.slots - 1, keyOf(t5, pair));
    expect(t5.check(5_000, 3_000)).toMatch(/the last, is not empty/);
  });

  it('rowOrder lists two orders built on each other in the order of their id tuples', () => {
    // Bigrams (id, id) and trigrams on top of them (their context a bigram's slot), as a model has.
    const prng = new Prng(11);
    const vocabulary = 70_000; // words above 2^16: the sort's second word digit is used
    const bigrams = new Map<string, [number, number]>();
    while (bigrams.size < 8_000) {
      const a = prng.int(vocabulary + 1);
      const b = 1 + prng.int(vocabulary);
      bigrams.set(`${a} ${b}`, [a, b]);
    }
    const pairs = [...bigrams.values()];
    const order2 = HashedOrder.build({
      rows: pairs.length, contextSpace: vocabulary + 1, wordMax: vocabulary, contexts: Uint32Array.from(pairs, ([a]) => a), words: Uint32Array.from(pairs, ([, b]) => b),
      valueBits: [8], values: [new Uint32Array(pairs.length)], load: 0.85, bucketSlots: 4,
    });
    const triples = new Map<string, [number, number, number, number]>(); // a b c, and the bigram's index
    while (triples.size < 12_000) {
      const index = prng.int(pairs.length);
      const c = 1 + prng.int(vocabulary);
      triples.set(`${pairs[index].join(' ')} ${c}`, [...pairs[index], c, index] as [number, number, number, number]);
    }
    const list = [...triples.values()];
    const order3 = HashedOrder.build({
      rows: list.length, contextSpace: order2.table.layout.slots, wordMax: vocabulary, contexts: Uint32Array.from(list, (t) => order2.slotOf[t[3]]), words: Uint32Array.from(list, (t) => t[2]),
      valueBits: [8], values: [new Uint32Array(list.length)], load: 0.85, bucketSlots: 4,
    });
    const byTuple = (x: number[], y: number[]): number => { for (let i = 0; i < x.length; i++) if (x[i] !== y[i]) return x[i] - y[i]; return 0; };
    const walk2 = rowOrder(order2.table, pairs.length, (id) => id);
    const expected2 = [...pairs].sort(byTuple);
    expect(Array.from(walk2.slots, (slot) => { const key = order2.table.keyAt(slot)!; return [key.context, key.word]; })).toEqual(expected2);
    const walk3 = rowOrder(order3.table, list.length, (slot) => walk2.rowOf[slot]);
    const expected3 = list.map((t) => t.slice(0, 3)).sort(byTuple);
    expect(Array.from(walk3.slots, (slot) => {
      const key = order3.table.keyAt(slot)!;
      const context = order2.table.keyAt(key.context)!;
      return [context.context, context.word, key.word];
    })).toEqual(expected3);
    expect(walk3.rowOf.filter((row) => row >= 0).length).toBe(list.length);
  });

  it('word-aligned records (keys padded to 32 bits) hold the same keys and values, read by index', () => {
    const input = { ...randomInput(13, 20_000, 5_000, 3_000, [32, 32]), alignKeys: true };
    const { table, slotOf } = HashedOrder.build(input);
    expect(table.layout.keyFieldBits).toBe(32);
    expect(table.layout.recordBits).toBe(96);
    const packed = HashedOrder.build({ ...input, alignKeys: false });
    expect(slotOf).toEqual(packed.slotOf); // the placement depends on the keys alone
    for (let i = 0; i < input.rows; i++) {
      const slot = table.find(input.contexts[i], input.words[i]);
      expect(slot).toBe(slotOf[i]);
      expect([table.value(slot, 0), table.value(slot, 1)]).toEqual([input.values[0][i], input.values[1][i]]);
      expect(table.keyAt(slot)).toEqual({ context: input.contexts[i], word: input.words[i] });
    }
    expect(table.find(4_999, 2_999) === -1 || table.keyAt(table.find(4_999, 2_999))!.word === 2_999).toBe(true);
    expect(table.check(5_000, 3_000)).toBeNull();
    // A padding bit set is damage.
    const slot = slotOf[0];
    table.words[slot * 3] = (table.words[slot * 3] | 0x80000000) >>> 0;
    expect(table.check(5_000, 3_000)).toMatch(new RegExp(`slot ${slot}: the key's padding bits are not zero`));
  });

  it('holds one entry, and a context space of one', () => {
    const one = HashedOrder.build({ rows: 1, contextSpace: 1, wordMax: 1, contexts: Uint32Array.of(0), words: Uint32Array.of(1), valueBits: [32], values: [Uint32Array.of(0xdeadbeef)], load: 0.5, bucketSlots: 4 }).table;
    const slot = one.find(0, 1);
    expect(slot).toBeGreaterThanOrEqual(0);
    expect(one.value(slot, 0)).toBe(0xdeadbeef);
    expect(one.keyAt(slot)).toEqual({ context: 0, word: 1 });
    const input = randomInput(7, 500, 1, 600);
    const { table } = HashedOrder.build(input);
    for (let i = 0; i < input.rows; i++) expect(table.keyAt(table.find(0, input.words[i]))).toEqual({ context: 0, word: input.words[i] });
  });
});

/** The `bits`-wide field at stream bit `bit` (little-endian u32 words, least significant bit first). */
function readField(words: Uint32Array, bit: number, bits: number): number {
  let value = 0;
  for (let i = 0; i < bits; i++) value += ((words[Math.floor((bit + i) / 32)] >>> ((bit + i) % 32)) & 1) * 2 ** i;
  return value;
}

function writeField(words: Uint32Array, bit: number, bits: number, value: number): void {
  for (let i = 0; i < bits; i++) {
    const word = Math.floor((bit + i) / 32);
    const mask = 1 << ((bit + i) % 32);
    words[word] = (Math.floor(value / 2 ** i) % 2 === 1 ? words[word] | mask : words[word] & ~mask) >>> 0;
  }
}
