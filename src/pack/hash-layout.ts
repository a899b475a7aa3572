/**
 * The hashed layout of one order of n-grams, the candidate for the model file's next version (not
 * written by `quern pack` yet; `npm run bench:lookup-layout` measures it against the file's own
 * lookups). Each n-gram of order n ≥ 2 is a key (its context's slot at order n − 1 — at order 2 the
 * context's word id — and its last word) with a few fixed-width values (log10 p, log10 back-off),
 * stored as one bit-packed record per slot of an open-addressing table:
 *
 *   record = word (W bits) | remainder (Q bits) | displacement (D bits) | value 0 | value 1 …
 *
 * (with `alignKeys`, the key's three fields are padded with zero bits to 32, so that with 32-bit
 * values every field of a record is a u32 read by index: faster, and larger)
 * so that a lookup finds the key and its values in one place, and the probes of a lookup's orders
 * depend only on the state (the context slots), not on each other.
 *
 * - Home bucket: z = (mix(context) + hash(word)) mod 2^a, with mix an a-bit bijection, so that z and
 *   the word give the context back; home = ⌊z · B / 2^a⌋ for B buckets of `bucketSlots` slots (a power
 *   of two). The z of one home lie in an interval shorter than 2^Q, so the record keeps z's low Q
 *   bits (the remainder) and the word instead of (word, context): the key exactly, in fewer bits,
 *   and no division on the lookup's path.
 * - Placement: ordered linear probing by buckets. Entries are laid out in order of home bucket, each
 *   at the first free slot at or after its bucket's first, so the displacement (its bucket − its home)
 *   is small and a search stops at an empty slot (word field 0: words are ≥ 1) or at an entry whose
 *   home is past the key's. One empty slot ends the table.
 */
import { assert } from '../errors.ts';
import { maskFor } from './bits.ts';
import { bitsFor } from './format.ts';
import { sortRowsByColumns } from '../count/radix.ts';

/** Extra bits of z above those of the bucket count: 2^a ≥ 8·B, so that homes are close to uniform. */
const MIX_BITS_ABOVE_BUCKETS = 3;
/** Largest key (word | remainder | displacement): one u32. */
const KEY_BITS_MAX = 32;
/** Largest value field. */
const VALUE_BITS_MAX = 32;
const MIX_MULTIPLIER_1 = 0x9e3779b1;
const MIX_MULTIPLIER_2 = 0x85ebca6b;

/** The inverse of an odd number modulo 2^32 (Newton's iteration: each step doubles the correct bits). */
function inverseOdd(m: number): number {
  let y = m >>> 0;
  for (let i = 0; i < 5; i++) y = Math.imul(y, (2 - Math.imul(m, y)) >>> 0) >>> 0;
  assert(Math.imul(m, y) >>> 0 === 1, 'an odd multiplier has an inverse modulo 2^32');
  return y;
}
const MIX_INVERSE_1 = inverseOdd(MIX_MULTIPLIER_1);
const MIX_INVERSE_2 = inverseOdd(MIX_MULTIPLIER_2);

/** A bijection of [0, 2^a), 1 ≤ a ≤ 32: multiply by odd constants and xor-shift right by ⌈a/2⌉, twice. */
export function mix(x: number, a: number): number {
  const mask = maskFor(a);
  const shift = (a + 1) >>> 1;
  x = (Math.imul(x, MIX_MULTIPLIER_1) & mask) >>> 0;
  x = (x ^ (x >>> shift)) >>> 0;
  x = (Math.imul(x, MIX_MULTIPLIER_2) & mask) >>> 0;
  return (x ^ (x >>> shift)) >>> 0;
}

/** The inverse of `mix` (a xor-shift by ⌈a/2⌉ ≥ a/2 is its own inverse). */
export function unmix(x: number, a: number): number {
  const mask = maskFor(a);
  const shift = (a + 1) >>> 1;
  x = (x ^ (x >>> shift)) >>> 0;
  x = (Math.imul(x, MIX_INVERSE_2) & mask) >>> 0;
  x = (x ^ (x >>> shift)) >>> 0;
  return (Math.imul(x, MIX_INVERSE_1) & mask) >>> 0;
}

/** 32-bit hash of a word id (the finaliser of MurmurHash3). */
export function hashWord(word: number): number {
  let h = word >>> 0;
  h = Math.imul(h ^ (h >>> 16), 0x85ebca6b) >>> 0;
  h = Math.imul(h ^ (h >>> 13), 0xc2b2ae35) >>> 0;
  return (h ^ (h >>> 16)) >>> 0;
}

/** ⌊z · buckets / 2^a⌋ exactly (z < 2^a ≤ 2^32, buckets < 2^31): the product split so that every
 *  intermediate stays below 2^53. */
export function homeOf(z: number, buckets: number, a: number): number {
  if (a <= 16) return Math.floor((z * buckets) / 2 ** a);
  const high = Math.floor(buckets / 65536);
  const low = buckets - high * 65536;
  return Math.floor((z * high + Math.floor((z * low) / 65536)) / 2 ** (a - 16));
}

/** The first z of home bucket `home`: ⌈home · 2^a / buckets⌉, exactly (computed in floating point,
 *  where home · 2^a may pass 2^53, then put right by a step at most with homeOf, or `homeOfZ`, the
 *  same function specialised to a layout: HashedOrder.home). */
export function firstZ(home: number, buckets: number, a: number, homeOfZ: (z: number) => number = (z) => homeOf(z, buckets, a)): number {
  const zSpan = 2 ** a;
  let first = Math.ceil((home * zSpan) / buckets);
  while (first > 0 && homeOfZ(first - 1) >= home) first--;
  while (first < zSpan && homeOfZ(first) < home) first++;
  return first;
}

/** z of (context, word) in an a-bit mix. */
export function zOf(context: number, word: number, a: number): number {
  return ((mix(context, a) + hashWord(word)) & maskFor(a)) >>> 0;
}

/** What an order's table is built from. */
export interface HashedOrderInput {
  /** Entries (n-grams of the order). */
  rows: number;
  /** Contexts are 0 .. contextSpace − 1. */
  contextSpace: number;
  /** Words are 1 .. wordMax. */
  wordMax: number;
  /** Each entry's context and word. */
  contexts: Uint32Array;
  words: Uint32Array;
  /** Widths (1..32 bits) of the value fields, and each field's value per entry (< 2^width). */
  valueBits: number[];
  values: Uint32Array[];
  /** Entries per slot, 0 < load < 1. */
  load: number;
  bucketSlots: number;
  /** Pad the key to 32 bits (HashedOrderLayout.keyFieldBits); default false. */
  alignKeys?: boolean;
}

/** The parameters a reader needs (all of them stored with the table in a file). */
export interface HashedOrderLayout {
  buckets: number;
  bucketSlots: number;
  /** Slots: the buckets', those entries pushed past the last bucket, and one empty slot. */
  slots: number;
  /** a: the width of z. */
  mixBits: number;
  wordBits: number;
  /** Q: the low bits of z a record keeps. */
  remainderBits: number;
  displacementBits: number;
  /** Width of the key field: word + remainder + displacement bits, or 32 for word-aligned records
   *  (the key padded with zero bits, so that with 32-bit values every field is a u32). */
  keyFieldBits: number;
  valueBits: number[];
  /** Bits of a record: the key field + the values. */
  recordBits: number;
}

/** Bytes of a table of `layout`: its records bit-packed, plus two spare u32 words. */
export function hashedOrderBytes(layout: HashedOrderLayout): number {
  return (Math.ceil((layout.slots * layout.recordBits) / 32) + 2) * 4;
}

/** The `mask`-wide field at stream bit `bit` (which may exceed 2^32: float math). */
function readBits(words: Uint32Array, bit: number, mask: number): number {
  const word = Math.floor(bit / 32);
  const shift = bit - word * 32;
  return (((words[word] >>> shift) | ((words[word + 1] << 1) << (31 - shift))) & mask) >>> 0;
}

function writeBits(words: Uint32Array, bit: number, width: number, value: number): void {
  if (width === 0) return;
  const word = Math.floor(bit / 32);
  const shift = bit - word * 32;
  words[word] = (words[word] | (value << shift)) >>> 0;
  if (shift + width > 32) words[word + 1] = (words[word + 1] | (value >>> (32 - shift))) >>> 0;
}

/** One order's table: built by `build`, read by `find`, `value` and `keyAt`. */
export class HashedOrder {
  readonly layout: HashedOrderLayout;
  /** The records, bit-packed (hashedOrderBytes). */
  readonly words: Uint32Array;
  // Derived from the layout, for the lookups. Shifts of 32 would be shifts of 0 in JS: the masks
  // (0 for an empty field) keep them right.
  private readonly wordMask: number;
  private readonly keyMask: number;
  private readonly keyFieldMask: number;
  /** Word-aligned records of u32 fields (keyFieldBits 32, values of 32 bits): read by index. */
  private readonly aligned: boolean;
  /** u32 words per record, when aligned. */
  private readonly stride: number;
  private readonly matchMask: number;
  private readonly remainderMask: number;
  private readonly displacementShift: number;
  private readonly displacementMask: number;
  private readonly bucketShift: number;
  // z and its home without a division or a power (zOf and homeOf, specialised to the layout).
  private readonly zMask: number;
  private readonly bucketsHigh: number;
  private readonly bucketsLow: number;
  /** 2^−a when a ≤ 16, else 2^−(a − 16). */
  private readonly homeScale: number;
  private readonly wideMix: boolean;
  /** 2^a, and 2^Q. */
  private readonly zSpan: number;
  private readonly remainderSpan: number;
  /** `home`, for firstZ. */
  private readonly homeOfZ: (z: number) => number;
  private readonly valueOffsets: number[];
  private readonly valueMasks: number[];

  constructor(layout: HashedOrderLayout, words: Uint32Array) {
    assert(words.length * 4 === hashedOrderBytes(layout), 'a table holds its records and two spare words');
    assert(Number.isInteger(Math.log2(layout.bucketSlots)), 'a power of two slots per bucket');
    this.layout = layout;
    this.words = words;
    const keyBits = layout.wordBits + layout.remainderBits + layout.displacementBits;
    assert(keyBits <= layout.keyFieldBits && layout.keyFieldBits <= KEY_BITS_MAX, `a key fits its field of at most ${KEY_BITS_MAX} bits`);
    this.keyFieldMask = maskFor(layout.keyFieldBits);
    this.aligned = layout.keyFieldBits === 32 && layout.valueBits.every((bits) => bits === 32);
    this.stride = layout.recordBits >>> 5;
    this.wordMask = maskFor(layout.wordBits);
    this.keyMask = maskFor(keyBits);
    this.matchMask = maskFor(layout.wordBits + layout.remainderBits);
    this.remainderMask = maskFor(layout.remainderBits);
    this.displacementShift = layout.wordBits + layout.remainderBits;
    this.displacementMask = maskFor(layout.displacementBits);
    this.bucketShift = Math.log2(layout.bucketSlots);
    const a = layout.mixBits;
    this.zMask = maskFor(a);
    this.wideMix = a > 16;
    this.bucketsHigh = Math.floor(layout.buckets / 65536);
    this.bucketsLow = layout.buckets - this.bucketsHigh * 65536;
    this.homeScale = this.wideMix ? 2 ** -(a - 16) : 2 ** -a;
    this.zSpan = 2 ** a;
    this.homeOfZ = (z) => this.home(z);
    this.remainderSpan = 2 ** layout.remainderBits;
    this.valueOffsets = [];
    this.valueMasks = [];
    let offset = layout.keyFieldBits;
    for (const bits of layout.valueBits) {
      this.valueOffsets.push(offset);
      this.valueMasks.push(maskFor(bits));
      offset += bits;
    }
  }

  /** Builds the table of `input` (HashedOrderBuilder, both passes over its arrays); `slotOf[i]` is
   *  entry i's slot. */
  static build(input: HashedOrderInput): { table: HashedOrder; slotOf: Int32Array } {
    const { rows, contexts, words, values } = input;
    const builder = new HashedOrderBuilder(input);
    for (let i = 0; i < rows; i++) builder.count(contexts[i], words[i]);
    builder.endCounting();
    const slotOf = new Int32Array(rows);
    const entryValues = new Array<number>(values.length);
    for (let i = 0; i < rows; i++) {
      for (let f = 0; f < values.length; f++) entryValues[f] = values[f][i];
      slotOf[i] = builder.place(contexts[i], words[i], entryValues);
    }
    return { table: builder.finish(), slotOf };
  }

  /** The slot of (context, word), or −1 when the table does not hold it. */
  find(context: number, word: number): number {
    const z = this.z(context, word);
    return this.findFrom(this.home(z), this.wantedOf(z, word));
  }

  /** z of (context, word) (`home` and `wantedOf` take it): zOf for this layout. */
  z(context: number, word: number): number {
    return ((mix(context, this.layout.mixBits) + hashWord(word)) & this.zMask) >>> 0;
  }

  /** The home bucket of a key's z: homeOf for this layout (multiplications by powers of two are exact). */
  home(z: number): number {
    if (!this.wideMix) return Math.floor(z * this.layout.buckets * this.homeScale);
    return Math.floor((z * this.bucketsHigh + Math.floor(z * this.bucketsLow * (1 / 65536))) * this.homeScale);
  }

  /** The word and remainder fields a record of the key holds. */
  wantedOf(z: number, word: number): number {
    return (word | ((z & this.remainderMask) << this.layout.wordBits)) >>> 0;
  }

  /** Reads the first word of bucket `home`'s records: a load issued ahead of `findFrom`, so that the
   *  memory reads of many lookups overlap. */
  touch(home: number): number {
    return this.words[Math.floor((home * this.layout.bucketSlots * this.layout.recordBits) / 32)];
  }

  /** The slot of the key whose home is `home` and whose fields are `wanted` (`wantedOf`), or −1. */
  findFrom(home: number, wanted: number): number {
    const recordBits = this.layout.recordBits;
    const words = this.words;
    const keyMask = this.keyMask;
    const wordMask = this.wordMask;
    const matchMask = this.matchMask;
    const displacementShift = this.displacementShift;
    const displacementMask = this.displacementMask;
    const bucketShift = this.bucketShift;
    let slot = home << bucketShift;
    if (this.aligned) {
      const stride = this.stride;
      for (let at = slot * stride; ; slot++, at += stride) {
        const key = words[at];
        if ((key & wordMask) === 0) return -1;
        const entryHome = (slot >>> bucketShift) - ((key >>> displacementShift) & displacementMask);
        if (entryHome === home && (key & matchMask) === wanted) return slot;
        if (entryHome > home) return -1;
      }
    }
    // The stream bit of the slot's record, as 32·word + shift, stepped without a division.
    let word = Math.floor((slot * recordBits) / 32);
    let shift = slot * recordBits - word * 32;
    const wordStep = recordBits >>> 5;
    const shiftStep = recordBits & 31;
    for (;;) {
      const key = (((words[word] >>> shift) | ((words[word + 1] << 1) << (31 - shift))) & keyMask) >>> 0;
      if ((key & wordMask) === 0) return -1;
      const entryHome = (slot >>> bucketShift) - ((key >>> displacementShift) & displacementMask);
      if (entryHome === home && (key & matchMask) === wanted) return slot;
      if (entryHome > home) return -1;
      slot++;
      word += wordStep;
      shift += shiftStep;
      if (shift >= 32) {
        shift -= 32;
        word++;
      }
    }
  }

  /** Value field `field` of the entry at `slot` (a slot `find` returned). */
  value(slot: number, field: number): number {
    if (this.aligned) return this.words[slot * this.stride + 1 + field];
    return readBits(this.words, slot * this.layout.recordBits + this.valueOffsets[field], this.valueMasks[field]);
  }

  /**
   * Checks what the lookups rely on, slot by slot: the last slot empty; every record's word in
   * 1..wordMax, its home (bucket − displacement) at or after the previous record's and with no empty
   * slot between its bucket's first slot and it (else a search would stop short), its remainder
   * naming a z of that home whose context is below contextSpace, and no key twice. Returns the first
   * fault, or null. (The values are whatever bits they are; a file checks its codes apart.)
   */
  check(contextSpace: number, wordMax: number): string | null {
    const layout = this.layout;
    const per = layout.bucketSlots;
    const words = this.words;
    const recordBits = layout.recordBits;
    if (readBits(words, (layout.slots - 1) * recordBits, this.keyMask) !== 0) return `slot ${layout.slots - 1}, the last, is not empty`;
    let lastEmpty = -1;
    let previousHome = -1;
    // The word and remainder of the records of the current home (a few), to find a key held twice.
    let sameHome = new Float64Array(16);
    let sameHomeCount = 0;
    for (let slot = 0; slot < layout.slots; slot++) {
      const key = readBits(words, slot * recordBits, this.keyMask);
      if (readBits(words, slot * recordBits, this.keyFieldMask) !== key) return `slot ${slot}: the key's padding bits are not zero`;
      const word = key & this.wordMask;
      if (word === 0) {
        if (key !== 0) return `slot ${slot}: an empty slot with a remainder or displacement`;
        lastEmpty = slot;
        continue;
      }
      if (word > wordMax) return `slot ${slot}: word ${word} above ${wordMax}`;
      const home = (slot >>> this.bucketShift) - ((key >>> this.displacementShift) & this.displacementMask);
      if (home < 0 || home >= layout.buckets) return `slot ${slot}: home bucket ${home} outside 0..${layout.buckets - 1}`;
      if (home < previousHome) return `slot ${slot}: home bucket ${home} before the previous record's ${previousHome}`;
      if (lastEmpty >= home * per) return `slot ${slot}: the empty slot ${lastEmpty} lies between it and its home bucket ${home}`;
      if (home !== previousHome) sameHomeCount = 0;
      const match = (key & this.matchMask) >>> 0;
      for (let i = 0; i < sameHomeCount; i++) if (sameHome[i] === match) return `slot ${slot}: its key is held twice`;
      if (sameHomeCount === sameHome.length) {
        const grown = new Float64Array(2 * sameHome.length);
        grown.set(sameHome);
        sameHome = grown;
      }
      sameHome[sameHomeCount++] = match;
      previousHome = home;
      const context = this.contextOf(home, word, (key >>> layout.wordBits) & this.remainderMask);
      if (context < 0) return `slot ${slot}: its remainder names no z of home bucket ${home}`;
      if (context >= contextSpace) return `slot ${slot}: context ${context} above ${contextSpace - 1}`;
    }
    return null;
  }

  /** The context whose key with `word` has home bucket `home` and these low bits of z, or −1 when
   *  no z of that home has them. */
  private contextOf(home: number, word: number, remainder: number): number {
    const layout = this.layout;
    const a = layout.mixBits;
    const buckets = layout.buckets;
    const first = firstZ(home, buckets, a, this.homeOfZ);
    const span = this.remainderSpan;
    const z = first + ((((remainder - first) % span) + span) % span);
    if (z >= this.zSpan || this.home(z) !== home) return -1;
    const x = (((z - (hashWord(word) & this.zMask)) & this.zMask) >>> 0);
    return unmix(x, a);
  }

  /** The (context, word) at `slot`, or null for an empty slot. */
  keyAt(slot: number): { context: number; word: number } | null {
    const word = this.wordAt(slot);
    return word === 0 ? null : { context: this.contextAt(slot), word };
  }

  /** The word of the record at `slot`, 0 for an empty slot. */
  wordAt(slot: number): number {
    return readBits(this.words, slot * this.layout.recordBits, this.keyMask) & this.wordMask;
  }

  /** The context of the record at `slot` (not an empty one). */
  contextAt(slot: number): number {
    const layout = this.layout;
    const key = readBits(this.words, slot * layout.recordBits, this.keyMask);
    const word = key & this.wordMask;
    if (word === 0) assert(false, `slot ${slot} holds a record`);
    const home = (slot >>> this.bucketShift) - ((key >>> this.displacementShift) & this.displacementMask);
    const context = this.contextOf(home, word, (key >>> layout.wordBits) & this.remainderMask);
    if (context < 0) assert(false, `slot ${slot}: its remainder names a z of its home`);
    return context;
  }
}

/** What a table is built for: HashedOrderInput without the entries themselves. */
export type HashedOrderSpec = Pick<HashedOrderInput, 'rows' | 'contextSpace' | 'wordMax' | 'valueBits' | 'load' | 'bucketSlots' | 'alignKeys'>;

/**
 * Builds one order's table in two passes over its entries, in the same order both times (a writer
 * reads the rows of a streamed model twice): `count` each entry, `endCounting`, then `place` each
 * entry, which writes its record and returns its slot, and `finish`. Memory: the table and one u32
 * per bucket, nothing per entry. The layout follows from the counts alone: bucket b's entries take
 * the slots from start(b) = max(b · bucketSlots, start(b − 1) + count(b − 1)) on, in the order they
 * come (what placing them one by one in order of home gives).
 */
export class HashedOrderBuilder {
  private readonly spec: HashedOrderSpec;
  private readonly buckets: number;
  private readonly mixBits: number;
  private readonly wordBits: number;
  private readonly remainderBits: number;
  private readonly remainderMask: number;
  /** Pass 1: entries per home bucket; pass 2: the next free slot of each bucket. */
  private readonly next: Uint32Array;
  private counted = 0;
  private placed = 0;
  private layout: HashedOrderLayout | null = null;
  private words: Uint32Array | null = null;

  constructor(spec: HashedOrderSpec) {
    const { rows, contextSpace, wordMax, valueBits, load, bucketSlots } = spec;
    assert(rows >= 1 && contextSpace >= 1 && wordMax >= 1, 'a table holds at least one entry');
    assert(load > 0 && load < 1 && Number.isInteger(Math.log2(bucketSlots)), 'load in (0, 1), a power of two slots per bucket');
    assert(valueBits.every((bits) => Number.isInteger(bits) && bits >= 1 && bits <= VALUE_BITS_MAX), 'value fields of 1..32 bits');
    this.spec = spec;
    this.buckets = Math.ceil(rows / (load * bucketSlots));
    assert(this.buckets * bucketSlots < 2 ** 31, 'fewer than 2^31 slots');
    this.mixBits = Math.min(32, Math.max(1, bitsFor(contextSpace - 1), bitsFor(this.buckets - 1) + MIX_BITS_ABOVE_BUCKETS));
    this.wordBits = bitsFor(wordMax);
    // The z of one home: fewer than ⌈2^a / B⌉ + 1, so remainderBits of them tell them apart.
    this.remainderBits = Math.min(this.mixBits, bitsFor(Math.ceil(2 ** this.mixBits / this.buckets)));
    this.remainderMask = maskFor(this.remainderBits);
    this.next = new Uint32Array(this.buckets);
  }

  private check(context: number, word: number): void {
    if (!(context < this.spec.contextSpace && word >= 1 && word <= this.spec.wordMax)) assert(false, `context ${context} and word ${word} in range`);
  }

  /** Pass 1: one entry. */
  count(context: number, word: number): void {
    assert(this.layout === null, 'entries are counted before any is placed');
    this.check(context, word);
    this.next[homeOf(zOf(context, word, this.mixBits), this.buckets, this.mixBits)]++;
    this.counted++;
  }

  /** Ends pass 1: fixes the layout and allocates the table. */
  endCounting(): HashedOrderLayout {
    assert(this.layout === null && this.counted === this.spec.rows, `${this.spec.rows} entries counted (got ${this.counted})`);
    const per = this.spec.bucketSlots;
    let free = 0;
    let displacementMax = 0;
    for (let b = 0; b < this.buckets; b++) {
      const count = this.next[b];
      const start = Math.max(b * per, free);
      this.next[b] = start;
      free = start + count;
      if (count > 0) displacementMax = Math.max(displacementMax, Math.floor((free - 1) / per) - b);
    }
    const displacementBits = bitsFor(displacementMax);
    const valueBits = [...this.spec.valueBits];
    const keyBits = this.wordBits + this.remainderBits + displacementBits;
    assert(keyBits <= KEY_BITS_MAX, `a key fits ${KEY_BITS_MAX} bits (word ${this.wordBits}, remainder ${this.remainderBits}, displacement ${displacementBits})`);
    const keyFieldBits = this.spec.alignKeys === true ? KEY_BITS_MAX : keyBits;
    const recordBits = keyFieldBits + valueBits.reduce((sum, bits) => sum + bits, 0);
    this.layout = {
      buckets: this.buckets, bucketSlots: per, slots: Math.max(this.buckets * per, free) + 1, mixBits: this.mixBits,
      wordBits: this.wordBits, remainderBits: this.remainderBits, displacementBits, keyFieldBits, valueBits, recordBits,
    };
    this.words = new Uint32Array(hashedOrderBytes(this.layout) / 4);
    return this.layout;
  }

  /** Pass 2: one entry, in the order of pass 1, with its value fields; returns its slot. */
  place(context: number, word: number, values: ArrayLike<number>): number {
    const layout = this.layout;
    const words = this.words;
    assert(layout !== null && words !== null, 'entries are placed after endCounting');
    this.check(context, word);
    const z = zOf(context, word, this.mixBits);
    const home = homeOf(z, this.buckets, this.mixBits);
    const slot = this.next[home]++;
    let bit = slot * layout.recordBits;
    writeBits(words, bit, layout.wordBits, word);
    bit += layout.wordBits;
    writeBits(words, bit, layout.remainderBits, (z & this.remainderMask) >>> 0);
    bit += layout.remainderBits;
    writeBits(words, bit, layout.displacementBits, Math.floor(slot / layout.bucketSlots) - home);
    bit = slot * layout.recordBits + layout.keyFieldBits;
    for (let f = 0; f < layout.valueBits.length; f++) {
      const value = values[f];
      if (!(Number.isInteger(value) && value >= 0 && value <= maskFor(layout.valueBits[f]))) assert(false, `value ${f} fits ${layout.valueBits[f]} bits (got ${value})`);
      writeBits(words, bit, layout.valueBits[f], value);
      bit += layout.valueBits[f];
    }
    this.placed++;
    return slot;
  }

  /** The table, once every counted entry is placed. */
  finish(): HashedOrder {
    assert(this.layout !== null && this.words !== null && this.placed === this.counted, `every counted entry placed (${this.placed} of ${this.counted})`);
    return new HashedOrder(this.layout, this.words);
  }
}

/** Digits of the row-order sort (sortRowsByColumns): 16 bits a pass. */
const ROW_SORT_DIGIT_BITS = 16;

/**
 * The entries of one order in row order: ascending by (the context's row at order n − 1, the
 * word), as the model file's rows and the ARPA text list them, for a walk over the model
 * (`quern export`). `contextRow(context)` gives a context's row at order n − 1 (at order 2 the
 * context is an id, its own row; above, a slot, whose row the previous call's `rowOf` gives).
 * Returns `slots[row]`, the slot of each row, and `rowOf[slot]`, the row of each slot (−1 for an
 * empty one). An LSD radix sort of (context row, word, slot) triples: 24 bytes per entry at most.
 */
export function rowOrder(table: HashedOrder, entries: number, contextRow: (context: number) => number): { slots: Uint32Array; rowOf: Int32Array } {
  const slotsTotal = table.layout.slots;
  const triples = new Uint32Array(entries * 3);
  let filled = 0;
  for (let slot = 0; slot < slotsTotal; slot++) {
    const word = table.wordAt(slot);
    if (word === 0) continue;
    assert(filled < entries, `at most ${entries} entries`);
    const row = contextRow(table.contextAt(slot));
    assert(Number.isInteger(row) && row >= 0, `slot ${slot}: its context has a row`);
    triples[filled * 3] = row;
    triples[filled * 3 + 1] = word;
    triples[filled * 3 + 2] = slot;
    filled++;
  }
  assert(filled === entries, `${entries} entries (found ${filled})`);
  // By context row, then word.
  const sorted = sortRowsByColumns(triples, new Uint32Array(entries * 3), entries, 3, [0, 1], ROW_SORT_DIGIT_BITS);
  const slots = new Uint32Array(entries);
  const rowOf = new Int32Array(slotsTotal).fill(-1);
  for (let row = 0; row < entries; row++) {
    const slot = sorted[row * 3 + 2];
    slots[row] = slot;
    rowOf[slot] = row;
  }
  return { slots, rowOf };
}
