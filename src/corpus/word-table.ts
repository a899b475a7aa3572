/**
 * Word table: the distinct words of a text keyed by their UTF-8 bytes, each with a dense entry
 * number (0, 1, 2, … in order of first insertion). The hot path of both corpus passes looks every
 * token up here straight from the input bytes, so no string is made per token.
 *
 * Open addressing with linear probing over one Int32Array of [hash, record] pairs (one cache line
 * per probe); each word's record — its entry, its length and its bytes — lies in one arena, so a
 * lookup touches a slot and a record. Hashes are FNV-1a over the bytes, which a scanner can compute
 * while it looks for the token's end, then mixed (fmix32) before use.
 *
 * Where a WebAssembly memory can be had (engine 'auto'), the arrays are views of one (word-memory.ts)
 * and scanLines tokenizes into the table there (`scanPiece`, word-scan.as.ts); the methods below work
 * on the views as on ordinary arrays, so either side may add words, in the same order with the same
 * entries. Otherwise (engine 'js', or no memory) they are ordinary arrays and scanLines runs in
 * JavaScript.
 */
import { assert } from '../errors.ts';
import { WORD_SCAN_PIECE_BYTES, WORD_TABLE_LOAD_MAX, WORD_TABLE_SLOTS_MIN } from '../limits.ts';
import type { WasmEngine } from '../wasm-module.ts';
import { SCAN_DONE, SCAN_TABLE_FULL, WordMemory } from './word-memory.ts';

/** FNV-1a (32-bit) offset basis and prime: start a token's hash at the basis, then per byte
 *  `h = Math.imul(h ^ byte, FNV_PRIME)`. */
export const FNV_OFFSET = 0x811c9dc5 | 0;
export const FNV_PRIME = 0x01000193;

/** FNV-1a hash of bytes[start, end), as a scanner computes it byte by byte. */
export function hashBytes(bytes: Uint8Array, start: number, end: number): number {
  let h = FNV_OFFSET;
  for (let i = start; i < end; i++) h = Math.imul(h ^ bytes[i], FNV_PRIME);
  return h;
}

/** murmur3's fmix32: spreads FNV's weak low bits over the whole word. Result as int32. */
function fmix(h: number): number {
  h ^= h >>> 16;
  h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13;
  h = Math.imul(h, 0xc2b2ae35);
  return h ^ (h >>> 16);
}

/**
 * What the byte tokenizer looks tokens up in (scanLines, SentenceTextAdder, TokenReader): a word
 * table, or another index of words by their UTF-8 bytes and FNV-1a hash (`hashBytes`), such as a
 * model file's vocabulary (PackedModel.find). `find` gives a word's entry or −1; `intern`, which
 * adds a word, is needed only where words are added.
 */
export interface WordLookup {
  find(bytes: Uint8Array, start: number, end: number, hash: number): number;
  intern?(bytes: Uint8Array, start: number, end: number, hash: number): number;
  /** Many tokens at once, as `WordTable.lookupBatch` (hashes[0 .. count) may be overwritten). */
  lookupBatch?(bytes: Uint8Array, starts: Int32Array, ends: Int32Array, hashes: Int32Array, count: number, intern: boolean, entries: Int32Array, at: number): void;
}

export class WordTable implements WordLookup {
  /** [mixed hash, record + 1] per slot; 0 in the second word is an empty slot. */
  private slots: Int32Array;
  private mask: number;
  private sizeMax: number;
  /** Word records end to end, 4-byte aligned: [entry, byte length, bytes…]. A lookup reads one slot
   *  and one record: two cache lines, not three (no separate array of offsets on the way). */
  private arena8: Uint8Array;
  private arena32: Uint32Array;
  /** Words (32-bit) of the arena in use. */
  private arenaWords = 0;
  /** records[e]: where word e's record starts (in 32-bit words), for going from entry to word. */
  private records: Uint32Array;
  /** Words held. */
  size = 0;
  /** Where lookupBatch's warming reads leave their result, so that they are not optimised away. */
  warmSink = 0;
  /** A Buffer over the arena, for decoding words. */
  private arenaView: Buffer | undefined;
  /** Room to encode a word given as a string. */
  private scratch: Buffer = Buffer.allocUnsafe(256);
  /** The WebAssembly memory the arrays above are views of, or null: they are ordinary arrays. */
  private memory: WordMemory | null = null;

  /**
   * @param slots initial slots, a power of two (the table holds half as many words before it grows)
   * @param engine 'auto': the arrays in a WebAssembly memory, where scanLines tokenizes in
   *   WebAssembly, when one can be had; 'js': ordinary arrays (tests compare the two)
   */
  constructor(slots: number = WORD_TABLE_SLOTS_MIN, engine: WasmEngine = WORD_TABLE_ENGINE) {
    assert(slots >= 2 && (slots & (slots - 1)) === 0, `slots ${slots} must be a power of two`);
    this.mask = slots - 1;
    this.sizeMax = Math.floor(slots * WORD_TABLE_LOAD_MAX);
    const made = engine === 'js' ? null : WordMemory.create({ inputBytes: WORD_SCAN_PIECE_BYTES, slotCount: slots, sizeMax: this.sizeMax, arenaWordsMax: slots * 4 });
    if (made instanceof WordMemory) {
      this.memory = made;
      this.slots = made.slots;
      this.arena32 = made.arena32;
      this.arena8 = made.arena8;
      this.records = made.records;
    } else {
      this.slots = new Int32Array(2 * slots);
      this.arena32 = new Uint32Array(slots * 4);
      this.arena8 = new Uint8Array(this.arena32.buffer);
      this.records = new Uint32Array(this.sizeMax);
    }
  }

  /** A table with room for `words` words before it grows. */
  static sizedFor(words: number, engine: WasmEngine = WORD_TABLE_ENGINE): WordTable {
    let slots = WORD_TABLE_SLOTS_MIN;
    while (Math.floor(slots * WORD_TABLE_LOAD_MAX) < words) slots *= 2;
    return new WordTable(slots, engine);
  }

  /** True when the table lives in a WebAssembly memory (scanLines then scans in WebAssembly). */
  get inWasm(): boolean {
    return this.memory !== null;
  }

  /** Bytes held by the table's arrays. */
  get bytes(): number {
    return this.slots.byteLength + this.arena32.byteLength + this.records.byteLength;
  }

  /**
   * The entry of the word bytes[start, end) whose FNV-1a hash (`hashBytes`) is `hash`, or −1
   * when the table does not hold it.
   */
  find(bytes: Uint8Array, start: number, end: number, hash: number): number {
    return this.findMixed(bytes, start, end, fmix(hash));
  }

  /** Like `find`, but adds the word when it is new; returns its entry either way. */
  intern(bytes: Uint8Array, start: number, end: number, hash: number): number {
    return this.internMixed(bytes, start, end, fmix(hash));
  }

  /**
   * `find` (or with `intern`, `intern`) of `count` tokens at once: token i is bytes[starts[i],
   * ends[i]) with FNV-1a hash hashes[i], and its entry goes to entries[at + i]. The same entries as
   * one call per token, in the same order (so new words get the same entry numbers); but first a
   * read of every token's home slot, then of the record it holds, each a loop of independent loads,
   * so that the cache misses of a batch overlap instead of coming one after another.
   */
  lookupBatch(
    bytes: Uint8Array, starts: Int32Array, ends: Int32Array, hashes: Int32Array, count: number, intern: boolean,
    entries: Int32Array, at: number,
  ): void {
    const slots = this.slots;
    const mask = this.mask;
    const arena32 = this.arena32;
    let warm = 0;
    for (let i = 0; i < count; i++) {
      const h = fmix(hashes[i]);
      hashes[i] = h;
      warm ^= slots[2 * (h & mask) + 1];
    }
    for (let i = 0; i < count; i++) {
      const stored = slots[2 * (hashes[i] & mask) + 1];
      if (stored !== 0) warm ^= arena32[stored];
    }
    this.warmSink = warm;
    if (intern) for (let i = 0; i < count; i++) entries[at + i] = this.internMixed(bytes, starts[i], ends[i], hashes[i]);
    else for (let i = 0; i < count; i++) entries[at + i] = this.findMixed(bytes, starts[i], ends[i], hashes[i]);
  }

  private findMixed(bytes: Uint8Array, start: number, end: number, h: number): number {
    const slots = this.slots;
    const mask = this.mask;
    for (let slot = h & mask; ; slot = (slot + 1) & mask) {
      const stored = slots[2 * slot + 1];
      if (stored === 0) return -1;
      if (slots[2 * slot] === h && this.holds(stored - 1, bytes, start, end)) return this.arena32[stored - 1];
    }
  }

  private internMixed(bytes: Uint8Array, start: number, end: number, h: number): number {
    const slots = this.slots;
    const mask = this.mask;
    let slot = h & mask;
    for (; ; slot = (slot + 1) & mask) {
      const stored = slots[2 * slot + 1];
      if (stored === 0) break;
      if (slots[2 * slot] === h && this.holds(stored - 1, bytes, start, end)) return this.arena32[stored - 1];
    }
    if (this.size >= this.sizeMax) {
      this.grow();
      return this.internMixed(bytes, start, end, h);
    }
    const entry = this.size;
    const length = end - start;
    const record = this.arenaWords;
    const recordWords = 2 + ((length + 3) >>> 2);
    if (record + recordWords > this.arena32.length) this.growArena(recordWords);
    this.arena32[record] = entry;
    this.arena32[record + 1] = length;
    const arena8 = this.arena8;
    const from = 4 * (record + 2);
    for (let i = 0; i < length; i++) arena8[from + i] = bytes[start + i];
    this.arenaWords = record + recordWords;
    this.records[entry] = record;
    // this.slots, not `slots`: a table in a memory moved to a new one if its arena grew above.
    this.slots[2 * slot] = h;
    this.slots[2 * slot + 1] = record + 1;
    this.size = entry + 1;
    return entry;
  }

  /** Interns a word given as a string (setup and the string paths; not the byte hot path). */
  internWord(word: string): number {
    const length = this.encode(word);
    return this.intern(this.scratch, 0, length, hashBytes(this.scratch, 0, length));
  }

  /** The entry of a word given as a string, or −1. */
  findWord(word: string): number {
    const length = this.encode(word);
    return this.find(this.scratch, 0, length, hashBytes(this.scratch, 0, length));
  }

  /** Writes the UTF-8 bytes of `word` to the scratch buffer; returns their length. */
  private encode(word: string): number {
    if (this.scratch.length < 3 * word.length) this.scratch = Buffer.allocUnsafe(Math.max(3 * word.length, 2 * this.scratch.length));
    return this.scratch.write(word, 0, 'utf8');
  }

  /** The UTF-8 bytes of entry `entry` (a view into the arena, valid until the next insertion). */
  wordBytes(entry: number): Uint8Array {
    if (!(entry >= 0 && entry < this.size)) assert(false, `entry ${entry} must be in 0..${this.size - 1}`);
    const record = this.records[entry];
    return this.arena8.subarray(4 * (record + 2), 4 * (record + 2) + this.arena32[record + 1]);
  }

  /** The word of entry `entry` as a string. The bytes came from validated UTF-8 cut at code-point
   *  boundaries, so decoding gives back exactly the text's characters. */
  word(entry: number): string {
    if (!(entry >= 0 && entry < this.size)) assert(false, `entry ${entry} must be in 0..${this.size - 1}`);
    if (this.arenaView === undefined || this.arenaView.buffer !== this.arena8.buffer) {
      this.arenaView = Buffer.from(this.arena8.buffer, this.arena8.byteOffset, this.arena8.byteLength);
    }
    const record = this.records[entry];
    return this.arenaView.toString('utf8', 4 * (record + 2), 4 * (record + 2) + this.arena32[record + 1]);
  }

  /** True when the record at `record` holds exactly bytes[start, end). */
  private holds(record: number, bytes: Uint8Array, start: number, end: number): boolean {
    const length = end - start;
    if (this.arena32[record + 1] !== length) return false;
    const arena8 = this.arena8;
    const from = 4 * (record + 2);
    for (let i = 0; i < length; i++) if (arena8[from + i] !== bytes[start + i]) return false;
    return true;
  }

  /**
   * scanLines' work on bytes[start, end) — whole lines, the last perhaps without its '\n' — in
   * WebAssembly: the text copied into the table's memory and scanned there, the table grown as it
   * fills. Returns the memory, whose `entries`, `sentenceEnds` and `sentenceLines` hold the piece's
   * tokens and sentences (the ends counted from token `tokenBase`, the lines from line `lineBase`),
   * or null when the table has no memory (any more: one it outgrew could not be replaced, and the
   * table moved to ordinary arrays, holding the words the piece added so far): scan the piece in
   * JavaScript then, which finds those words with the same entries.
   */
  scanPiece(bytes: Uint8Array, start: number, end: number, intern: boolean, tokenBase: number, lineBase: number): WordMemory | null {
    if (this.memory === null) return null;
    if (end - start > this.memory.layout.inputBytes) {
      this.reallocate(this.mask + 1, this.arena32.length, Math.max(end - start, 2 * this.memory.layout.inputBytes));
      if (this.memory === null) return null;
    }
    let memory = this.memory;
    memory.input.set(bytes.subarray(start, end));
    memory.beginPiece(end - start, tokenBase, lineBase);
    for (;;) {
      const status = memory.scan(intern, this.size, this.arenaWords);
      this.size = memory.size;
      this.arenaWords = memory.arenaWords;
      if (status === SCAN_DONE) return memory;
      if (status === SCAN_TABLE_FULL) this.grow();
      else this.growArena(memory.needWords);
      if (this.memory === null) return null;
      memory = this.memory;
    }
  }

  /** Room in the arena for a record of `recordWords` words more. */
  private growArena(recordWords: number): void {
    this.reallocate(this.mask + 1, Math.max(2 * this.arena32.length, this.arenaWords + recordWords));
  }

  /** Doubles the slots, re-placing every word by its stored hash (the words are not read). */
  private grow(): void {
    this.reallocate(2 * (this.mask + 1), this.arena32.length);
  }

  /**
   * Moves the table to arrays of `slotCount` slots and `arenaWordsMax` arena words (and, in a
   * memory, a piece region of `inputBytes`): when it has a memory, that memory grown (the arena
   * alone) or a new one — or, when neither can be had, ordinary arrays from then on — else new
   * arrays where the size changed. Words keep their
   * records and entries; slots are re-placed by their stored hashes when their count changed.
   */
  private reallocate(slotCount: number, arenaWordsMax: number, inputBytes?: number): void {
    const sizeMax = Math.floor(slotCount * WORD_TABLE_LOAD_MAX);
    if (this.memory !== null && inputBytes === undefined && this.growInPlace(this.memory, slotCount, sizeMax, arenaWordsMax)) return;
    const old = { slots: this.slots, records: this.records, arena32: this.arena32, inMemory: this.memory !== null };
    let memory: WordMemory | null = null;
    if (this.memory !== null) {
      const next = this.memory.resized({ inputBytes: inputBytes ?? this.memory.layout.inputBytes, slotCount, sizeMax, arenaWordsMax });
      if (next instanceof WordMemory) memory = next;
    }
    this.memory = memory;
    if (memory !== null) {
      this.viewsOf(memory);
    } else {
      // Arrays of a size that did not change are kept, unless they were views of the memory left.
      if (old.inMemory || old.slots.length !== 2 * slotCount) this.slots = new Int32Array(2 * slotCount);
      if (old.inMemory || old.records.length !== sizeMax) this.records = new Uint32Array(sizeMax);
      if (old.inMemory || old.arena32.length !== arenaWordsMax) {
        this.arena32 = new Uint32Array(arenaWordsMax);
        this.arena8 = new Uint8Array(this.arena32.buffer);
      }
    }
    if (this.records !== old.records) this.records.set(old.records.subarray(0, this.size));
    if (this.arena32 !== old.arena32) this.arena32.set(old.arena32.subarray(0, this.arenaWords));
    this.mask = slotCount - 1;
    this.sizeMax = sizeMax;
    if (this.slots === old.slots) return;
    if (old.slots.length === 2 * slotCount) this.slots.set(old.slots);
    else this.place(old.slots);
  }

  /** `reallocate` in the table's memory, grown where it is; false when it cannot grow. */
  private growInPlace(memory: WordMemory, slotCount: number, sizeMax: number, arenaWordsMax: number): boolean {
    if (arenaWordsMax !== this.arena32.length) {
      if (!memory.growArena(arenaWordsMax)) return false;
      this.viewsOf(memory);
    }
    if (slotCount !== this.mask + 1) {
      const oldSlots = memory.growTable(slotCount, sizeMax, this.size, this.arenaWords);
      if (oldSlots === null) return false;
      this.viewsOf(memory);
      this.mask = slotCount - 1;
      this.sizeMax = sizeMax;
      this.place(oldSlots);
    }
    return true;
  }

  /** The arrays as the memory's views (made again whenever it grows). */
  private viewsOf(memory: WordMemory): void {
    this.slots = memory.slots;
    this.records = memory.records;
    this.arena32 = memory.arena32;
    this.arena8 = memory.arena8;
  }

  /** Places every word of `oldSlots` in the (empty) slots by its stored hash. */
  private place(oldSlots: Int32Array): void {
    const slots = this.slots;
    const mask = this.mask;
    for (let i = 0; i < oldSlots.length; i += 2) {
      if (oldSlots[i + 1] === 0) continue;
      let slot = oldSlots[i] & mask;
      while (slots[2 * slot + 1] !== 0) slot = (slot + 1) & mask;
      slots[2 * slot] = oldSlots[i];
      slots[2 * slot + 1] = oldSlots[i + 1];
    }
  }
}

/** The engine of the tables made without one. */
const WORD_TABLE_ENGINE: WasmEngine = 'auto';
