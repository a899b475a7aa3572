/**
 * Bit-packed arrays of the model file (docs/model-file.md, "Packed integers"): value j of width b
 * occupies bits [j·b, (j+1)·b) of the stream, least significant bit first, where stream bit i is
 * bit i mod 8 of byte ⌊i/8⌋ — so, read as little-endian u32 words, bit i mod 32 of word ⌊i/32⌋.
 * The ⌊count·b / 32⌋ + 1 words that hold the values are followed by one spare zero word (so that a
 * reader may always read the word after the one a value starts in), then by one more zero word when
 * needed to end at a multiple of 8 bytes.
 */
import { assert } from '../errors.ts';
import { packedBytes } from './format.ts';

/** The mask of the low `bits` bits (0..32), as an unsigned number. */
export function maskFor(bits: number): number {
  return bits === 32 ? 0xffffffff : (1 << bits) - 1 >>> 0;
}

/**
 * Value `index` of a packed array of `bits`-bit values (0..32; `mask` = maskFor(bits)) held in
 * `words`. The caller keeps `index` below the array's count; the array's spare zero word after the
 * last value's words (packedBytes) keeps `word + 1` inside `words`, so the two words a value may
 * straddle are always both read: no branch to mispredict.
 */
export function unpack(words: Uint32Array, index: number, bits: number, mask: number): number {
  // Bit index·bits = 32·(index >>> 5)·bits + (index & 31)·bits, in small integers (index < 2^32).
  const rest = (index & 31) * bits;
  const word = (index >>> 5) * bits + (rest >>> 5);
  const shift = rest & 31;
  // (x << 1) << (31 − shift) is x << (32 − shift) for shift ≥ 1, and 0 for shift = 0.
  return (((words[word] >>> shift) | ((words[word + 1] << 1) << (31 - shift))) & mask) >>> 0;
}

/**
 * Packs values of a fixed width into u32 words, to be taken out in pieces as they fill (a section
 * is written while it is built; no whole array is held). `take` returns the complete words so far;
 * `finish` the rest, padded with zero words to a multiple of 8 bytes in all.
 */
export class BitPacker {
  private words: Uint32Array;
  private filled = 0;
  private pending = 0;
  private pendingBits = 0;
  private wordsOut = 0;
  private readonly mask: number;
  count = 0;

  constructor(readonly bits: number, capacityWords = 1 << 14) {
    assert(Number.isInteger(bits) && bits >= 0 && bits <= 32, 'packed values are 0..32 bits wide');
    this.words = new Uint32Array(capacityWords);
    this.mask = maskFor(bits);
  }

  /** Appends one value (0 ≤ value < 2^bits). */
  push(value: number): void {
    if (!(value >= 0 && value <= this.mask)) assert(false, `a packed value fits ${this.bits} bits (got ${value})`);
    this.count++;
    const bits = this.bits;
    if (bits === 0) return;
    const free = 32 - this.pendingBits;
    if (bits < free) {
      this.pending = (this.pending | (value << this.pendingBits)) >>> 0;
      this.pendingBits += bits;
      return;
    }
    if (this.filled === this.words.length) {
      const grown = new Uint32Array(this.words.length * 2);
      grown.set(this.words);
      this.words = grown;
    }
    this.words[this.filled++] = (this.pending | (value << this.pendingBits)) >>> 0;
    this.pending = free >= 32 ? 0 : value >>> free;
    this.pendingBits = bits - free;
  }

  /** The complete words appended since the last take (a copy). */
  take(): Uint8Array {
    const out = new Uint8Array(this.words.buffer.slice(0, this.filled * 4));
    this.wordsOut += this.filled;
    this.filled = 0;
    return out;
  }

  /** The remaining words: the partial one (perhaps empty), one spare zero word, and one more zero
   *  word when needed to end at a multiple of 8 bytes (packedBytes). */
  finish(): Uint8Array {
    let words = this.filled + 2;
    if ((this.wordsOut + words) % 2 === 1) words++;
    const out = new Uint32Array(words);
    out.set(this.words.subarray(0, this.filled));
    if (this.pendingBits > 0) out[this.filled] = this.pending;
    this.wordsOut += words;
    this.filled = 0;
    this.pending = 0;
    this.pendingBits = 0;
    assert(this.wordsOut * 4 === packedBytes(this.count, this.bits), 'a packed array takes packedBytes(count, bits)');
    return new Uint8Array(out.buffer);
  }
}
