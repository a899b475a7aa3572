/**
 * A word table's arrays in one WebAssembly memory, beside what word-scan.wasm (compiled from
 * word-scan.as.ts by `npm run build:wasm`) needs to tokenize a piece of text into it: the state, the
 * byte classes, a token batch, the piece, and the entries, sentence ends and sentence lines it
 * writes. word-table.ts keeps its slots, records and arena here as views (its JavaScript methods
 * work on them unchanged) and, in `scanPiece`, runs the scan.
 *
 * The table's regions come last, the arena at the end: a table grows with its memory, in place
 * (`growArena`, `growTable`: the views are made again; a new memory would cost a fresh reservation,
 * the pages of everything copied, and garbage collections). A piece larger than the piece region
 * moves the table to a new memory (`resized`), as an ordinary table moves to new arrays.
 */
import { assert } from '../errors.ts';
import { WASM_MEMORY_BYTES_MAX } from '../limits.ts';
import { instanceWithMemory, wasmModuleAt } from '../wasm-module.ts';
import { byteClasses } from './byte-class.ts';

// State words (u32 index; word-scan.as.ts has them as byte offsets, S_* = 4 × these).
const S_POS = 0;
const S_END = 1;
const S_TOKENS = 2;
const S_SENTENCES = 3;
const S_LINES = 4;
const S_BLANK_LINES = 5;
const S_LINE_FIRST_TOKEN = 6;
const S_PENDING = 7;
const S_RESOLVED = 8;
const S_SIZE = 9;
const S_SIZE_MAX = 10;
const S_MASK = 11;
const S_ARENA_WORDS = 12;
const S_ARENA_WORDS_MAX = 13;
const S_SLOTS_AT = 14;
const S_RECORDS_AT = 15;
const S_ARENA_AT = 16;
const S_INPUT_AT = 17;
const S_ENTRIES_AT = 18;
const S_ENDS_AT = 19;
const S_LINES_AT = 20;
const S_TOKEN_BASE = 21;
const S_LINE_BASE = 22;
const S_NEED_WORDS = 24;
const STATE_WORDS = 32;
const CLASS_AT = 128;
/** The token batch (3 × 256 u32 from byte 384) ends at 3,456; the piece starts after this. */
const FIXED_BYTES = 4096;

/** What `scan` returns (word-scan.as.ts). */
export const SCAN_DONE = 0;
/** The table holds its maximum of words: double its slots, then scan again. */
export const SCAN_TABLE_FULL = 1;
/** The arena has no room for the next record (`needWords`): grow it, then scan again. */
export const SCAN_ARENA_FULL = 2;

/** The sizes of a memory's regions. */
export interface WordMemoryLayout {
  /** Bytes of text a piece may have. */
  inputBytes: number;
  slotCount: number;
  /** Words the table holds before it must grow (the records' length). */
  sizeMax: number;
  arenaWordsMax: number;
}

const PAGE_BYTES = 65536;

const align8 = (bytes: number): number => Math.ceil(bytes / 8) * 8;

/** Tokens (and sentences) a piece of `bytes` can hold at most: each needs a byte and a separator. */
const outputsFor = (bytes: number): number => Math.floor((bytes + 1) / 2);

type Scan = (intern: number) => number;

const BYTE_CLASSES = byteClasses();

const scanModule = wasmModuleAt(new URL('./word-scan.wasm', import.meta.url));

export class WordMemory {
  layout: WordMemoryLayout;
  // Views, made again when the arena grows (growing the memory detaches the old ones).
  slots!: Int32Array;
  records!: Uint32Array;
  arena32!: Uint32Array;
  arena8!: Uint8Array;
  /** The piece of text being scanned. */
  input!: Uint8Array;
  /** A scan's outputs: entries, and sentence ends and lines (as a TokenBlock's). */
  entries!: Int32Array;
  sentenceEnds!: Uint32Array;
  sentenceLines!: Uint32Array;
  private state!: Uint32Array;
  private bytes!: Uint8Array;
  private readonly memory: WebAssembly.Memory;
  private readonly run: Scan;

  private constructor(memory: WebAssembly.Memory, run: Scan, layout: WordMemoryLayout) {
    this.memory = memory;
    this.run = run;
    this.layout = layout;
    this.makeViews();
    this.bytes.set(BYTE_CLASSES, CLASS_AT);
  }

  /** The views of the layout's regions, and their offsets and bounds in the state. */
  private makeViews(): void {
    const layout = this.layout;
    const buffer = this.memory.buffer;
    const outputs = outputsFor(layout.inputBytes);
    const inputAt = FIXED_BYTES;
    const entriesAt = align8(inputAt + layout.inputBytes);
    const endsAt = entriesAt + 4 * outputs;
    const linesAt = endsAt + 4 * outputs;
    const slotsAt = align8(linesAt + 4 * outputs);
    const recordsAt = slotsAt + 8 * layout.slotCount;
    const arenaAt = align8(recordsAt + 4 * layout.sizeMax);
    assert(arenaAt + 4 * layout.arenaWordsMax <= buffer.byteLength, 'the layout fits the memory');
    this.bytes = new Uint8Array(buffer);
    this.state = new Uint32Array(buffer, 0, STATE_WORDS);
    this.input = new Uint8Array(buffer, inputAt, layout.inputBytes);
    this.entries = new Int32Array(buffer, entriesAt, outputs);
    this.sentenceEnds = new Uint32Array(buffer, endsAt, outputs);
    this.sentenceLines = new Uint32Array(buffer, linesAt, outputs);
    this.slots = new Int32Array(buffer, slotsAt, 2 * layout.slotCount);
    this.records = new Uint32Array(buffer, recordsAt, layout.sizeMax);
    this.arena32 = new Uint32Array(buffer, arenaAt, layout.arenaWordsMax);
    this.arena8 = new Uint8Array(buffer, arenaAt, 4 * layout.arenaWordsMax);
    const state = this.state;
    state[S_SLOTS_AT] = slotsAt;
    state[S_RECORDS_AT] = recordsAt;
    state[S_ARENA_AT] = arenaAt;
    state[S_INPUT_AT] = inputAt;
    state[S_ENTRIES_AT] = entriesAt;
    state[S_ENDS_AT] = endsAt;
    state[S_LINES_AT] = linesAt;
    state[S_SIZE_MAX] = layout.sizeMax;
    state[S_MASK] = layout.slotCount - 1;
    state[S_ARENA_WORDS_MAX] = layout.arenaWordsMax;
  }

  /**
   * Room for `arenaWordsMax` words in the arena, the last region: the memory grows in place (nothing
   * moves, nothing is copied, a scan in progress carries on) and every view is made again; false when
   * it cannot (over WASM_MEMORY_BYTES_MAX, or no more address space).
   */
  growArena(arenaWordsMax: number): boolean {
    assert(arenaWordsMax >= this.layout.arenaWordsMax, 'an arena never shrinks');
    const layout = { ...this.layout, arenaWordsMax };
    const bytes = WordMemory.bytesFor(layout);
    if (bytes > WASM_MEMORY_BYTES_MAX) return false;
    const pages = Math.ceil((bytes - this.memory.buffer.byteLength) / PAGE_BYTES);
    try {
      if (pages > 0) this.memory.grow(pages);
    } catch {
      return false;
    }
    this.layout = layout;
    this.makeViews();
    return true;
  }

  /**
   * Room for a table of `slotCount` slots and `sizeMax` words, its `size` words and `arenaWords` arena
   * words kept: the memory grows in place, the arena and the records move up (nothing before them
   * moves, so a scan in progress carries on), the slots are emptied and every view is made again.
   * Returns the old slots, for the caller to place again by their hashes; null when the memory
   * cannot grow (over WASM_MEMORY_BYTES_MAX, or no more address space).
   */
  growTable(slotCount: number, sizeMax: number, size: number, arenaWords: number): Int32Array | null {
    assert(slotCount > this.layout.slotCount && sizeMax >= this.layout.sizeMax && size <= sizeMax && arenaWords <= this.layout.arenaWordsMax, 'a table grows');
    const layout = { ...this.layout, slotCount, sizeMax };
    const bytes = WordMemory.bytesFor(layout);
    if (bytes > WASM_MEMORY_BYTES_MAX) return null;
    const oldSlots = this.slots.slice();
    const oldRecordsAt = this.records.byteOffset;
    const oldArenaAt = this.arena32.byteOffset;
    const pages = Math.ceil((bytes - this.memory.buffer.byteLength) / PAGE_BYTES);
    try {
      if (pages > 0) this.memory.grow(pages);
    } catch {
      return null;
    }
    this.layout = layout;
    this.makeViews();
    // Last region first, each to a higher address: nothing is overwritten before it is moved.
    this.bytes.copyWithin(this.arena32.byteOffset, oldArenaAt, oldArenaAt + 4 * arenaWords);
    this.bytes.copyWithin(this.records.byteOffset, oldRecordsAt, oldRecordsAt + 4 * size);
    this.slots.fill(0);
    return oldSlots;
  }

  /** Bytes of memory a layout takes. */
  static bytesFor(layout: WordMemoryLayout): number {
    const outputs = outputsFor(layout.inputBytes);
    return align8(align8(align8(FIXED_BYTES + layout.inputBytes) + 12 * outputs) + 8 * layout.slotCount + 4 * layout.sizeMax) + 4 * layout.arenaWordsMax;
  }

  /** A memory of `layout`, its table empty, or why there is none (WebAssembly cannot be had here). */
  static create(layout: WordMemoryLayout): WordMemory | Error {
    assert(layout.slotCount >= 2 && (layout.slotCount & (layout.slotCount - 1)) === 0 && layout.sizeMax < layout.slotCount,
      `a word memory of ${layout.slotCount} slots (a power of two) for at most ${layout.sizeMax} words`);
    const bytes = WordMemory.bytesFor(layout);
    if (bytes > WASM_MEMORY_BYTES_MAX) return new Error(`a word table of ${bytes} bytes is over the WebAssembly memory's ${WASM_MEMORY_BYTES_MAX}`);
    const made = instanceWithMemory(scanModule(), bytes, true);
    if (made instanceof Error) return made;
    return new WordMemory(made.memory, made.instance.exports.scan as Scan, layout);
  }

  /**
   * A memory of a larger `layout` holding this one's scan (the state, the token batch, the piece and
   * the outputs so far), so that a scan stopped for room resumes there; its table is empty: the
   * caller moves the words over. Or why there is none.
   */
  resized(layout: WordMemoryLayout): WordMemory | Error {
    assert(layout.inputBytes >= this.layout.inputBytes, 'a piece region never shrinks under a scan');
    const next = WordMemory.create(layout);
    if (next instanceof Error) return next;
    const state = this.state;
    const kept = next.state.slice();
    next.bytes.set(this.bytes.subarray(CLASS_AT, FIXED_BYTES), CLASS_AT);
    next.state.set(state);
    // The new layout's offsets and bounds, the old scan's position and counts.
    for (const word of [S_SLOTS_AT, S_RECORDS_AT, S_ARENA_AT, S_INPUT_AT, S_ENTRIES_AT, S_ENDS_AT, S_LINES_AT, S_SIZE_MAX, S_MASK, S_ARENA_WORDS_MAX]) next.state[word] = kept[word];
    next.input.set(this.input.subarray(0, Math.min(state[S_END], this.input.length)));
    next.entries.set(this.entries.subarray(0, Math.min(state[S_TOKENS], this.entries.length)));
    const sentences = Math.min(state[S_SENTENCES], this.sentenceEnds.length);
    next.sentenceEnds.set(this.sentenceEnds.subarray(0, sentences));
    next.sentenceLines.set(this.sentenceLines.subarray(0, sentences));
    return next;
  }

  /** Starts a scan of the `bytes` of text now in `input`, its first sentence end to be written as
   *  token `tokenBase`, its first line as line `lineBase` + 1 (the block's counts so far). */
  beginPiece(bytes: number, tokenBase: number, lineBase: number): void {
    assert(bytes <= this.input.length, `a piece of ${bytes} bytes in a region of ${this.input.length}`);
    const state = this.state;
    state[S_POS] = 0;
    state[S_END] = bytes;
    state[S_TOKENS] = 0;
    state[S_SENTENCES] = 0;
    state[S_LINES] = 0;
    state[S_BLANK_LINES] = 0;
    state[S_LINE_FIRST_TOKEN] = 0;
    state[S_PENDING] = 0;
    state[S_RESOLVED] = 0;
    state[S_TOKEN_BASE] = tokenBase;
    state[S_LINE_BASE] = lineBase;
  }

  /**
   * Scans on from where the piece's scan stopped, with the table's `size` words in `arenaWords`
   * words of its arena. Returns SCAN_DONE, or SCAN_TABLE_FULL / SCAN_ARENA_FULL: grow, then call
   * again (on the memory the table then lives in). Read `size` and `arenaWords` back afterwards.
   */
  scan(intern: boolean, size: number, arenaWords: number): number {
    const state = this.state;
    assert(size <= this.layout.sizeMax && arenaWords <= this.layout.arenaWordsMax, 'the table fits its memory');
    state[S_SIZE] = size;
    state[S_ARENA_WORDS] = arenaWords;
    return this.run(intern ? 1 : 0);
  }

  get size(): number {
    return this.state[S_SIZE];
  }

  get arenaWords(): number {
    return this.state[S_ARENA_WORDS];
  }

  /** Arena words the record that did not fit needs (after SCAN_ARENA_FULL). */
  get needWords(): number {
    return this.state[S_NEED_WORDS];
  }

  /** The finished piece's tokens, sentences, lines and blank lines. */
  get tokens(): number {
    return this.state[S_TOKENS];
  }

  get sentences(): number {
    return this.state[S_SENTENCES];
  }

  get lines(): number {
    return this.state[S_LINES];
  }

  get blankLines(): number {
    return this.state[S_BLANK_LINES];
  }
}
