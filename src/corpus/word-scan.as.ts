/**
 * The vocabulary pass's hot path (byte-tokenizer.ts `scanLines` with a `WordTable`) in
 * WebAssembly: AssemblyScript, compiled by `npm run build:wasm` into word-scan.wasm beside it
 * (committed; test/corpus/word-scan.test.ts checks that it is what this source compiles to). The
 * JavaScript side (word-memory.ts) lays out one memory:
 *
 *   the state (u32 words, S_* below) at 0, the byte classes (256 bytes) at CLASS_AT, the token
 *     batch (starts, ends, mixed hashes: BATCH_TOKENS u32 each) at BATCH_AT;
 *   a piece of text (whole lines), the entries written, the sentence ends and their lines;
 *   the word table: slots ([mixed hash, record + 1] per slot), the entry → record index, the arena
 *     of records ([entry, byte length, bytes…], 4-byte aligned) — word-table.ts reads and writes the
 *     same arrays through views, so either side may add a word.
 *
 * `scan` is scanLines over the piece: the same byte classes, multi-byte white space, FNV-1a hash and
 * fmix32, tokens looked up a batch of BATCH_TOKENS at a time (a warming read of every home slot and
 * its record first, so that the misses overlap), new words interned in order of first occurrence.
 * It returns early when the table must grow (its size at its maximum, or the arena without room for
 * a record); the caller grows it and calls again, and `scan` resumes where it stopped (the state
 * says where: the byte, the batch and how much of it is resolved).
 */

// State, byte offsets of u32 words (word-memory.ts has the same values).
const S_POS = 0;
const S_END = 4;
const S_TOKENS = 8;
const S_SENTENCES = 12;
const S_LINES = 16;
const S_BLANK_LINES = 20;
const S_LINE_FIRST_TOKEN = 24;
const S_PENDING = 28;
const S_RESOLVED = 32;
const S_SIZE = 36;
const S_SIZE_MAX = 40;
const S_MASK = 44;
const S_ARENA_WORDS = 48;
const S_ARENA_WORDS_MAX = 52;
const S_SLOTS_AT = 56;
const S_RECORDS_AT = 60;
const S_ARENA_AT = 64;
const S_INPUT_AT = 68;
const S_ENTRIES_AT = 72;
const S_ENDS_AT = 76;
const S_LINES_AT = 80;
const S_TOKEN_BASE = 84;
const S_LINE_BASE = 88;
const S_WARM = 92;
const S_NEED_WORDS = 96;

const CLASS_AT: usize = 128;
const BATCH_AT: usize = 384;
const BATCH_TOKENS: u32 = 256;
const BATCH_STARTS: usize = BATCH_AT;
const BATCH_ENDS: usize = BATCH_AT + (<usize>BATCH_TOKENS << 2);
const BATCH_HASHES: usize = BATCH_AT + (<usize>BATCH_TOKENS << 3);

// Byte classes (byte-tokenizer.ts).
const WORD: u8 = 0;
const SPACE: u8 = 1;
const NEWLINE: u8 = 2;

/** What `scan` returns (word-memory.ts has the same values). */
const DONE: u32 = 0;
/** The table holds its maximum of words: double its slots, then call again. */
const TABLE_FULL: u32 = 1;
/** The arena has no room for the next record (S_NEED_WORDS: its words): grow it, then call again. */
const ARENA_FULL: u32 = 2;

/** lookUp's results besides an entry (≥ 0) or −1 (absent, lookup mode). */
const LOOKUP_TABLE_FULL: i32 = -2;
const LOOKUP_ARENA_FULL: i32 = -3;

const FNV_OFFSET: u32 = 0x811c9dc5;
const FNV_PRIME: u32 = 0x01000193;

// The table, read from the state at each call.
let slots: usize = 0;
let records: usize = 0;
let arena: usize = 0;
let mask: u32 = 0;
let size: u32 = 0;
let sizeMax: u32 = 0;
let arenaWords: u32 = 0;
let arenaWordsMax: u32 = 0;
let input: usize = 0;

@inline function fmix(x: u32): u32 {
  let h = x;
  h ^= h >>> 16;
  h *= 0x85ebca6b;
  h ^= h >>> 13;
  h *= 0xc2b2ae35;
  return h ^ (h >>> 16);
}

/** byte-tokenizer.ts's multiByteSpaceWidth over the piece: the width of the multi-byte white-space
 *  character at p, or 0. */
@inline function spaceWidth(p: u32, end: u32): u32 {
  const b0 = load<u8>(input + p);
  if (b0 == 0xc2) return p + 1 < end && load<u8>(input + p + 1) == 0xa0 ? 2 : 0; // U+00A0
  if (p + 2 >= end) return 0;
  const b1 = load<u8>(input + p + 1);
  const b2 = load<u8>(input + p + 2);
  if (b0 == 0xe1) return b1 == 0x9a && b2 == 0x80 ? 3 : 0; // U+1680
  if (b0 == 0xe2) { // U+2000–U+200A, U+2028, U+2029, U+202F (E2 80 xx); U+205F (E2 81 9F)
    if (b1 == 0x80) return b2 <= 0x8a || b2 == 0xa8 || b2 == 0xa9 || b2 == 0xaf ? 3 : 0;
    return b1 == 0x81 && b2 == 0x9f ? 3 : 0;
  }
  if (b0 == 0xe3) return b1 == 0x80 && b2 == 0x80 ? 3 : 0; // U+3000
  if (b0 == 0xef) return b1 == 0xbb && b2 == 0xbf ? 3 : 0; // U+FEFF
  return 0;
}

/** True when the record at word `record` of the arena holds exactly the piece's bytes [start, end). */
@inline function holds(record: u32, start: u32, end: u32): bool {
  const at = arena + (<usize>record << 2);
  const length = end - start;
  if (load<u32>(at, 4) != length) return false;
  const word = at + 8;
  const token = input + start;
  let i: usize = 0;
  for (; i + 8 <= <usize>length; i += 8) if (load<u64>(word + i) != load<u64>(token + i)) return false;
  for (; i < <usize>length; i++) if (load<u8>(word + i) != load<u8>(token + i)) return false;
  return true;
}

/** The entry of the token [start, end) whose mixed hash is h; −1 when absent and not `intern`. */
function lookUp(start: u32, end: u32, h: u32, intern: bool): i32 {
  let slot = h & mask;
  for (;;) {
    const at = slots + (<usize>slot << 3);
    const stored = load<u32>(at, 4);
    if (stored == 0) break;
    if (load<u32>(at) == h && holds(stored - 1, start, end)) return load<i32>(arena + (<usize>(stored - 1) << 2));
    slot = (slot + 1) & mask;
  }
  if (!intern) return -1;
  if (size >= sizeMax) return LOOKUP_TABLE_FULL;
  const length = end - start;
  const recordWords = 2 + ((length + 3) >>> 2);
  if (arenaWords + recordWords > arenaWordsMax) {
    store<u32>(S_NEED_WORDS, recordWords);
    return LOOKUP_ARENA_FULL;
  }
  const entry = size;
  const record = arena + (<usize>arenaWords << 2);
  store<u32>(record, entry);
  store<u32>(record, length, 4);
  memory.copy(record + 8, input + start, length);
  store<u32>(records + (<usize>entry << 2), arenaWords);
  const at = slots + (<usize>slot << 3);
  store<u32>(at, h);
  store<u32>(at, arenaWords + 1, 4);
  arenaWords += recordWords;
  size = entry + 1;
  return entry;
}

/**
 * Looks up the batch's tokens from S_RESOLVED to `count`, the first of them token `first` of the
 * call (its entry at entries[first]). Returns DONE, or TABLE_FULL / ARENA_FULL with S_RESOLVED at
 * the token that needs the room.
 */
function resolve(first: u32, count: u32, intern: bool): u32 {
  const entries = <usize>load<u32>(S_ENTRIES_AT) + (<usize>first << 2);
  const from = load<u32>(S_RESOLVED);
  let warm: u32 = 0;
  for (let i = from; i < count; i++) {
    warm ^= load<u32>(slots + (<usize>(load<u32>(BATCH_HASHES + (<usize>i << 2)) & mask) << 3), 4);
  }
  for (let i = from; i < count; i++) {
    const stored = load<u32>(slots + (<usize>(load<u32>(BATCH_HASHES + (<usize>i << 2)) & mask) << 3), 4);
    if (stored != 0) warm ^= load<u32>(arena + (<usize>stored << 2));
  }
  store<u32>(S_WARM, warm);
  for (let i = from; i < count; i++) {
    const t = <usize>i << 2;
    const entry = lookUp(load<u32>(BATCH_STARTS + t), load<u32>(BATCH_ENDS + t), load<u32>(BATCH_HASHES + t), intern);
    if (entry < -1) {
      store<u32>(S_RESOLVED, i);
      return entry == LOOKUP_TABLE_FULL ? TABLE_FULL : ARENA_FULL;
    }
    store<i32>(entries + t, entry);
  }
  store<u32>(S_RESOLVED, 0);
  return DONE;
}

/**
 * Scans the piece from S_POS to S_END (whole lines, the last perhaps without its '\n'), appending
 * entries, sentence ends (S_TOKEN_BASE + tokens) and their lines (S_LINE_BASE + lines) and counting
 * lines and blank lines in the state. `intern`: new words are added; otherwise they read −1.
 */
export function scan(intern: bool): u32 {
  slots = <usize>load<u32>(S_SLOTS_AT);
  records = <usize>load<u32>(S_RECORDS_AT);
  arena = <usize>load<u32>(S_ARENA_AT);
  mask = load<u32>(S_MASK);
  size = load<u32>(S_SIZE);
  sizeMax = load<u32>(S_SIZE_MAX);
  arenaWords = load<u32>(S_ARENA_WORDS);
  arenaWordsMax = load<u32>(S_ARENA_WORDS_MAX);
  input = <usize>load<u32>(S_INPUT_AT);
  const ends = <usize>load<u32>(S_ENDS_AT);
  const endLines = <usize>load<u32>(S_LINES_AT);
  const tokenBase = load<u32>(S_TOKEN_BASE);
  const lineBase = load<u32>(S_LINE_BASE);
  const end = load<u32>(S_END);
  let p = load<u32>(S_POS);
  let tokens = load<u32>(S_TOKENS);
  let sentences = load<u32>(S_SENTENCES);
  let lines = load<u32>(S_LINES);
  let blankLines = load<u32>(S_BLANK_LINES);
  let lineFirstToken = load<u32>(S_LINE_FIRST_TOKEN);
  let pending = load<u32>(S_PENDING);
  let status = DONE;
  if (pending != 0) {
    status = resolve(tokens - pending, pending, intern);
    if (status == DONE) pending = 0;
  }
  while (status == DONE && p < end) {
    const c = load<u8>(CLASS_AT + <usize>load<u8>(input + p));
    if (c == SPACE) {
      p++;
      continue;
    }
    if (c == NEWLINE) {
      lines++;
      if (tokens == lineFirstToken) {
        blankLines++;
      } else {
        store<u32>(ends + (<usize>sentences << 2), tokenBase + tokens);
        store<u32>(endLines + (<usize>sentences << 2), lineBase + lines);
        sentences++;
      }
      lineFirstToken = tokens;
      p++;
      continue;
    }
    if (c != WORD) {
      const width = spaceWidth(p, end);
      if (width != 0) {
        p += width;
        continue;
      }
    }
    // A token starts at p: hash it while seeking its end.
    const start = p;
    let h = FNV_OFFSET;
    for (;;) {
      h = (h ^ <u32>load<u8>(input + p)) * FNV_PRIME;
      if (++p == end) break;
      const next = load<u8>(CLASS_AT + <usize>load<u8>(input + p));
      if (next == WORD) continue;
      if (next == SPACE || next == NEWLINE || spaceWidth(p, end) != 0) break;
    }
    const t = <usize>pending << 2;
    store<u32>(BATCH_STARTS + t, start);
    store<u32>(BATCH_ENDS + t, p);
    store<u32>(BATCH_HASHES + t, fmix(h));
    tokens++;
    if (++pending == BATCH_TOKENS) {
      status = resolve(tokens - pending, pending, intern);
      if (status == DONE) pending = 0;
    }
  }
  if (status == DONE && pending != 0) {
    status = resolve(tokens - pending, pending, intern);
    if (status == DONE) pending = 0;
  }
  if (status == DONE && end > 0 && load<u8>(input + end - 1) != 0x0a) {
    lines++;
    if (tokens == lineFirstToken) {
      blankLines++;
    } else {
      store<u32>(ends + (<usize>sentences << 2), tokenBase + tokens);
      store<u32>(endLines + (<usize>sentences << 2), lineBase + lines);
      sentences++;
    }
    lineFirstToken = tokens;
  }
  store<u32>(S_POS, p);
  store<u32>(S_TOKENS, tokens);
  store<u32>(S_SENTENCES, sentences);
  store<u32>(S_LINES, lines);
  store<u32>(S_BLANK_LINES, blankLines);
  store<u32>(S_LINE_FIRST_TOKEN, lineFirstToken);
  store<u32>(S_PENDING, pending);
  store<u32>(S_SIZE, size);
  store<u32>(S_ARENA_WORDS, arenaWords);
  return status;
}
